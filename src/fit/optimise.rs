//! One L-BFGS run from one start, through argmin, optionally with some parameters held fixed.

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

/// Why a run stopped, in our own words.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Stop {
    /// The gradient or the change of the log-posterior fell below its tolerance.
    Tolerance,
    /// The line search found no step that improves the log-posterior (usually at an optimum
    /// whose last digits are rounding noise).
    NoImprovingStep,
    /// The iteration limit was reached first.
    IterationLimit,
    /// The start itself could not be evaluated or the solver could not be set up.
    Failed,
}

impl Stop {
    /// A short description for output tables.
    pub fn describe(self) -> &'static str {
        match self {
            Stop::Tolerance => "gradient or change below tolerance",
            Stop::NoImprovingStep => "no improving step along the search direction",
            Stop::IterationLimit => "iteration limit reached",
            Stop::Failed => "could not start",
        }
    }
}

/// The outcome of one start.
#[derive(Clone, Debug, PartialEq)]
pub struct StartResult {
    /// Unconstrained optimum (all free parameters, held ones at their held values).
    pub theta: Vec<f64>,
    /// ln L + ln prior there.
    pub objective: f64,
    /// Why the run stopped.
    pub stop: Stop,
}

/// The last evaluation: (θ, cost, gradient).
type Cached = (Vec<f64>, f64, Vec<f64>);

/// The negative log-posterior over the parameters that are not held, as an argmin problem,
/// caching the last evaluation because argmin asks for cost and gradient separately at the same
/// point.
struct Problem<'a, 'b> {
    likelihood: &'a SubjectLikelihood<'b>,
    /// The full θ; entries not in `active` stay at these values.
    base: Vec<f64>,
    /// Indices of the free parameters being optimised.
    active: Vec<usize>,
    cache: RefCell<Option<Cached>>,
}

impl Problem<'_, '_> {
    fn full(&self, reduced: &[f64]) -> Vec<f64> {
        let mut theta = self.base.clone();
        for (&j, &x) in self.active.iter().zip(reduced) {
            theta[j] = x;
        }
        theta
    }

    fn reduce(&self, full: &[f64]) -> Vec<f64> {
        self.active.iter().map(|&j| full[j]).collect()
    }

    fn evaluate(&self, reduced: &[f64]) -> (f64, Vec<f64>) {
        if let Some((at, cost, grad)) = self.cache.borrow().as_ref()
            && at.as_slice() == reduced
        {
            return (*cost, grad.clone());
        }
        let e = self.likelihood.evaluate(&self.full(reduced));
        let objective = e.ln_likelihood + e.ln_prior;
        let (cost, grad) = if objective.is_finite() && e.gradient.iter().all(|g| g.is_finite()) {
            (
                -objective,
                self.active.iter().map(|&j| -e.gradient[j]).collect(),
            )
        } else {
            (INVALID_COST, vec![0.0; reduced.len()])
        };
        *self.cache.borrow_mut() = Some((reduced.to_vec(), cost, grad.clone()));
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

/// Runs L-BFGS (Nocedal 1980; Liu & Nocedal 1989; memory 7, Moré–Thuente line search,
/// gradient tolerance 1e-6, change tolerance 1e-12) from `start`, holding the free parameters
/// listed in `held` at their start values.
pub fn run_start(
    likelihood: &SubjectLikelihood<'_>,
    start: Vec<f64>,
    max_iterations: u64,
    held: &[usize],
) -> StartResult {
    let active: Vec<usize> = (0..start.len()).filter(|j| !held.contains(j)).collect();
    let problem = Problem {
        likelihood,
        base: start.clone(),
        active,
        cache: RefCell::new(None),
    };
    let reduced_start = problem.reduce(&start);
    let start_cost = problem.evaluate(&reduced_start).0;
    let failed = |stop| StartResult {
        theta: start.clone(),
        objective: if start_cost >= INVALID_COST {
            f64::NEG_INFINITY
        } else {
            -start_cost
        },
        stop,
    };
    if problem.active.is_empty() || start_cost >= INVALID_COST {
        return failed(Stop::Failed);
    }
    let Ok(solver) = LBFGS::new(MoreThuenteLineSearch::new(), 7)
        .with_tolerance_grad(1e-6)
        .and_then(|s| s.with_tolerance_cost(1e-12))
    else {
        return failed(Stop::Failed);
    };
    let base = problem.base.clone();
    let active = problem.active.clone();
    let outcome = Executor::new(problem, solver)
        .configure(|state| state.param(reduced_start.clone()).max_iters(max_iterations))
        .run();
    match outcome {
        Ok(result) => {
            let state = result.state();
            let reduced = state
                .get_best_param()
                .cloned()
                .unwrap_or_else(|| reduced_start.clone());
            let mut theta = base;
            for (&j, &x) in active.iter().zip(&reduced) {
                theta[j] = x;
            }
            let cost = state.get_best_cost();
            let stop = match state.get_termination_status() {
                TerminationStatus::Terminated(TerminationReason::SolverConverged) => {
                    Stop::Tolerance
                }
                TerminationStatus::Terminated(TerminationReason::MaxItersReached) => {
                    Stop::IterationLimit
                }
                _ => Stop::NoImprovingStep,
            };
            StartResult {
                theta,
                objective: if cost >= INVALID_COST {
                    f64::NEG_INFINITY
                } else {
                    -cost
                },
                stop,
            }
        }
        // A line search that cannot proceed from the start ends this run there; other starts
        // carry the fit.
        Err(_) => failed(Stop::NoImprovingStep),
    }
}
