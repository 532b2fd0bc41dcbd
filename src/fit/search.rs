//! The per-subject search for the maximum of the log-posterior, and the verdict on what it
//! found.
//!
//! A gradient test on the optimiser's unconstrained scale cannot tell an optimum from a stall:
//! the logistic and log transforms make every gradient vanish as a parameter approaches its
//! bound, and where the model's choice probabilities stop depending on the offers (a value
//! sensitivity or inverse temperature of zero, learning rates of zero) the likelihood is flat in
//! every parameter that acts through values. So after the L-BFGS runs from the screened starts
//! ([`super::starts`]) the best point is examined on the natural scale:
//!
//! - **at a bound**: a free parameter within 10⁻⁴ of the width of its range from a bound;
//! - **flat**: moving a free parameter across its whole start range (the others fixed) changes
//!   ln L by less than [`FLAT`];
//! - **value-blind**: the model's probability of choosing `a` is the same on every trial (to
//!   10⁻⁶), so the fit explains no choice by the offers; for choices-only models also a
//!   log-likelihood no better than the constant-probability baseline n_a ln p̂ + n_b ln(1 − p̂)
//!   (p̂ the observed share of `a`; the maximum of the Bernoulli likelihood, common practice).
//!
//! Any of these triggers an escape search before anything is reported: for each suspect
//! parameter and two levels inside its start range (the 25 % and 75 % points on the
//! unconstrained scale), the parameter is held at that level while the others (suspects moved
//! to the middle of their start ranges) are optimised, then everything is released
//! (a short search from the interior, which a bound optimum must survive); when the point was
//! flat or value-blind, fresh starts from the start ranges are run as well. A better optimum
//! found (by more than [`crate::fit::SAME_OPTIMUM`]) replaces the best and is examined
//! again, at most [`ESCAPE_ROUNDS`] times.
//!
//! The verdict: `converged` only when the best run stopped by its tolerance test (or could not
//! improve further) with every interior gradient below [`GRADIENT_CONVERGED`] (or, where one is
//! not, the curvature puts the maximum within 0.01 standard errors and a Newton step gains at
//! most [`NEWTON_GAIN`] in ln L: see [`newton_test`]), nothing flat or value-blind remains, and
//! every parameter at a bound has survived the search from the interior. Otherwise the status
//! says, in words, what is wrong.

use super::SAME_OPTIMUM;
use super::optimise::{Begin, EarlyStop, JOIN_DISTANCE, StartResult, Stop, run_start_until};
use super::starts::StartPlan;
use super::uncertainty::{hessian, newton_decrement, principal_block};
use crate::likelihood::SubjectLikelihood;
use crate::model::Transform;
use crate::model::components::uses_numerical_engine;
use nalgebra::DMatrix;

/// Relative distance to a finite bound below which an estimate counts as at the bound.
pub(crate) const AT_BOUND: f64 = 1e-4;

/// Largest |∂ log-posterior/∂θ| of an interior parameter accepted as converged by the slopes
/// alone; a point with a larger one may still pass the curvature-scaled [`newton_test`].
pub const GRADIENT_CONVERGED: f64 = 1e-3;

/// Gain of the objective (ln L + ln prior) below which a point whose slopes are not all below
/// [`GRADIENT_CONVERGED`] still counts as at the maximum, when a Newton step both predicts and
/// realises no more ([`newton_test`]): λ²/2 ≤ 5·10⁻⁵ puts the maximum of the quadratic model
/// within λ ≤ 0.01 standard errors of the point (Boyd & Vandenberghe 2004, §9.5.1).
pub const NEWTON_GAIN: f64 = 5e-5;

/// The longest multiple of the Newton step at which [`newton_test`] measures the objective: a
/// curvature overstated up to about this factor still shows as a gain along the ray.
const NEWTON_RAY: f64 = 1024.0;

/// Change of ln L (absolute) below which a parameter moved across its start range counts as
/// having no effect.
pub const FLAT: f64 = 1e-6;

/// The Hessian of the negative log-posterior, with the θ it was taken at.
pub type Curvature = (Vec<f64>, DMatrix<f64>);

/// Rounds of escape search at most.
pub const ESCAPE_ROUNDS: usize = 5;

/// Iterations of the first (held) stage of a search from the interior.
const PROBE_ITERATIONS: u64 = 100;

/// Iterations of a held face probe (it starts from the best point with one coordinate moved).
const FACE_ITERATIONS: u64 = 40;

/// A held face probe is released (optimised in every parameter) when it comes within this much
/// log-posterior of the best point.
const FACE_MARGIN: f64 = 1.0;

/// θ that puts a parameter at its lower or upper bound (to 10⁻⁶ of the range, or of the
/// bound's magnitude for a half-open range), where it has that bound.
fn face_theta(transform: &Transform, lower: bool) -> Option<f64> {
    const LOGIT_FACE: f64 = 13.8; // logit(1 − 10⁻⁶)
    match (*transform, lower) {
        (Transform::Logistic { .. }, true) => Some(-LOGIT_FACE),
        (Transform::Logistic { .. }, false) => Some(LOGIT_FACE),
        (Transform::Exp { lower: b }, true) | (Transform::ExpBelow { upper: b }, false) => {
            Some((1e-6 * b.abs().max(1.0)).ln())
        }
        _ => None,
    }
}

/// Spread of the choice probability across trials below which a fit is value-blind.
const CONSTANT_PROBABILITY: f64 = 1e-6;

/// True when natural value `x` lies at a bound of `transform`.
pub(crate) fn at_bound(x: f64, transform: &Transform) -> bool {
    match *transform {
        Transform::Logistic { lower, upper } => {
            let r = (x - lower) / (upper - lower);
            !(AT_BOUND..=1.0 - AT_BOUND).contains(&r)
        }
        Transform::Exp { lower } => x - lower < AT_BOUND * lower.abs().max(1.0),
        Transform::ExpBelow { upper } => upper - x < AT_BOUND * upper.abs().max(1.0),
        Transform::Identity => false,
    }
}

/// What the examination of a point found.
#[derive(Clone, Debug, Default, PartialEq)]
struct Findings {
    /// Free parameters (indices) at a bound.
    at_bound: Vec<usize>,
    /// Free parameters that do not change the likelihood.
    flat: Vec<usize>,
    /// The choice probability does not depend on the trial.
    value_blind: bool,
    /// A choices-only fit no better than constant choice probabilities.
    below_baseline: bool,
    /// Largest |gradient| (unconstrained scale) of the parameters not at a bound; for a
    /// parameter at a kink (below) or of a numerical-engine model, the objective's rise instead.
    interior_gradient: f64,
    /// The parameter of `interior_gradient`, where it is above zero.
    steepest: Option<usize>,
    /// `interior_gradient` is the objective's rise over a step of [`ascent`] (a numerical-engine
    /// model), not the gradient.
    by_rise: bool,
    /// Interior parameters whose gradient is not small but along which the objective rises on
    /// neither side: the point sits on a kink of the objective (see [`examine`]).
    kinks: Vec<usize>,
    /// Of a numerical-engine model, the point one step of [`ascent`] beside this one along the
    /// parameter whose side rises most, where it rises: a restart begins there, across the step
    /// of the objective that stopped L-BFGS, rather than where L-BFGS stopped.
    uphill: Option<Uphill>,
    /// The objective's slope along each free parameter on the optimiser's scale: the gradient,
    /// or of a numerical-engine model the central difference of [`ascent`]; 0 along a kink and
    /// for a parameter at a bound (which [`Findings::interior`] leaves out).
    gradient: Vec<f64>,
    /// Along each free parameter whose sides [`ascent`] measured: the steepest one-sided rise
    /// and the side it is on (+1 or −1).
    rises: Vec<Option<(f64, f64)>>,
    /// Free parameters (indices) not at a bound.
    interior: Vec<usize>,
    /// The objective (ln L + ln prior) at the point.
    at_theta: f64,
    /// The curvature-scaled test ([`newton_test`]), where the slopes alone did not pass and
    /// the test was made.
    newton: Option<NewtonOutcome>,
    /// Likelihood evaluations the examination made (the trace of choice probabilities counts
    /// as one).
    evaluations: usize,
}

impl Findings {
    fn degenerate(&self) -> bool {
        !self.flat.is_empty() || self.value_blind || self.below_baseline
    }

    /// The slopes at the point pass: every one below [`GRADIENT_CONVERGED`], or the curvature
    /// puts the maximum within [`NEWTON_GAIN`] of the point ([`newton_test`]).
    fn stationary(&self) -> bool {
        self.interior_gradient < GRADIENT_CONVERGED
            || matches!(self.newton, Some(NewtonOutcome::Measured(n)) if n.passes())
    }

    fn suspects(&self) -> Vec<usize> {
        let mut s: Vec<usize> = self.at_bound.iter().chain(&self.flat).copied().collect();
        s.sort_unstable();
        s.dedup();
        s
    }
}

/// The verdict on a fit, in our own words.
#[derive(Clone, Debug, PartialEq)]
pub struct Verdict {
    /// A real local optimum (see the module documentation).
    pub converged: bool,
    /// What was found, in words: "converged", or what is wrong.
    pub status: String,
    /// Why the best run's optimiser stopped.
    pub stop: Stop,
    /// L-BFGS runs made, screened starts and escape searches together.
    pub runs: usize,
}

/// The outcome of the search: every run's result (the best among them is the fit) and the
/// verdict on the best.
pub struct Searched {
    /// Every run, in the order made.
    pub runs: Vec<StartResult>,
    /// Index of the best run.
    pub best: usize,
    /// The verdict.
    pub verdict: Verdict,
    /// Likelihood evaluations by stage.
    pub work: Work,
    /// The Hessian of the negative log-posterior (the θ it was taken at, and the matrix): at the
    /// best point where [`newton_test`] took it there, else at the first optimum found, which
    /// preconditioned the runs beside the best point.
    pub curvature: Option<Curvature>,
    /// Runs that reached the best optimum (within [`SAME_OPTIMUM`]; of a refined search, on the
    /// coarser grid).
    pub starts_at_best: usize,
    /// Nothing from the interior, the faces or fresh starts beat the best point (of a refined
    /// search: the coarser grid's).
    pub verified: bool,
}

/// Likelihood evaluations (with gradient) of one subject's fit, by stage: what a benchmark
/// prints to show where a fit's time goes.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Work {
    /// Scoring the candidate starts.
    pub screen: usize,
    /// Each screened start's L-BFGS run, in order.
    pub starts: Vec<usize>,
    /// L-BFGS restarted at a best point whose interior gradient was not small (or beside it,
    /// where the objective rises).
    pub restarts: usize,
    /// Searches from the interior for suspect parameters (held stage and release).
    pub interior: usize,
    /// Probes of the faces of the parameter box (held stage and release).
    pub faces: usize,
    /// Fresh starts after a flat or value-blind optimum.
    pub fresh: usize,
    /// Examinations of the best point (gradient, flatness, choice probabilities).
    pub examine: usize,
    /// The Hessian at the first optimum, which preconditions the runs beside the best point.
    pub curvature: usize,
    /// Standard errors (observed information) at the best point (none when the best point is
    /// where the curvature was taken).
    pub standard_errors: usize,
    /// Of a refined search ([`search_refined`]), the evaluations on the model's own grid:
    /// L-BFGS from the coarser grid's optima and the examination there. The other stages then
    /// counted evaluations on the coarser grid (about 1/16 of the solve each).
    pub refined: usize,
}

impl std::fmt::Display for Work {
    /// Every stage by name, then the total: what the benchmarks print.
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "screen {}, starts {:?}, restarts {}, interior {}, faces {}, fresh {}, examine {}, \
             curvature {}, standard errors {}, on the model's own grid after a coarser one {}; \
             total {}",
            self.screen,
            self.starts,
            self.restarts,
            self.interior,
            self.faces,
            self.fresh,
            self.examine,
            self.curvature,
            self.standard_errors,
            self.refined,
            self.total()
        )
    }
}

impl Work {
    /// Every evaluation counted.
    pub fn total(&self) -> usize {
        self.screen
            + self.starts.iter().sum::<usize>()
            + self.restarts
            + self.interior
            + self.faces
            + self.fresh
            + self.examine
            + self.curvature
            + self.standard_errors
            + self.refined
    }
}

/// Index of the run with the highest objective (the earliest among equals).
pub fn best_of(runs: &[StartResult]) -> usize {
    runs.iter()
        .enumerate()
        .max_by(|a, b| a.1.objective.total_cmp(&b.1.objective).then(b.0.cmp(&a.0)))
        .map(|(i, _)| i)
        .expect("at least one run")
}

/// Runs the screened starts, examines the best point, escapes degenerate optima and returns
/// every run with the verdict.
pub fn search(
    likelihood: &SubjectLikelihood<'_>,
    plan: &StartPlan,
    starts: usize,
    max_iterations: u64,
) -> Searched {
    let mut searched = search_from(
        likelihood,
        plan,
        plan.screened(likelihood, starts),
        starts,
        max_iterations,
    );
    searched.work.screen = starts * super::starts::SCREEN_FACTOR;
    searched
}

/// [`search`] with L-BFGS runs from `first` in place of the screened starts; `starts` fresh
/// points at a time where the best point is flat or value-blind.
fn search_from(
    likelihood: &SubjectLikelihood<'_>,
    plan: &StartPlan,
    first: Vec<Begin>,
    starts: usize,
    max_iterations: u64,
) -> Searched {
    // End points of runs that passed their tolerance test: a later run that reaches one of
    // them from below stops there (EarlyStop::Join). At the first of them the Hessian is taken
    // once (2k evaluations; it is the observed information too when that point stays the best)
    // and preconditions the runs that start next to the best point: the restart, the held
    // probes from the interior and the faces (see super::optimise). Not the starts: from far
    // away the curvature at an optimum misleads as often as it helps (on fit_speed's subjects
    // some starts took 50-80 evaluations instead of 30, and fewer runs reached the optimum).
    let mut known: Vec<(Vec<f64>, f64)> = Vec::new();
    let mut curvature: Option<Curvature> = None;
    let mut curvature_evaluations = 0;
    let mut joining = |runs: &mut Vec<StartResult>,
                       start: Begin,
                       known: &mut Vec<_>,
                       curvature: &mut Option<Curvature>| {
        let run = run_start_until(
            likelihood,
            start,
            max_iterations,
            &[],
            EarlyStop::Join(known),
            None,
        );
        if run.stop == Stop::Tolerance {
            if curvature.is_none() {
                *curvature = Some((run.theta.clone(), hessian(likelihood, &run.theta)));
                curvature_evaluations += 2 * run.theta.len();
            }
            known.push((run.theta.clone(), run.objective));
        }
        let evaluations = run.evaluations;
        runs.push(run);
        evaluations
    };
    let mut runs: Vec<StartResult> = Vec::new();
    let mut work = Work::default();
    for theta in first {
        let evaluations = joining(&mut runs, theta, &mut known, &mut curvature);
        work.starts.push(evaluations);
    }
    let mut best = best_of(&runs);
    let mut next_fresh = starts * super::starts::SCREEN_FACTOR;
    let mut findings = examine(likelihood, plan, &runs[best].theta);
    work.examine += findings.evaluations;
    let mut verified = false;
    for _ in 0..ESCAPE_ROUNDS {
        let before = runs[best].objective;
        let theta = runs[best].theta.clone();
        if findings.interior_gradient >= GRADIENT_CONVERGED {
            // L-BFGS stopped short of a stationary point: restart it there (or beside it, where
            // the objective rises) with a fresh memory.
            runs.push(run_start_until(
                likelihood,
                restart_point(&findings, &theta),
                max_iterations,
                &[],
                EarlyStop::Never,
                curvature.as_ref().map(|c| &c.1),
            ));
            work.restarts += runs[runs.len() - 1].evaluations;
        }
        let suspects = findings.suspects();
        for &j in &suspects {
            for q in [0.25, 0.75] {
                let mut start = theta.clone();
                for &k in &suspects {
                    start[k] = plan.level(k, 0.5);
                }
                start[j] = plan.level(j, q);
                let held = run_start_until(
                    likelihood,
                    start,
                    PROBE_ITERATIONS,
                    &[j],
                    EarlyStop::Never,
                    curvature.as_ref().map(|c| &c.1),
                );
                work.interior += held.evaluations;
                work.interior += joining(&mut runs, held.theta.into(), &mut known, &mut curvature);
            }
        }
        // Faces of the box: optima with one parameter at a bound (a learning rate or an effort
        // weight of zero…) that L-BFGS on the transformed scale approaches only slowly and
        // interior starts tend to miss.
        let transforms = likelihood.transforms();
        for j in 0..theta.len() {
            for lower in [true, false] {
                let Some(face) = face_theta(&transforms[j], lower) else {
                    continue;
                };
                if (theta[j] - face).abs() < 1.0 {
                    continue;
                }
                let mut start = theta.clone();
                start[j] = face;
                let held = run_start_until(
                    likelihood,
                    start,
                    FACE_ITERATIONS,
                    &[j],
                    EarlyStop::OutOfReach {
                        target: runs[best].objective - FACE_MARGIN,
                    },
                    curvature.as_ref().map(|c| &c.1),
                );
                work.faces += held.evaluations;
                if held.objective > runs[best].objective - FACE_MARGIN {
                    work.faces += joining(
                        &mut runs,
                        held.theta.clone().into(),
                        &mut known,
                        &mut curvature,
                    );
                }
                runs.push(held);
            }
        }
        if findings.degenerate() {
            for start in plan.fresh(next_fresh, starts) {
                work.fresh += joining(&mut runs, start.into(), &mut known, &mut curvature);
            }
            next_fresh += starts;
        }
        best = best_of(&runs);
        if runs[best].objective <= before + SAME_OPTIMUM {
            // Nothing from the interior, the faces or elsewhere beats the point by more than
            // SAME_OPTIMUM: verified. A restart may have moved the best point by less (it
            // polished a point where L-BFGS had stopped short); the verdict is on the point
            // reported, so that is the point examined. Its bounds are confirmed when the
            // searches from the interior confirmed them; a bound new to it gets another round
            // (not where a flat or value-blind point stays flagged whatever the rounds find).
            if runs[best].theta != theta {
                let polished = examine(likelihood, plan, &runs[best].theta);
                work.examine += polished.evaluations;
                let confirmed = polished
                    .at_bound
                    .iter()
                    .all(|j| findings.at_bound.contains(j));
                findings = polished;
                if !confirmed {
                    verified = false;
                    if findings.degenerate() {
                        break;
                    }
                    continue;
                }
            }
            verified = true;
            break;
        }
        findings = examine(likelihood, plan, &runs[best].theta);
        work.examine += findings.evaluations;
        verified = false;
    }
    // The curvature-scaled test decides only for a point the searches verified (after rounds
    // that kept improving, the fit is flagged whatever it finds).
    if verified {
        let (taken, evaluations) =
            newton_test(likelihood, &runs[best].theta, &mut findings, &curvature);
        work.examine += evaluations;
        curvature = taken.or(curvature);
    }
    verified = verified && !findings.degenerate() && findings.stationary();
    let verdict = judge(likelihood, &runs[best], &findings, verified, runs.len());
    work.curvature = curvature_evaluations;
    Searched {
        starts_at_best: at_best(&runs, best),
        runs,
        best,
        verdict,
        work,
        curvature,
        verified,
    }
}

/// Where a restart from the examined point `theta` begins: the point beside it where the
/// objective rises, when the examination found one, else `theta` itself.
fn restart_point(findings: &Findings, theta: &[f64]) -> Vec<f64> {
    findings.uphill.clone().unwrap_or_else(|| theta.to_vec())
}

/// The curvature-scaled test of the examined point θ, where its slopes are not all below
/// [`GRADIENT_CONVERGED`] and nothing else is wrong with it: at a large number of trials the
/// objective is so curved that a slope of 10⁻² is a gain of 10⁻⁸ in ln L (a leaky fit of 1,000
/// trials: slope 3.8·10⁻² along the value scale, the maximum 3·10⁻⁵ away, 7·10⁻⁷ higher), and an
/// absolute slope test flags a point that is at the maximum for every purpose. With H the
/// Hessian of the negative log-posterior on the parameters not at a bound and g the slopes of
/// [`Findings::gradient`], the Newton decrement λ = (gᵀH⁻¹g)^½ ([`newton_decrement`]) is the
/// distance to the maximum of the quadratic model in standard errors, λ²/2 what reaching it
/// gains. The curvature may be wrong: differences of the gradient across a kink of the gain-loss
/// likelihood, or of the numerical engine's grid-held derivatives, can overstate it, and then
/// the model's step falls short of the maximum by the factor of the overstatement. So the
/// objective itself is measured along the step's ray, at 1, 4, 16, … [`NEWTON_RAY`] steps until
/// it is below the point's value twice in a row ([`ray_gain`]; on a quadratic with the right H
/// it is at 4 and 16 steps, so this costs three evaluations): the largest gain found there is
/// the realised one. A curvature overstated by much more than [`NEWTON_RAY`] would still pass a
/// point short of the maximum. And the slopes must agree with the sides: where the objective
/// rises against a slope or much faster than it ([`RISE_MARGIN`]), the point is in a dip or on a
/// step and the test is not made. The point passes when both gains, predicted and realised, are
/// at most [`NEWTON_GAIN`]. Sets [`Findings::newton`] to what was found (or why no test could be
/// made) and returns the Hessian taken with its θ (`known` when taken there already), for the
/// standard errors, and the evaluations made.
fn newton_test(
    likelihood: &SubjectLikelihood<'_>,
    theta: &[f64],
    findings: &mut Findings,
    known: &Option<Curvature>,
) -> (Option<Curvature>, usize) {
    if findings.degenerate()
        || findings.interior_gradient < GRADIENT_CONVERGED
        || findings.interior.is_empty()
    {
        return (None, 0);
    }
    let mut evaluations = 0;
    let h = match known {
        Some((at, h)) if at == theta => h.clone(),
        _ => {
            evaluations += 2 * theta.len();
            hessian(likelihood, theta)
        }
    };
    let interior = &findings.interior;
    let slopes: Vec<f64> = interior.iter().map(|&j| findings.gradient[j]).collect();
    let block = principal_block(&h, interior);
    // The slope must say which way and how fast the objective rises: where a side rises more
    // steeply than the slope (beyond RISE_MARGIN and the absolute test's 1e-3), or on the side
    // the slope points away from, the point sits in a dip or on a step of the objective, and a
    // quadratic model built on that slope says nothing about the distance to the maximum.
    let against = interior.iter().copied().find(|&j| {
        findings.rises[j]
            .is_some_and(|(rise, side)| rises_against(rise, side, findings.gradient[j]))
    });
    let finite = slopes.iter().chain(block.iter()).all(|x| x.is_finite());
    findings.newton = Some(match (against, finite) {
        (Some(j), _) => NewtonOutcome::Against(j),
        (None, false) => NewtonOutcome::NotFinite,
        (None, true) => match newton_decrement(&slopes, &block) {
            None => NewtonOutcome::NotPositiveDefinite,
            Some((decrement, step)) => {
                let mut full_step = vec![0.0; theta.len()];
                for (&j, s) in interior.iter().zip(step) {
                    full_step[j] = s;
                }
                let (realised, made) = ray_gain(
                    |moved| {
                        let e = likelihood.evaluate(moved);
                        e.ln_likelihood + e.ln_prior
                    },
                    theta,
                    &full_step,
                    findings.at_theta,
                );
                evaluations += made;
                NewtonOutcome::Measured(Newton {
                    decrement,
                    predicted: 0.5 * decrement * decrement,
                    realised,
                })
            }
        },
    });
    (Some((theta.to_vec(), h)), evaluations)
}

/// The objective rises beside a point by `rise` per unit on the side `side` (+1 or −1) against
/// the point's slope `slope`, or more than [`RISE_MARGIN`] times faster (beyond the absolute
/// test's [`GRADIENT_CONVERGED`]): see [`newton_test`].
fn rises_against(rise: f64, side: f64, slope: f64) -> bool {
    rise >= GRADIENT_CONVERGED
        && (rise > RISE_MARGIN * slope.abs() + GRADIENT_CONVERGED || side * slope <= 0.0)
}

/// How much steeper than its slope the objective may rise on one side of a point (over a step
/// of [`SLOPE_STEP`]) before [`newton_test`] declines to judge it: where f is smooth the rise is
/// the slope less ½·f''·h, so any excess is noise of the differences (common practice).
const RISE_MARGIN: f64 = 1.5;

/// What [`newton_test`] found.
#[derive(Clone, Copy, Debug, PartialEq)]
enum NewtonOutcome {
    /// The Newton step's gains, predicted and measured.
    Measured(Newton),
    /// Along this parameter the objective rises against its slope, or much faster than it.
    Against(usize),
    /// The Hessian on the interior parameters is not positive definite (or numerically
    /// singular): the quadratic model has no maximum.
    NotPositiveDefinite,
    /// A slope or an entry of the Hessian is not finite.
    NotFinite,
}

/// The largest gain of `objective` over `at_theta` (its value at θ) at θ + m·`step` for
/// m = 1, 4, 16, … up to [`NEWTON_RAY`], stopping after two m in a row where it is below
/// `at_theta` (one fall may be a step of the numerical engine's objective at a rung of its
/// grid; see [`newton_test`]); with the evaluations made. A NaN gain is returned as NaN.
fn ray_gain(
    mut objective: impl FnMut(&[f64]) -> f64,
    theta: &[f64],
    step: &[f64],
    at_theta: f64,
) -> (f64, usize) {
    let mut realised = f64::NEG_INFINITY;
    let mut evaluations = 0;
    let mut falls = 0;
    let mut multiple = 1.0;
    while multiple <= NEWTON_RAY {
        let moved: Vec<f64> = theta
            .iter()
            .zip(step)
            .map(|(t, s)| t + multiple * s)
            .collect();
        evaluations += 1;
        let gain = objective(&moved) - at_theta;
        realised = if gain.is_nan() || realised.is_nan() {
            f64::NAN
        } else {
            realised.max(gain)
        };
        if gain.is_nan() {
            break;
        }
        falls = if gain < 0.0 { falls + 1 } else { 0 };
        if falls == 2 {
            break;
        }
        multiple *= 4.0;
    }
    (realised, evaluations)
}

/// What [`newton_test`] found.
#[derive(Clone, Copy, Debug, PartialEq)]
struct Newton {
    /// λ, the distance to the quadratic model's maximum in standard errors.
    decrement: f64,
    /// λ²/2, the gain of the Newton step in the quadratic model.
    predicted: f64,
    /// The largest gain of the objective measured along the step's ray (−∞ where the objective
    /// is −∞ at the step).
    realised: f64,
}

impl Newton {
    /// Neither gain above [`NEWTON_GAIN`] (a NaN gain fails).
    fn passes(self) -> bool {
        self.predicted <= NEWTON_GAIN && self.realised <= NEWTON_GAIN
    }
}

/// Runs within [`SAME_OPTIMUM`] of run `best`'s objective (itself included).
pub fn at_best(runs: &[StartResult], best: usize) -> usize {
    let objective = runs[best].objective;
    runs.iter()
        .filter(|r| (r.objective - objective).abs() <= SAME_OPTIMUM)
        .count()
}

/// Optima of the coarser grid's search within this much log-posterior of its best are refined
/// on the model's own grid (the grids' objectives differ by up to about 1 on 300 trials, so an
/// optimum slightly below the best on the coarser grid may be the best on the finer).
pub const REFINE_MARGIN: f64 = 2.0;

/// Most optima refined.
pub const REFINE_MOST: usize = 3;

/// The search of a model computed on a grid (the numerical first-passage engine), in two
/// levels: [`search`] (starts, examination, searches from the interior and the faces) with
/// `coarse`, the same model on a coarser grid (`Model::on_coarser_grid`: about 1/16 of the
/// solve), then, on the model's own grid, L-BFGS from each distinct optimum of that
/// search within [`REFINE_MARGIN`] of its best (at most [`REFINE_MOST`]), preconditioned by the
/// coarser grid's curvature, and the examination of the best point, with restarts (at most
/// [`ESCAPE_ROUNDS`]) while its slope is not small and they improve it. Multilevel optimisation
/// in its simplest form: the coarse level finds the basins, the fine level the optimum (Nash
/// 2000, "A multigrid approach to discretized optimization problems"). The verdict is the finer
/// grid's: the objective's rise on either side, its bounds and flatness; the searches from the
/// interior and the faces that confirm an optimum are the coarser grid's, and where they could
/// not confirm it (they kept finding better points, or a bound held) the whole search runs
/// again on the model's own grid from the refined point.
pub fn search_refined(
    likelihood: &SubjectLikelihood<'_>,
    coarse: &SubjectLikelihood<'_>,
    plan: &StartPlan,
    starts: usize,
    max_iterations: u64,
) -> Searched {
    let rough = search(coarse, plan, starts, max_iterations);
    let top = rough.runs[rough.best].objective;
    let mut order: Vec<usize> = (0..rough.runs.len()).collect();
    order.sort_by(|&a, &b| {
        rough.runs[b]
            .objective
            .total_cmp(&rough.runs[a].objective)
            .then(a.cmp(&b))
    });
    let mut chosen: Vec<&[f64]> = Vec::new();
    for &i in &order {
        let run = &rough.runs[i];
        if run.objective.is_nan()
            || run.objective < top - REFINE_MARGIN
            || chosen.len() == REFINE_MOST
        {
            break;
        }
        let distinct = chosen.iter().all(|c| {
            c.iter()
                .zip(&run.theta)
                .any(|(a, b)| (a - b).abs() > JOIN_DISTANCE)
        });
        if distinct {
            chosen.push(&run.theta);
        }
    }
    let curvature = rough.curvature.as_ref().map(|c| &c.1);
    let mut work = rough.work.clone();
    let mut runs: Vec<StartResult> = chosen
        .iter()
        .map(|theta| {
            let run = run_start_until(
                likelihood,
                theta.to_vec(),
                max_iterations,
                &[],
                EarlyStop::Never,
                curvature,
            );
            work.refined += run.evaluations;
            run
        })
        .collect();
    let mut best = best_of(&runs);
    let mut findings = examine(likelihood, plan, &runs[best].theta);
    work.refined += findings.evaluations;
    // Stopped short on the finer grid: again from there with a fresh memory, alternately
    // without and with the coarser grid's curvature, while that improves the point.
    for round in 0..ESCAPE_ROUNDS {
        if findings.interior_gradient < GRADIENT_CONVERGED {
            break;
        }
        let before = runs[best].objective;
        runs.push(run_start_until(
            likelihood,
            restart_point(&findings, &runs[best].theta),
            max_iterations,
            &[],
            EarlyStop::Never,
            curvature.filter(|_| round % 2 == 1),
        ));
        work.refined += runs[runs.len() - 1].evaluations;
        best = best_of(&runs);
        if runs[best].objective <= before {
            break;
        }
        findings = examine(likelihood, plan, &runs[best].theta);
        work.refined += findings.evaluations;
    }
    if !rough.verified {
        // The coarser grid's searches kept finding better points, or could not confirm a bound:
        // they run again on the model's own grid, from its best point.
        let mut again = search_from(
            likelihood,
            plan,
            vec![runs[best].theta.clone().into()],
            starts,
            max_iterations,
        );
        work.refined += again.work.total();
        again.work = work;
        again.verdict.runs += rough.runs.len() + runs.len();
        return again;
    }
    let (curvature, evaluations) = newton_test(likelihood, &runs[best].theta, &mut findings, &None);
    work.refined += evaluations;
    let verified = !findings.degenerate() && findings.stationary();
    let total_runs = rough.runs.len() + runs.len();
    let verdict = judge(likelihood, &runs[best], &findings, verified, total_runs);
    Searched {
        runs,
        best,
        verdict,
        work,
        curvature,
        starts_at_best: rough.starts_at_best,
        verified,
    }
}

/// The verdict on a single run without any search around it (used where a proper prior keeps
/// the point away from the bounds, as in the empirical-Bayes E-step).
pub fn verdict_of_run(likelihood: &SubjectLikelihood<'_>, run: &StartResult) -> Verdict {
    let gradient = likelihood
        .evaluate(&run.theta)
        .gradient
        .iter()
        .fold(0.0_f64, |m, g| m.max(g.abs()));
    let stopped_well = matches!(run.stop, Stop::Tolerance | Stop::NoImprovingStep);
    let converged = stopped_well && gradient < GRADIENT_CONVERGED;
    Verdict {
        converged,
        status: if converged {
            "converged".into()
        } else if !stopped_well {
            format!("not converged: {}", run.stop.describe())
        } else {
            format!("not converged: gradient {gradient:.1e} at the best point")
        },
        stop: run.stop,
        runs: 1,
    }
}

fn judge(
    likelihood: &SubjectLikelihood<'_>,
    best: &StartResult,
    findings: &Findings,
    verified: bool,
    runs: usize,
) -> Verdict {
    let names: Vec<&str> = likelihood
        .model()
        .free_slots()
        .iter()
        .map(|&s| likelihood.model().parameters[s].name.as_str())
        .collect();
    let list = |idx: &[usize]| idx.iter().map(|&j| names[j]).collect::<Vec<_>>().join(", ");
    let problem = if findings.value_blind {
        Some(
            "value-blind: the fitted probability of each choice is the same on every trial, so \
             the parameters acting through values are not identified"
                .to_string(),
        )
    } else if findings.below_baseline {
        Some(
            "no better than constant choice probabilities (the observed share of each option)"
                .to_string(),
        )
    } else if !findings.flat.is_empty() {
        Some(format!(
            "flat in {}: the likelihood does not change with it",
            list(&findings.flat)
        ))
    } else if !matches!(best.stop, Stop::Tolerance | Stop::NoImprovingStep) {
        Some(best.stop.describe().to_string())
    } else if !findings.stationary() {
        Some(format!(
            "{}{}",
            slope_left(findings, &names),
            match findings.newton {
                Some(NewtonOutcome::Measured(n)) if n.predicted > NEWTON_GAIN => format!(
                    "; the curvature puts the maximum {:.1e} standard errors away, {:.1e} \
                     higher in ln L: more than {NEWTON_GAIN:.0e}",
                    n.decrement, n.predicted
                ),
                Some(NewtonOutcome::Measured(n)) => format!(
                    "; the curvature puts the maximum {:.1e} higher in ln L, but along the \
                     Newton step the objective rises by {:.1e}: more than {NEWTON_GAIN:.0e}",
                    n.predicted, n.realised
                ),
                Some(NewtonOutcome::Against(j)) => format!(
                    "; along {} the objective rises beside the point against its slope or much \
                     faster (a dip or a step of the objective), so the curvature cannot tell how \
                     far the maximum is",
                    names[j]
                ),
                Some(NewtonOutcome::NotPositiveDefinite) => "; the Hessian there is not \
                     positive definite, so how far the maximum is cannot be told"
                    .to_string(),
                Some(NewtonOutcome::NotFinite) => {
                    "; a slope or the Hessian there is not finite".to_string()
                }
                None => String::new(),
            }
        ))
    } else if !verified && findings.at_bound.is_empty() {
        Some(format!(
            "still improving after {ESCAPE_ROUNDS} rounds of searches from the faces and the interior"
        ))
    } else if !verified {
        Some(format!(
            "at a bound not confirmed by a search from the interior: {}",
            list(&findings.at_bound)
        ))
    } else {
        None
    };
    let mut status = match (&problem, findings.at_bound.is_empty()) {
        (Some(p), _) => format!("not converged: {p}"),
        (None, true) => "converged".to_string(),
        (None, false) => format!(
            "converged; at a bound, confirmed from the interior: {}",
            list(&findings.at_bound)
        ),
    };
    if let Some(NewtonOutcome::Measured(n)) = findings.newton.filter(|_| problem.is_none()) {
        status.push_str(&format!(
            "; {}, but the curvature puts the maximum {:.1e} standard errors away, {:.1e} higher \
             in ln L ({:.1e} measured)",
            slope_left(findings, &names),
            n.decrement,
            n.predicted,
            n.realised
        ));
    }
    if problem.is_none() && !findings.kinks.is_empty() {
        status.push_str(&format!(
            "; on a kink of the likelihood in {} (the objective falls on both sides, its \
             one-sided slopes differ; its standard errors, from differences \
             of the gradient across the kink, are not reliable)",
            list(&findings.kinks)
        ));
    }
    Verdict {
        converged: problem.is_none(),
        status,
        stop: best.stop,
        runs,
    }
}

/// The largest slope left at the examined point, in words.
fn slope_left(findings: &Findings, names: &[&str]) -> String {
    let along = findings
        .steepest
        .map_or(String::new(), |j| format!(" along {}", names[j]));
    if findings.by_rise {
        format!(
            "the objective still rises beside the best point{along}: by {:.1e} in ln L over a \
             step of {SLOPE_STEP:.0e} on the optimiser's scale (slope {:.1e})",
            findings.interior_gradient * SLOPE_STEP,
            findings.interior_gradient
        )
    } else {
        format!(
            "gradient {:.1e} at the best point{along}",
            findings.interior_gradient
        )
    }
}

/// Step of [`ascent`] on the unconstrained scale.
const SLOPE_STEP: f64 = 1e-5;

/// A point θ beside the best point where the objective is higher.
type Uphill = Vec<f64>;

/// The steepest rise of the objective f = ln L + ln prior from θ along ±e_j, by one-sided
/// differences: max(f(θ + h·e_j) − f(θ), f(θ − h·e_j) − f(θ)) / h, floored at 0 (common
/// practice: θ is a local maximum along e_j when neither side rises), with the side's point when
/// it rises. Where f is smooth this is |∂f/∂θ_j| to O(h) (truncation about
/// h·|∂²f/∂θ_j²|/2, rounding about 1e-16·|f|/h). The numerical engine's objective steps
/// slightly where a distance crosses a rung of its grid's ladder (first_passage::numerical),
/// and L-BFGS often stops on such a step with the objective falling on one side; a central
/// difference there measures the step (5.7e1 for a fall of 1.1e-3 in one leaky fit), this the
/// rise, which is what a maximum must not have. Likewise at a kink of the gain-loss rule's
/// likelihood (see [`examine`]). +∞ where the objective is not finite on either side, so that
/// such a point never counts as converged.
fn ascent(likelihood: &SubjectLikelihood<'_>, theta: &[f64], at_theta: f64, j: usize) -> Ascent {
    let side = |sign: f64| {
        let mut moved = theta.to_vec();
        moved[j] += sign * SLOPE_STEP;
        let e = likelihood.evaluate(&moved);
        (moved, e.ln_likelihood + e.ln_prior)
    };
    let (up, down) = (side(1.0), side(-1.0));
    let slope = (up.1 - down.1) / (2.0 * SLOPE_STEP);
    let side = if down.1 > up.1 || up.1.is_nan() {
        -1.0
    } else {
        1.0
    };
    // The higher side, a NaN losing to a number (as f64::max has it).
    let higher = if down.1 > up.1 || up.1.is_nan() {
        down
    } else {
        up
    };
    let rise = (higher.1 - at_theta) / SLOPE_STEP;
    let (rise, uphill) = if !rise.is_finite() {
        (f64::INFINITY, None)
    } else if rise > 0.0 {
        (rise, Some(higher.0))
    } else {
        (0.0, None)
    };
    Ascent {
        rise,
        uphill,
        slope,
        side,
    }
}

/// What [`ascent`] measured along one parameter.
struct Ascent {
    /// The steepest one-sided rise (0 where neither side rises, +∞ where a side is not finite).
    rise: f64,
    /// The side's point, where it rises.
    uphill: Option<Uphill>,
    /// The central difference (f(θ + h·e_j) − f(θ − h·e_j)) / 2h, the signed slope to O(h²)
    /// where f is smooth (common practice).
    slope: f64,
    /// +1 where the side θ + h·e_j is the higher, −1 where θ − h·e_j is.
    side: f64,
}

/// Examines the point θ: bounds, flat parameters, value-blindness, baseline.
fn examine(likelihood: &SubjectLikelihood<'_>, plan: &StartPlan, theta: &[f64]) -> Findings {
    let evaluation = likelihood.evaluate(theta);
    let evaluations = std::cell::Cell::new(2); // this one and the trace below
    let natural = likelihood.natural(theta);
    let model = likelihood.model();
    let free = model.free_slots();
    let transforms = likelihood.transforms();
    let at_bound_list: Vec<usize> = (0..free.len())
        .filter(|&j| at_bound(natural[free[j]], &transforms[j]))
        .collect();
    let interior: Vec<usize> = (0..free.len())
        .filter(|j| !at_bound_list.contains(j))
        .collect();
    let at_theta = evaluation.ln_likelihood + evaluation.ln_prior;
    // The gain-loss rule switches its learning rate where a prediction error changes sign, so
    // ln L has kinks (continuous, with one-sided slopes that differ) where some trial's error
    // crosses zero as a parameter moves, and a maximum may sit on one: the gradient there is
    // one side's slope. Where it is not small, the objective itself decides: a parameter along
    // which it rises on neither side is at a kink of a maximum, not short of one.
    let mut kinks = Vec::new();
    let mut uphill = None;
    let mut gradient = vec![0.0; free.len()];
    let mut rises = vec![None; free.len()];
    let (mut interior_gradient, mut steepest) = (0.0, None);
    let by_rise = uses_numerical_engine(model.component_names[3]);
    for &j in &interior {
        if by_rise {
            // The numerical engine's derivatives are those of its grid, which is held still
            // between the rungs of a ladder and changes at them, where the objective steps:
            // judge the point by the objective itself, by how fast it rises on either side.
            // The point beside it that rises most is where a restart begins: across the step.
            evaluations.set(evaluations.get() + 2);
            let measured = ascent(likelihood, theta, at_theta, j);
            gradient[j] = measured.slope;
            rises[j] = Some((measured.rise, measured.side));
            if measured.rise > interior_gradient {
                (interior_gradient, steepest, uphill) = (measured.rise, Some(j), measured.uphill);
            }
            continue;
        }
        gradient[j] = evaluation.gradient[j];
        let mut slope = evaluation.gradient[j].abs();
        if slope >= GRADIENT_CONVERGED {
            evaluations.set(evaluations.get() + 2);
            let measured = ascent(likelihood, theta, at_theta, j);
            let rise = measured.rise;
            rises[j] = Some((rise, measured.side));
            if rise < GRADIENT_CONVERGED {
                // On a kink of a maximum: no slope to climb along it.
                gradient[j] = 0.0;
                kinks.push(j);
                slope = rise;
            }
        }
        // A NaN slope is passed over, as f64::max passes it over.
        if slope > interior_gradient {
            (interior_gradient, steepest) = (slope, Some(j));
        }
    }
    let flat = (0..free.len())
        .filter(|&j| {
            [0.0, 1.0].iter().all(|&q| {
                let mut moved = theta.to_vec();
                moved[j] = plan.level(j, q);
                evaluations.set(evaluations.get() + 1);
                let l = likelihood.evaluate(&moved).ln_likelihood;
                l.is_finite() && (l - evaluation.ln_likelihood).abs() < FLAT
            })
        })
        .collect();
    let trace = likelihood.trace(&natural);
    let probabilities: Vec<f64> = likelihood
        .subject()
        .trials
        .iter()
        .zip(&trace)
        .filter(|(t, _)| t.choice.is_some())
        .map(|(_, r)| r.probabilities[0])
        .collect();
    let (lo, hi) = probabilities
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &p| {
            (lo.min(p), hi.max(p))
        });
    let value_blind = probabilities.len() > 1 && hi - lo < CONSTANT_PROBABILITY;
    let below_baseline = !model.uses_response_times()
        && evaluation.ln_likelihood < constant_choice_baseline(likelihood) + SAME_OPTIMUM;
    Findings {
        at_bound: at_bound_list,
        flat,
        value_blind,
        below_baseline,
        interior_gradient,
        steepest,
        by_rise,
        kinks,
        uphill,
        gradient,
        rises,
        interior,
        at_theta,
        newton: None,
        evaluations: evaluations.get(),
    }
}

/// Σ_k n_k ln(n_k/n) over the sides chosen (a, b, …), the log-likelihood of the responses under
/// the constant choice probabilities that fit them best (p̂_k = n_k/n; 0 ln 0 = 0).
fn constant_choice_baseline(likelihood: &SubjectLikelihood<'_>) -> f64 {
    let mut counts: Vec<f64> = Vec::new();
    for c in likelihood.subject().trials.iter().filter_map(|t| t.choice) {
        if counts.len() <= c.index() {
            counts.resize(c.index() + 1, 0.0);
        }
        counts[c.index()] += 1.0;
    }
    let n: f64 = counts.iter().sum();
    counts
        .iter()
        .map(|&k| if k > 0.0 { k * (k / n).ln() } else { 0.0 })
        .sum()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// f(x) = −½·c·(x − m)² at x, with the true curvature c or an overstated one: the Newton
    /// test's gains (predicted, realised) and the evaluations along the ray.
    fn gains_on_a_parabola(c: f64, stated_curvature: f64, shortfall: f64) -> (f64, f64, usize) {
        let m = 0.7;
        let x = m - (2.0 * shortfall / c).sqrt();
        let f = |p: &[f64]| -0.5 * c * (p[0] - m) * (p[0] - m);
        let g = -c * (x - m);
        let (decrement, step) =
            newton_decrement(&[g], &DMatrix::from_element(1, 1, stated_curvature)).unwrap();
        let (realised, made) = ray_gain(f, &[x], &step, f(&[x]));
        (0.5 * decrement * decrement, realised, made)
    }

    /// Boyd & Vandenberghe 2004, §9.5.1: with the right curvature the Newton step reaches the
    /// maximum of a quadratic and gains exactly λ²/2; 4 and 16 steps land 3 and 15 times as far
    /// beyond it as the point is before it, below the point (9 and 225 times its shortfall), so
    /// the ray stops after three evaluations.
    #[test]
    fn with_the_right_curvature_the_ray_confirms_the_predicted_gain_in_three_evaluations() {
        let (predicted, realised, made) = gains_on_a_parabola(1500.0, 1500.0, 1e-6);
        assert!((predicted - 1e-6).abs() < 1e-15);
        assert!((realised - 1e-6).abs() < 1e-12, "{realised}");
        assert_eq!(made, 3);
    }

    /// Common practice (at a smooth point the objective rises on the side its slope points to,
    /// by the slope less ½·f''·h per unit): a V-shaped dip whose gradient is one side's slope,
    /// or a side rising far faster than the slope, is refused; a smooth rise is not.
    #[test]
    fn rises_against_the_slope_are_told_from_a_smooth_rise() {
        // Smooth: slope 5e-3, the rise on its side slightly less.
        assert!(!rises_against(4.9e-3, 1.0, 5e-3));
        assert!(!rises_against(4.9e-3, -1.0, -5e-3));
        // A dip: the gradient is the right side's slope, but the left side rises as well.
        assert!(rises_against(5e-3, -1.0, 5e-3));
        // A step of the objective on the slope's own side.
        assert!(rises_against(0.1, 1.0, 5e-3));
        // Rises below the absolute test are no evidence either way.
        assert!(!rises_against(5e-4, -1.0, 5e-3));
    }

    /// Common practice (the numerical engine's objective steps at the rungs of its grid): one
    /// fall along the ray does not end it; the gain beyond it is found.
    #[test]
    fn one_fall_along_the_ray_does_not_hide_the_gain_beyond_it() {
        // Below the point at 1 step, 4e-3 above it at 4, below again at 16 and 64.
        let bump_after_a_fall = |p: &[f64]| {
            if (1.5..5.0).contains(&p[0]) {
                4e-3
            } else {
                -1.0
            }
        };
        let (realised, made) = ray_gain(bump_after_a_fall, &[0.0], &[1.0], 0.0);
        assert_eq!(realised, 4e-3);
        assert_eq!(made, 4);
    }

    /// Common practice (a curvature measured by differences across a kink or a grid step can be
    /// far too large): with the curvature overstated 100-fold the predicted gain of a point
    /// 1e-3 below the maximum is 1e-5, under the test's 5e-5, but the ray finds the maximum's
    /// neighbourhood (m = 64 of the 100 steps the maximum is away) and the realised gain fails
    /// the test.
    #[test]
    fn an_overstated_curvature_is_caught_by_the_gain_along_the_ray() {
        let (predicted, realised, _) = gains_on_a_parabola(10.0, 1000.0, 1e-3);
        assert!(predicted <= NEWTON_GAIN, "{predicted}");
        assert!(realised > 0.8e-3, "{realised}");
        assert!(
            !Newton {
                decrement: (2.0 * predicted).sqrt(),
                predicted,
                realised
            }
            .passes()
        );
    }
}
