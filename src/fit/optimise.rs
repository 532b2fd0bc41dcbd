//! One L-BFGS run from one start, through argmin.

use crate::likelihood::SubjectLikelihood;
use argmin::core::{
    CostFunction, Error, Executor, Gradient, State, TerminationReason, TerminationStatus,
};
use argmin::solver::linesearch::MoreThuenteLineSearch;
use argmin::solver::quasinewton::LBFGS;
use std::cell::RefCell;

/// Cost returned for a point where the log-posterior is not finite, so that the line search
/// steps back instead of stopping.
const INVALID_COST: f64 = 1e100;

/// The outcome of one start.
#[derive(Clone, Debug, PartialEq)]
pub struct StartResult {
    /// Unconstrained optimum.
    pub theta: Vec<f64>,
    /// ln L + ln prior there.
    pub objective: f64,
    /// Why the run stopped.
    pub termination: String,
    /// The solver's own convergence test ended the run.
    pub solver_converged: bool,
}

/// The last evaluation: (θ, cost, gradient).
type Cached = (Vec<f64>, f64, Vec<f64>);

/// The negative log-posterior as an argmin problem, caching the last evaluation because argmin
/// asks for cost and gradient separately at the same point.
struct Problem<'a, 'b> {
    likelihood: &'a SubjectLikelihood<'b>,
    cache: RefCell<Option<Cached>>,
}

impl Problem<'_, '_> {
    fn evaluate(&self, theta: &[f64]) -> (f64, Vec<f64>) {
        if let Some((at, cost, grad)) = self.cache.borrow().as_ref()
            && at.as_slice() == theta
        {
            return (*cost, grad.clone());
        }
        let e = self.likelihood.evaluate(theta);
        let objective = e.ln_likelihood + e.ln_prior;
        let (cost, grad) = if objective.is_finite() && e.gradient.iter().all(|g| g.is_finite()) {
            (-objective, e.gradient.iter().map(|g| -g).collect())
        } else {
            (INVALID_COST, vec![0.0; theta.len()])
        };
        *self.cache.borrow_mut() = Some((theta.to_vec(), cost, grad.clone()));
        (cost, grad)
    }
}

impl CostFunction for Problem<'_, '_> {
    type Param = Vec<f64>;
    type Output = f64;

    fn cost(&self, theta: &Self::Param) -> Result<f64, Error> {
        Ok(self.evaluate(theta).0)
    }
}

impl Gradient for Problem<'_, '_> {
    type Param = Vec<f64>;
    type Gradient = Vec<f64>;

    fn gradient(&self, theta: &Self::Param) -> Result<Vec<f64>, Error> {
        Ok(self.evaluate(theta).1)
    }
}

/// Runs L-BFGS (memory 7, gradient tolerance 1e-6, cost tolerance 1e-12) from `start`.
pub fn run_start(
    likelihood: &SubjectLikelihood<'_>,
    start: Vec<f64>,
    max_iterations: u64,
) -> StartResult {
    let problem = Problem {
        likelihood,
        cache: RefCell::new(None),
    };
    let start_objective = -problem.evaluate(&start).0;
    let solver = LBFGS::new(MoreThuenteLineSearch::new(), 7)
        .with_tolerance_grad(1e-6)
        .and_then(|s| s.with_tolerance_cost(1e-12));
    let outcome = solver.and_then(|solver| {
        Executor::new(problem, solver)
            .configure(|state| state.param(start.clone()).max_iters(max_iterations))
            .run()
    });
    match outcome {
        Ok(result) => {
            let state = result.state();
            let theta = state
                .get_best_param()
                .cloned()
                .unwrap_or_else(|| start.clone());
            let objective = -state.get_best_cost();
            let status = state.get_termination_status();
            let solver_converged = matches!(
                status,
                TerminationStatus::Terminated(TerminationReason::SolverConverged)
            );
            StartResult {
                theta,
                objective,
                termination: status.to_string(),
                solver_converged,
            }
        }
        // A line search that cannot proceed (e.g. a flat or invalid region) ends this start at
        // its initial point; other starts carry the fit.
        Err(error) => StartResult {
            theta: start,
            objective: start_objective,
            termination: format!("stopped: {error}"),
            solver_converged: false,
        },
    }
}
