//! One L-BFGS run from one start, through argmin, optionally with some parameters held fixed,
//! and the rule that ends a run before its tolerance test when it has reached an optimum an
//! earlier run found ([`EarlyStop`]).
//!
//! A run may be given the curvature of the objective at an optimum found before (the Hessian H
//! of the negative log-posterior there). It then searches over z with θ_A = start_A + P·z on
//! its active parameters A, P = L⁻ᵀ for the Cholesky factor H_AA = L·Lᵀ, so that the objective's
//! Hessian in z is the identity near that optimum: preconditioning by a linear change of
//! variables (Nocedal & Wright 2006, §5.1 and §7.2). L-BFGS starts with a scaled identity as its
//! inverse Hessian, so on the original scale its first steps ignore the parameters' very
//! different curvatures and correlations (a boundary against a learning rate) and spend
//! iterations learning them; on z it starts with them. The search's held probes, which start
//! next to the best point, use it (see [`super::search`]).

use crate::likelihood::{Evaluation, SubjectLikelihood};
use argmin::core::{
    CostFunction, Error, Executor, Gradient, IterState, KV, Problem as ArgminProblem, Solver,
    State, TerminationReason, TerminationStatus,
};
use argmin::solver::linesearch::{LineSearch, MoreThuenteLineSearch};
use argmin::solver::quasinewton::LBFGS;
use nalgebra::{DMatrix, DVector};
use std::cell::{Cell, RefCell};

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
    /// The run came within [`JOIN_GAP`] below and [`JOIN_DISTANCE`] of an optimum an earlier
    /// run had reached ([`EarlyStop::Join`]).
    Joined,
    /// The run could not reach its target within its iterations at twice its recent rate of
    /// improvement ([`EarlyStop::OutOfReach`]).
    OutOfReach,
}

impl Stop {
    /// A short description for output tables.
    pub fn describe(self) -> &'static str {
        match self {
            Stop::Tolerance => "gradient or change below tolerance",
            Stop::NoImprovingStep => "no improving step along the search direction",
            Stop::IterationLimit => "iteration limit reached",
            Stop::Failed => "could not start",
            Stop::Joined => "joined an optimum found by an earlier run",
            Stop::OutOfReach => "target out of reach at the recent rate of improvement",
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
    /// Likelihood-with-gradient evaluations the run made (its start included).
    pub evaluations: usize,
}

/// Where a run begins: θ (all free parameters), and the likelihood's evaluation there when it is
/// already known (a screened start's), which the run then does not repeat.
#[derive(Clone, Debug)]
pub struct Begin {
    /// θ at the start.
    pub theta: Vec<f64>,
    /// [`SubjectLikelihood::evaluate`] at `theta`, of the likelihood the run optimises.
    pub evaluated: Option<Evaluation>,
}

impl From<Vec<f64>> for Begin {
    fn from(theta: Vec<f64>) -> Self {
        Begin {
            theta,
            evaluated: None,
        }
    }
}

/// Largest shortfall of ln L + ln prior below a known optimum at which a run joins it: the
/// tolerance that already counts two runs as having reached the same optimum.
pub const JOIN_GAP: f64 = super::SAME_OPTIMUM;

/// Largest distance (maximum norm, unconstrained scale) from a known optimum at which a run
/// joins it.
pub const JOIN_DISTANCE: f64 = 0.05;

/// A rule that ends a run before its tolerance test, checked after every iteration.
///
/// L-BFGS with the Moré–Thuente line search never lowers the objective from one iterate to the
/// next (the sufficient-decrease condition; Moré & Thuente 1994), so a run stays inside the
/// region above its current value.
#[derive(Clone, Copy, Debug)]
pub enum EarlyStop<'k> {
    /// Run to the tolerance test or the iteration limit.
    Never,
    /// Stop at an iterate whose objective is at most [`JOIN_GAP`] below, and not above, that of
    /// one of these earlier end points (θ, objective) and within [`JOIN_DISTANCE`] of it: the
    /// run has entered the optimum's immediate neighbourhood from below, where it can only
    /// converge to that optimum unless the optimum is a saddle shallower than [`JOIN_GAP`]; had
    /// it run on, it would have counted as reaching the same optimum (within
    /// [`super::SAME_OPTIMUM`]) anyway. Only for runs that hold nothing.
    Join(&'k [(Vec<f64>, f64)]),
    /// Stop once the objective cannot reach `target` within the run's remaining iterations at
    /// [`REACH_FACTOR`] times its mean improvement per iteration over the last
    /// [`REACH_WINDOW`] iterations (checked from iteration [`REACH_WINDOW`] on). For a probe
    /// whose only use is whether it gets within reach of a target: L-BFGS gains per iteration
    /// shrink as it converges, so a run whose gains do not grow more than
    /// [`REACH_FACTOR`]-fold would have ended below the target at its iteration limit anyway.
    /// A plateau followed by a climb does grow its gains, and such a run is stopped too early
    /// (17 of 2,272 fits of the comparison set lost a release this way, none an optimum; see
    /// DEVELOPERS.md, "The fitter's work").
    OutOfReach {
        /// The objective (ln L + ln prior) the run must reach to matter.
        target: f64,
    },
}

/// Iterations over which [`EarlyStop::OutOfReach`] measures the recent rate of improvement.
pub const REACH_WINDOW: usize = 5;

/// Growth of the recent rate of improvement that [`EarlyStop::OutOfReach`] allows for.
pub const REACH_FACTOR: f64 = 2.0;

/// A solver with an [`EarlyStop`] checked after its own termination tests. Its `init` is the
/// trait's default (nothing), so the run's initial state must carry the start's cost and gradient.
struct Watched<'k, S> {
    inner: S,
    rule: EarlyStop<'k>,
    /// Why the rule stopped the run.
    stopped: &'k Cell<Option<Stop>>,
    /// The objective after each iteration so far (for [`EarlyStop::OutOfReach`]).
    history: Vec<f64>,
    /// θ (all free parameters) of the solver's parameter vector.
    position: &'k dyn Fn(&[f64]) -> Vec<f64>,
}

type LbfgsState = IterState<Vec<f64>, Vec<f64>, (), (), (), f64>;

/// `next_iter` handed on to the wrapped solver `self.inner` (the wrappers here add a rule, not
/// an iteration of their own).
macro_rules! inner_iteration {
    () => {
        fn next_iter(
            &mut self,
            problem: &mut ArgminProblem<O>,
            state: LbfgsState,
        ) -> Result<(LbfgsState, Option<KV>), Error> {
            self.inner.next_iter(problem, state)
        }
    };
}

impl<O, S: Solver<O, LbfgsState>> Solver<O, LbfgsState> for Watched<'_, S> {
    fn name(&self) -> &str {
        self.inner.name()
    }

    inner_iteration!();

    fn terminate(&mut self, state: &LbfgsState) -> TerminationStatus {
        let own = self.inner.terminate(state);
        if own.terminated() {
            return own;
        }
        let stop = match self.rule {
            EarlyStop::Never => None,
            EarlyStop::Join(known) => {
                let objective = -state.get_cost();
                let theta = state.get_param().map(|z| (self.position)(z));
                known
                    .iter()
                    .any(|(at, value)| {
                        objective <= *value
                            && value - objective <= JOIN_GAP
                            && theta.as_ref().is_some_and(|t| {
                                t.iter()
                                    .zip(at)
                                    .all(|(a, b)| (a - b).abs() <= JOIN_DISTANCE)
                            })
                    })
                    .then_some(Stop::Joined)
            }
            EarlyStop::OutOfReach { target } => {
                let objective = -state.get_cost();
                self.history.push(objective);
                let k = self.history.len();
                let remaining = state.get_max_iters().saturating_sub(state.get_iter()) as f64;
                (k > REACH_WINDOW && {
                    let rate =
                        (objective - self.history[k - 1 - REACH_WINDOW]) / REACH_WINDOW as f64;
                    objective + REACH_FACTOR * rate.max(0.0) * remaining < target
                })
                .then_some(Stop::OutOfReach)
            }
        };
        match stop {
            Some(s) => {
                self.stopped.set(Some(s));
                TerminationStatus::Terminated(TerminationReason::SolverExit(
                    s.describe().to_string(),
                ))
            }
            None => TerminationStatus::NotTerminated,
        }
    }
}

/// Longest first trial step of a line search in any coordinate of the solver's parameters (θ,
/// or z of a preconditioned run): see [`ShortFirstStep`]. Chosen by measurement: on
/// `fit_speed`'s 8 subjects the fits took 3,746 evaluations in all (3,912 without a cap; 3,952
/// with a cap of 2, 3,679 with 8) and reached the same ln L to 1e-12; on a leaky-model
/// participant whose fit had taken 1,520 s, the first start took 95 evaluations (503 without a
/// cap, 182 with 2, 226 with 8) and the whole fit 381 s.
pub const MAX_FIRST_STEP: f64 = 4.0;

/// The Moré–Thuente line search (Moré & Thuente 1994) with its first trial step shortened to at
/// most [`MAX_FIRST_STEP`] in any coordinate: the direction L-BFGS hands it is scaled down when
/// it is longer, and the search may still extrapolate beyond it (up to 4× per trial) while the
/// objective keeps falling steeply. L-BFGS's first direction is the gradient itself, and later
/// ones can be as long where its curvature pairs mislead; a trial that long lands at the corners
/// of the parameter box, where the model gives the data no chance, and the search's
/// interpolation from such a point (its cost is [`INVALID_COST`]) returns a step so short that
/// the run crawls. A cap on the first trial step is the step bound of trust-region practice
/// (Nocedal & Wright 2006, §3.5 and ch. 4).
#[derive(Clone)]
struct ShortFirstStep {
    inner: MoreThuenteLineSearch<Vec<f64>, Vec<f64>, f64>,
}

impl LineSearch<Vec<f64>, f64> for ShortFirstStep {
    fn search_direction(&mut self, direction: Vec<f64>) {
        let longest = direction.iter().fold(0.0_f64, |m, x| m.max(x.abs()));
        let direction = if longest > MAX_FIRST_STEP {
            let scale = MAX_FIRST_STEP / longest;
            direction.into_iter().map(|x| x * scale).collect()
        } else {
            direction
        };
        self.inner.search_direction(direction);
    }

    fn initial_step_length(&mut self, step_length: f64) -> Result<(), Error> {
        self.inner.initial_step_length(step_length)
    }
}

impl<O> Solver<O, LbfgsState> for ShortFirstStep
where
    MoreThuenteLineSearch<Vec<f64>, Vec<f64>, f64>: Solver<O, LbfgsState>,
{
    fn name(&self) -> &str {
        "Moré–Thuente line search, first step capped"
    }

    fn init(
        &mut self,
        problem: &mut ArgminProblem<O>,
        state: LbfgsState,
    ) -> Result<(LbfgsState, Option<KV>), Error> {
        self.inner.init(problem, state)
    }

    inner_iteration!();

    fn terminate(&mut self, state: &LbfgsState) -> TerminationStatus {
        self.inner.terminate(state)
    }
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
    /// The change of variables, when the run is preconditioned.
    scaling: Option<Scaling>,
    cache: RefCell<Option<Cached>>,
    /// Evaluations of the likelihood made (cache hits not counted).
    evaluations: &'a Cell<usize>,
}

/// The change of variables θ_A = origin + P·z of a preconditioned run (see the module docs).
#[derive(Clone)]
struct Scaling {
    origin: DVector<f64>,
    factor: DMatrix<f64>,
}

impl Scaling {
    /// The change of variables around `start` for the active parameters, from the Hessian
    /// `curvature` of all free parameters; None where H_AA is not positive definite or not
    /// finite (the run then searches on θ itself).
    fn new(curvature: &DMatrix<f64>, active: &[usize], start: &[f64]) -> Option<Scaling> {
        let n = active.len();
        let sub = super::uncertainty::principal_block(curvature, active);
        if !sub.iter().all(|x| x.is_finite()) {
            return None;
        }
        // P = L⁻ᵀ, so that Pᵀ·H_AA·P = L⁻¹·L·Lᵀ·L⁻ᵀ = I.
        let lower = sub.cholesky()?.l();
        let factor = lower.transpose().try_inverse()?;
        factor.iter().all(|x| x.is_finite()).then(|| Scaling {
            origin: DVector::from_iterator(n, active.iter().map(|&j| start[j])),
            factor,
        })
    }
}

impl Problem<'_, '_> {
    fn full(&self, reduced: &[f64]) -> Vec<f64> {
        let mut theta = self.base.clone();
        match &self.scaling {
            Some(s) => {
                let x = &s.origin + &s.factor * DVector::from_column_slice(reduced);
                for (&j, &x) in self.active.iter().zip(x.iter()) {
                    theta[j] = x;
                }
            }
            None => {
                for (&j, &x) in self.active.iter().zip(reduced) {
                    theta[j] = x;
                }
            }
        }
        theta
    }

    /// The solver's parameter vector at the start (z = 0 when preconditioned).
    fn reduce(&self, full: &[f64]) -> Vec<f64> {
        match &self.scaling {
            Some(s) => vec![0.0; s.origin.len()],
            None => self.active.iter().map(|&j| full[j]).collect(),
        }
    }

    fn evaluate(&self, reduced: &[f64]) -> (f64, Vec<f64>) {
        if let Some((at, cost, grad)) = self.cache.borrow().as_ref()
            && at.as_slice() == reduced
        {
            return (*cost, grad.clone());
        }
        self.evaluations.set(self.evaluations.get() + 1);
        let e = self.likelihood.evaluate(&self.full(reduced));
        self.remember(reduced, &e)
    }

    /// The cost and its gradient on the solver's parameters from the likelihood's evaluation
    /// `e` at `reduced`, kept as the last evaluation.
    fn remember(&self, reduced: &[f64], e: &Evaluation) -> (f64, Vec<f64>) {
        let objective = e.ln_likelihood + e.ln_prior;
        let (cost, grad) = if objective.is_finite() && e.gradient.iter().all(|g| g.is_finite()) {
            let on_theta: Vec<f64> = self.active.iter().map(|&j| -e.gradient[j]).collect();
            let grad = match &self.scaling {
                // ∂f/∂z = Pᵀ·∂f/∂θ_A.
                Some(s) => (s.factor.transpose() * DVector::from_vec(on_theta))
                    .iter()
                    .copied()
                    .collect(),
                None => on_theta,
            };
            (-objective, grad)
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

/// Runs L-BFGS (Nocedal 1980; Liu & Nocedal 1989; memory 7, Moré–Thuente line search with its
/// first trial step capped ([`ShortFirstStep`]), gradient tolerance 1e-6, change tolerance
/// 1e-12) from `start`, holding the free parameters listed in `held` at their start values. A
/// start that carries its evaluation is not evaluated again (its run counts one evaluation
/// fewer).
pub fn run_start(
    likelihood: &SubjectLikelihood<'_>,
    start: impl Into<Begin>,
    max_iterations: u64,
    held: &[usize],
) -> StartResult {
    run_start_until(
        likelihood,
        start,
        max_iterations,
        held,
        EarlyStop::Never,
        None,
    )
}

/// As [`run_start`], ended early by `rule` where it applies, and preconditioned by `curvature`
/// (the Hessian of the negative log-posterior at an optimum found before, all free parameters)
/// when given and positive definite on the active parameters.
pub fn run_start_until(
    likelihood: &SubjectLikelihood<'_>,
    start: impl Into<Begin>,
    max_iterations: u64,
    held: &[usize],
    rule: EarlyStop<'_>,
    curvature: Option<&DMatrix<f64>>,
) -> StartResult {
    let Begin {
        theta: start,
        evaluated,
    } = start.into();
    debug_assert!(held.is_empty() || !matches!(rule, EarlyStop::Join(_)));
    let active: Vec<usize> = (0..start.len()).filter(|j| !held.contains(j)).collect();
    let evaluations = Cell::new(0);
    let stopped = Cell::new(None);
    let scaling = curvature.and_then(|h| Scaling::new(h, &active, &start));
    let problem = Problem {
        likelihood,
        base: start.clone(),
        active,
        scaling,
        cache: RefCell::new(None),
        evaluations: &evaluations,
    };
    let reduced_start = problem.reduce(&start);
    // θ at z = 0 is the start itself, preconditioned or not.
    let (start_cost, start_gradient) = match &evaluated {
        Some(e) => problem.remember(&reduced_start, e),
        None => problem.evaluate(&reduced_start),
    };
    let failed = |stop| StartResult {
        theta: start.clone(),
        objective: if start_cost >= INVALID_COST {
            f64::NEG_INFINITY
        } else {
            -start_cost
        },
        stop,
        evaluations: evaluations.get(),
    };
    if problem.active.is_empty() || start_cost >= INVALID_COST {
        return failed(Stop::Failed);
    }
    let line_search = ShortFirstStep {
        inner: MoreThuenteLineSearch::new(),
    };
    let Ok(lbfgs) = LBFGS::new(line_search, 7)
        .with_tolerance_grad(1e-6)
        .and_then(|s| s.with_tolerance_cost(1e-12))
    else {
        return failed(Stop::Failed);
    };
    // The executor owns the problem; the stop rule and the outcome map the solver's parameters
    // to θ through a copy of its change of variables.
    let mapping = Problem {
        likelihood,
        base: problem.base.clone(),
        active: problem.active.clone(),
        scaling: problem.scaling.clone(),
        cache: RefCell::new(None),
        evaluations: &evaluations,
    };
    let position = |z: &[f64]| mapping.full(z);
    let solver = Watched {
        inner: lbfgs,
        rule,
        stopped: &stopped,
        history: Vec::new(),
        position: &position,
    };
    let outcome = Executor::new(problem, solver)
        .configure(|state| {
            // With cost and gradient given, L-BFGS's own initialisation evaluates nothing, so
            // the wrapper need not pass it on.
            state
                .param(reduced_start.clone())
                .cost(start_cost)
                .gradient(start_gradient)
                .max_iters(max_iterations)
        })
        .run();
    match outcome {
        Ok(result) => {
            let state = result.state();
            let reduced = state
                .get_best_param()
                .cloned()
                .unwrap_or_else(|| reduced_start.clone());
            let theta = mapping.full(&reduced);
            let cost = state.get_best_cost();
            let stop = match (stopped.get(), state.get_termination_status()) {
                (Some(early), _) => early,
                (_, TerminationStatus::Terminated(TerminationReason::SolverConverged)) => {
                    Stop::Tolerance
                }
                (_, TerminationStatus::Terminated(TerminationReason::MaxItersReached)) => {
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
                evaluations: evaluations.get(),
            }
        }
        // A line search that cannot proceed from the start ends this run there; other starts
        // carry the fit.
        Err(_) => failed(Stop::NoImprovingStep),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// f(x) = c·Σ x², recording every point evaluated.
    struct Bowl {
        c: f64,
        seen: RefCell<Vec<Vec<f64>>>,
    }

    impl CostFunction for Bowl {
        type Param = Vec<f64>;
        type Output = f64;

        fn cost(&self, x: &Vec<f64>) -> Result<f64, Error> {
            self.seen.borrow_mut().push(x.clone());
            Ok(self.c * x.iter().map(|v| v * v).sum::<f64>())
        }
    }

    impl Gradient for Bowl {
        type Param = Vec<f64>;
        type Gradient = Vec<f64>;

        fn gradient(&self, x: &Vec<f64>) -> Result<Vec<f64>, Error> {
            Ok(x.iter().map(|v| 2.0 * self.c * v).collect())
        }
    }

    /// (the largest coordinate move of the first trial point from the start, the end point)
    /// of L-BFGS with the line search `$search` on a steep bowl from (10, −10). (A macro: the
    /// problem type L-BFGS hands its line search is private to argmin, so a generic function
    /// cannot name the bound.)
    macro_rules! first_move {
        ($search:expr) => {{
            let bowl = Bowl {
                c: 100.0,
                seen: RefCell::new(Vec::new()),
            };
            let start = vec![10.0, -10.0];
            let solver = LBFGS::new($search, 7).with_tolerance_grad(1e-10).unwrap();
            let result = Executor::new(bowl, solver)
                .configure(|state| state.param(start.clone()).max_iters(50))
                .run()
                .unwrap();
            let seen = result
                .problem
                .problem
                .as_ref()
                .unwrap()
                .seen
                .borrow()
                .clone();
            let first = seen
                .iter()
                .find(|x| x.as_slice() != start.as_slice())
                .expect("a trial point")
                .clone();
            let moved = first
                .iter()
                .zip(&start)
                .fold(0.0_f64, |m, (a, b)| m.max((a - b).abs()));
            (moved, result.state().get_best_param().unwrap().clone())
        }};
    }

    #[test]
    fn the_first_trial_step_moves_at_most_the_cap_and_the_run_still_converges() {
        // Source: the step bound of trust-region practice (Nocedal & Wright 2006, §3.5 and
        // ch. 4). L-BFGS's first direction is the negative gradient with step length 1 (Liu &
        // Nocedal 1989), here (−2000, 2000): the plain Moré–Thuente search tries that far; the
        // capped one no further than MAX_FIRST_STEP, and both end at the minimum 0.
        let (plain, plain_end) = first_move!(MoreThuenteLineSearch::new());
        assert!(plain > 1000.0, "the uncapped first trial moved {plain}");
        let (capped, capped_end) = first_move!(ShortFirstStep {
            inner: MoreThuenteLineSearch::new(),
        });
        assert!(
            capped <= MAX_FIRST_STEP * (1.0 + 1e-12),
            "the capped first trial moved {capped}"
        );
        for end in [plain_end, capped_end] {
            assert!(end.iter().all(|x| x.abs() < 1e-8), "ended at {end:?}");
        }
    }
}
