//! Diffusion choice stages whose bounds change with time, or whose evidence leaks: choices and
//! response times through the numerical first-passage engine
//! ([`crate::first_passage::numerical`]), choosing `a` at the upper bound. Five stages, one per
//! hypothesis a researcher may test against the fixed-bound `diffusion`:
//!
//! * `collapse-linear`: bounds ±(a/2)(1 − collapse_rate·t) (Voskuilen, Ratcliff & Smith 2016);
//! * `collapse-hyperbolic`: ±(a/2)(1 − collapse·t/(t + half_time)) (Voskuilen et al. 2016);
//! * `collapse-weibull`: ±(a/2)(1 − collapse·(1 − exp(−(t/collapse_scale)^collapse_shape)))
//!   (Hawkins, Forstmann, Wagenmakers, Ratcliff & Brown 2015);
//! * `urgency`: the accumulated evidence multiplied by 1 + urgency·t before it meets fixed bounds
//!   (Ditterich 2006; Cisek, Puskas & El-Murr 2009);
//! * `leaky-diffusion`: fixed bounds and an Ornstein–Uhlenbeck leak.
//!
//! Every stage also takes an optional `leak` (fixed at 0 unless declared). Options: `step`
//! (the engine's time step in seconds, default [`DEFAULT_STEP`]) and `points` (interior grid
//! points, default [`DEFAULT_POINTS`]); the accuracy they give is stated in the engine's docs.
//! The fitter searches with the same stage on a coarser grid ([`COARSER_STEP`] times the step,
//! the points divided by [`COARSER_POINTS`]) and refines on the stage's own grid, whose numbers
//! are the ones reported (`crate::fit::search::search_refined`).
//!
//! # Likelihood and gradient
//! A response c at time rt scores ln g_c(rt − ndt). Without leak one engine solve at drift 0
//! per evaluation serves every trial: each trial's drift enters in closed form by Girsanov's
//! theorem ([`Solution::ln_density_at_drift`]), so trial-by-trial drifts from learning cost no
//! further solves. With a leak (declared free, or fixed above 0) the engine solves at fixed drift
//! nodes 0.5 apart and interpolates between the six around each trial's drift
//! ([`interpolate`]; 5.4e-5 in ln g, below the engine's error; a solve at the drift itself where
//! a node's density is zero on the grid): one solve per node the subject's drifts reach, kept
//! for the evaluation; with the start midway a node below zero is the mirror image of the node
//! above (`Prepared::node_score`), so only |drift| counts. The solves carry forward
//! sensitivities in the stage's parameters (boundary, start, the shape's parameters, leak), ndt
//! and the drift enter after them, so the gradient is the exact derivative of the discretised
//! (and, with leak, interpolated) likelihood; it is chained to the model's free parameters.
//! These stages take the likelihood's reference path (dual numbers through the learning
//! recursion).
//!
//! A trial without response and a deadline D scores ln P(no bound by D − ndt); a lock L
//! conditions as in the `diffusion` stage (divided by P(no bound by L − ndt)); a choice without
//! its time scores P(bound), from a solve long enough to hold the whole distribution (up to
//! [`MAX_HORIZON`] seconds, the mass left then below [`SETTLED`] or shared in proportion).
//! No lapse and no across-trial variability.
//!
//! # Draws
//! [`Solution::sample`] inverts the engine's distribution function (exact up to the engine's
//! error), conditioned on a passage by the settled horizon (the mass left after it is below
//! [`SETTLED`] unless the horizon reached [`MAX_HORIZON`]).

use super::{
    ChoiceStage, Entry, Observation, Options, PreparedChoice, Signal, Slots, SubjectContext,
    only_options,
};
use crate::data::Choice;
use crate::first_passage::Bound;
use crate::first_passage::numerical::{
    Collapse, DEFAULT_POINTS, DEFAULT_STEP, Grid, NODES, Process, Solution, interpolate,
    nodes_around, solve, solve_settled,
};
use crate::model::dual::{D, chain, gradient};
use nalgebra::{Const, U1};
use num_dual::{DualNum, DualSVec64};
use rand::Rng;
use std::cell::RefCell;
use std::rc::Rc;

/// Longest horizon (seconds) of the solves behind probabilities, mean times and draws.
pub const MAX_HORIZON: f64 = 60.0;

/// Mass that may be left undecided at the end of those solves.
pub const SETTLED: f64 = 1e-7;

/// The names of this file's stages.
pub const STAGE_NAMES: [&str; 5] = [
    LINEAR_ENTRY.name,
    HYPERBOLIC_ENTRY.name,
    WEIBULL_ENTRY.name,
    URGENCY_ENTRY.name,
    LEAKY_ENTRY.name,
];

/// Linear collapse.
pub const LINEAR_ENTRY: Entry<dyn ChoiceStage> = Entry {
    name: "collapse-linear",
    parameters: &["boundary", "ndt", "start", "collapse_rate", "leak"],
    defaults: &[("start", 0.5), ("leak", 0.0)],
    equation: "s(t) = 1 − collapse_rate·t; (choice, rt) ~ first passage of dy = (drift − leak·y)dt + dW \
               from (start − ½)·boundary through ±(boundary/2)·s(t) at rt − ndt; a = upper bound  \
               (Voskuilen, Ratcliff & Smith 2016)",
    build: build_linear,
};

/// Hyperbolic collapse.
pub const HYPERBOLIC_ENTRY: Entry<dyn ChoiceStage> = Entry {
    name: "collapse-hyperbolic",
    parameters: &["boundary", "ndt", "start", "collapse", "half_time", "leak"],
    defaults: &[("start", 0.5), ("leak", 0.0)],
    equation: "s(t) = 1 − collapse·t/(t + half_time); (choice, rt) ~ first passage of \
               dy = (drift − leak·y)dt + dW from (start − ½)·boundary through ±(boundary/2)·s(t) at \
               rt − ndt; a = upper bound  (Voskuilen, Ratcliff & Smith 2016)",
    build: build_hyperbolic,
};

/// Weibull collapse.
pub const WEIBULL_ENTRY: Entry<dyn ChoiceStage> = Entry {
    name: "collapse-weibull",
    parameters: &[
        "boundary",
        "ndt",
        "start",
        "collapse",
        "collapse_scale",
        "collapse_shape",
        "leak",
    ],
    defaults: &[("start", 0.5), ("leak", 0.0)],
    equation: "s(t) = 1 − collapse·(1 − exp(−(t/collapse_scale)^collapse_shape)); (choice, rt) ~ first \
               passage of dy = (drift − leak·y)dt + dW from (start − ½)·boundary through \
               ±(boundary/2)·s(t) at rt − ndt; a = upper bound  (Hawkins et al. 2015)",
    build: build_weibull,
};

/// Urgency gain.
pub const URGENCY_ENTRY: Entry<dyn ChoiceStage> = Entry {
    name: "urgency",
    parameters: &["boundary", "ndt", "start", "urgency", "leak"],
    defaults: &[("start", 0.5), ("leak", 0.0)],
    equation: "evidence × (1 + urgency·t) meets ±boundary/2, i.e. s(t) = 1/(1 + urgency·t); \
               (choice, rt) ~ first passage of dy = (drift − leak·y)dt + dW from (start − ½)·boundary \
               at rt − ndt; a = upper bound  (Ditterich 2006; Cisek, Puskas & El-Murr 2009)",
    build: build_urgency,
};

/// Fixed bounds with leak.
pub const LEAKY_ENTRY: Entry<dyn ChoiceStage> = Entry {
    name: "leaky-diffusion",
    parameters: &["boundary", "ndt", "start", "leak"],
    defaults: &[("start", 0.5)],
    equation: "(choice, rt) ~ first passage of the Ornstein–Uhlenbeck process dy = (drift − leak·y)dt + dW \
               from (start − ½)·boundary through ±boundary/2 at rt − ndt; a = upper bound  \
               (Busemeyer & Townsend 1993)",
    build: build_leaky,
};

/// The coarser grid the fitter searches with (`ChoiceStage::on_coarser_grid`): this many times
/// the time step…
pub const COARSER_STEP: f64 = 4.0;

/// …and the interior points divided by this (at least [`MIN_COARSER_POINTS`]; the step at most
/// [`MAX_COARSER_STEP`]): with
/// [`COARSER_STEP`] about 1/16 of the solve's cost at 16 times its error (the engine is second
/// order in both), enough to find the basins (the coarse optimum of `collapse_speed`'s
/// participant was 55 fine-grid evaluations from the fine one).
pub const COARSER_POINTS: usize = 4;

/// Fewest interior points of the coarser grid (or the stage's own, if fewer)…
const MIN_COARSER_POINTS: usize = 50;

/// …and its longest time step (or the stage's own, if longer), seconds: a grid already coarse
/// is coarsened less. On the leaky model at step 0.004 s and 100 points, a coarser grid of
/// 0.016 s and 25 points left 4 of 30 fits of a recovery study unconfirmed (its searches from
/// the faces and the interior kept finding slightly better points).
const MAX_COARSER_STEP: f64 = 0.008;

/// Which boundary shape, with the slots of its (up to three) parameters.
#[derive(Clone, Copy)]
enum Shape {
    Constant,
    Linear,
    Hyperbolic,
    Weibull,
    Urgency,
}

#[derive(Clone)]
struct Moving {
    shape: Shape,
    boundary: usize,
    ndt: usize,
    start: usize,
    /// Slots of the shape's parameters, in [`Collapse::parameters`] order.
    shape_slots: Vec<usize>,
    leak: usize,
    grid: Grid,
}

fn grid_of(options: &Options) -> Result<Grid, String> {
    only_options(options, &["step", "points"])?;
    let step = match options.get("step") {
        None => DEFAULT_STEP,
        Some(v) => v
            .as_float()
            .or_else(|| v.as_integer().map(|i| i as f64))
            .ok_or("step must be a number of seconds")?,
    };
    let points = match options.get("points") {
        None => DEFAULT_POINTS,
        Some(v) => v
            .as_integer()
            .and_then(|i| usize::try_from(i).ok())
            .ok_or("points must be a whole number")?,
    };
    Grid::new(step, points).map_err(|e| e.to_string())
}

fn build_with(
    shape: Shape,
    names: &[&str],
    options: &Options,
    slots: Slots<'_>,
) -> Result<Box<dyn ChoiceStage>, String> {
    Ok(Box::new(Moving {
        shape,
        boundary: slots("boundary"),
        ndt: slots("ndt"),
        start: slots("start"),
        shape_slots: names.iter().map(|n| slots(n)).collect(),
        leak: slots("leak"),
        grid: grid_of(options)?,
    }))
}

fn build_linear(options: &Options, slots: Slots<'_>) -> Result<Box<dyn ChoiceStage>, String> {
    build_with(Shape::Linear, &["collapse_rate"], options, slots)
}

fn build_hyperbolic(options: &Options, slots: Slots<'_>) -> Result<Box<dyn ChoiceStage>, String> {
    build_with(
        Shape::Hyperbolic,
        &["collapse", "half_time"],
        options,
        slots,
    )
}

fn build_weibull(options: &Options, slots: Slots<'_>) -> Result<Box<dyn ChoiceStage>, String> {
    build_with(
        Shape::Weibull,
        &["collapse", "collapse_scale", "collapse_shape"],
        options,
        slots,
    )
}

fn build_urgency(options: &Options, slots: Slots<'_>) -> Result<Box<dyn ChoiceStage>, String> {
    build_with(Shape::Urgency, &["urgency"], options, slots)
}

fn build_leaky(options: &Options, slots: Slots<'_>) -> Result<Box<dyn ChoiceStage>, String> {
    build_with(Shape::Constant, &[], options, slots)
}

/// The stage's numbers: a value with its partial derivatives in the directions below.
type Local = DualSVec64<8>;
const DRIFT: usize = 0;
const BOUNDARY: usize = 1;
const START: usize = 2;
const NDT: usize = 3;
/// The shape's parameters take directions 4, 5, 6.
const SHAPE: usize = 4;
const LEAK: usize = 7;

/// A value seeded with a unit derivative in `direction`.
fn seeded_number(value: f64, direction: usize) -> Local {
    Local::from_re(value).derivative(direction)
}

impl Moving {
    /// The collapse shape from its parameters (in `Collapse::parameters` order).
    fn collapse<N: Copy>(&self, parameters: &[N]) -> Collapse<N> {
        match self.shape {
            Shape::Constant => Collapse::Constant,
            Shape::Linear => Collapse::Linear {
                rate: parameters[0],
            },
            Shape::Hyperbolic => Collapse::Hyperbolic {
                fraction: parameters[0],
                half_time: parameters[1],
            },
            Shape::Weibull => Collapse::Weibull {
                fraction: parameters[0],
                scale: parameters[1],
                shape: parameters[2],
            },
            Shape::Urgency => Collapse::Urgency {
                gain: parameters[0],
            },
        }
    }
}

impl ChoiceStage for Moving {
    fn signal(&self) -> Signal {
        Signal::DriftDifference
    }

    fn uses_response_times(&self) -> bool {
        true
    }

    fn max_options(&self) -> Option<usize> {
        Some(2)
    }

    fn on_coarser_grid(&self) -> Option<Box<dyn ChoiceStage>> {
        let (step, points) = (self.grid.step(), self.grid.points());
        let grid = Grid::new(
            (step * COARSER_STEP).min(MAX_COARSER_STEP).max(step),
            (points / COARSER_POINTS).max(MIN_COARSER_POINTS.min(points)),
        )
        .ok()?;
        Some(Box::new(Moving {
            grid,
            ..self.clone()
        }))
    }

    fn prepare<'a>(&'a self, p: &'a [D], context: SubjectContext) -> Box<dyn PreparedChoice + 'a> {
        let leak = p[self.leak];
        // Girsanov's change of drift needs a leak of exactly zero that the fit does not move.
        let tilts = leak.re == 0.0 && gradient(&leak).iter().all(|&g| g == 0.0);
        let shape_values: Vec<Local> = self
            .shape_slots
            .iter()
            .enumerate()
            .map(|(k, &slot)| seeded_number(p[slot].re, SHAPE + k))
            .collect();
        let local = Process::new(
            Local::from_re(0.0),
            seeded_number(p[self.boundary].re, BOUNDARY),
            seeded_number(p[self.start].re, START),
            seeded_number(leak.re, LEAK),
            self.collapse(&shape_values),
        )
        .ok();
        let plain_shape: Vec<f64> = self.shape_slots.iter().map(|&s| p[s].re).collect();
        let plain = Process::new(
            0.0,
            p[self.boundary].re,
            p[self.start].re,
            leak.re,
            self.collapse(&plain_shape),
        )
        .ok();
        Box::new(Prepared {
            stage: self,
            p,
            local,
            plain,
            tilts,
            mirrors: p[self.start].re == 0.5,
            ndt: p[self.ndt].re,
            context,
            solutions: RefCell::new(Vec::new()),
            settled: RefCell::new(Vec::new()),
            settled_local: RefCell::new(Vec::new()),
        })
    }
}

struct Prepared<'a> {
    stage: &'a Moving,
    p: &'a [D],
    /// The process at drift 0 on the stage's numbers, and on plain numbers; `None` when a
    /// parameter is outside its domain (an invalid proposal: ln L = −∞).
    local: Option<Process<Local>>,
    plain: Option<Process<f64>>,
    /// True when one solve serves every drift (no leak).
    tilts: bool,
    /// True when the process starts midway between the bounds (start exactly ½), so that a
    /// drift node below zero is served by the mirrored solve at −node ([`Prepared::node_score`]).
    mirrors: bool,
    ndt: f64,
    context: SubjectContext,
    /// Solves to the subject's last time, by drift bits (one entry, at drift 0, when `tilts`).
    solutions: SolveCache<Local>,
    /// Solves that hold the whole distribution, on plain numbers and on the stage's numbers.
    settled: SolveCache<f64>,
    settled_local: SolveCache<Local>,
}

/// Solves kept by the bit pattern of their drift.
type SolveCache<N> = Cache<Solution<N>>;

/// Values kept by (drift bits, whether the drift carries its derivative).
type Cache<N> = RefCell<Vec<((u64, bool), Rc<N>)>>;

/// Most solves kept per prepared stage (per-drift solves with leak).
const SOLUTION_CACHE: usize = 512;

/// Finds or makes the solve for `drift` in `cache`.
fn cached<N>(
    cache: &Cache<N>,
    drift: f64,
    seeded: bool,
    make: impl FnOnce() -> Option<N>,
) -> Option<Rc<N>> {
    let key = (drift.to_bits(), seeded);
    if let Some((_, hit)) = cache.borrow().iter().find(|(k, _)| *k == key) {
        return Some(Rc::clone(hit));
    }
    let fresh = Rc::new(make()?);
    let mut cache = cache.borrow_mut();
    if cache.len() < SOLUTION_CACHE {
        cache.push((key, Rc::clone(&fresh)));
    }
    Some(fresh)
}

impl Prepared<'_> {
    /// A horizon past the latest decision time the subject's observations need: the latest
    /// observed time itself, not less the non-decision time, so that the grid does not move
    /// with ndt (its dual derivative is then the derivative of the discretised likelihood).
    fn horizon(&self) -> f64 {
        let c = &self.context;
        let latest = [Some(c.rt_max), c.deadline, c.lock]
            .into_iter()
            .flatten()
            .fold(0.0, f64::max);
        latest.max(1e-3)
    }

    /// The solve on the stage's numbers at drift `at`, to the subject's last time (with a
    /// derivative in the drift when `seeded`).
    fn local_solution(&self, at: f64, seeded: bool) -> Option<Rc<Solution<Local>>> {
        self.local_solved(at, seeded, &self.solutions, |process| {
            solve(process, self.horizon(), self.stage.grid).ok()
        })
    }

    /// A solve on the stage's numbers at drift `at` (a fixed drift node, or with its derivative
    /// in the drift when `seeded`), kept in `cache` and made by `make` from the process.
    fn local_solved(
        &self,
        at: f64,
        seeded: bool,
        cache: &SolveCache<Local>,
        make: impl FnOnce(&Process<Local>) -> Option<Solution<Local>>,
    ) -> Option<Rc<Solution<Local>>> {
        let drift = if seeded {
            seeded_number(at, DRIFT)
        } else {
            Local::from_re(at)
        };
        let process = self.local?.with_drift(drift);
        cached(cache, at, seeded, || make(&process))
    }

    /// The solve on plain numbers holding the whole distribution at drift `v`.
    fn plain_settled(&self, v: f64) -> Option<(Rc<Solution<f64>>, Option<f64>)> {
        let process = self.plain?;
        let solve_drift = if self.tilts { 0.0 } else { v };
        let solution = cached(&self.settled, solve_drift, false, || {
            let at = process.with_drift(solve_drift);
            solve_settled(
                &at,
                self.horizon().max(1.0),
                MAX_HORIZON,
                self.stage.grid,
                SETTLED,
            )
            .ok()
        })?;
        Some((solution, self.tilts.then_some(v)))
    }

    /// The stage's number as a dual number in the model's free parameters.
    fn chained(&self, x: Local, signal: &D) -> D {
        let partials: [f64; 8] = x.eps.unwrap_generic(Const::<8>, U1).into();
        let s = self.stage;
        let mut parts: Vec<(f64, &D)> = vec![
            (partials[DRIFT], signal),
            (partials[BOUNDARY], &self.p[s.boundary]),
            (partials[START], &self.p[s.start]),
            (partials[NDT], &self.p[s.ndt]),
            (partials[LEAK], &self.p[s.leak]),
        ];
        for (k, &slot) in s.shape_slots.iter().enumerate() {
            parts.push((partials[SHAPE + k], &self.p[slot]));
        }
        if !x.re.is_finite() {
            return D::from_re(x.re);
        }
        chain(x.re, &parts)
    }

    /// ln P(observation) on the stage's numbers at drift v: from the solve at drift 0 changed to
    /// v by Girsanov's theorem without leak, from the drift nodes around v with leak
    /// ([`interpolate`]).
    fn score(&self, v: f64, observation: &Observation) -> Option<Local> {
        let drift = seeded_number(v, DRIFT);
        if self.tilts {
            return self.score_on(0.0, false, Some(drift), observation);
        }
        // The passage of a response with its time, whose density's smooth part τ is taken out
        // before interpolating and put back after.
        let passage = match (observation.choice, observation.rt) {
            (Some(choice), Some(rt)) => Some((
                bound_of(choice),
                Local::from_re(rt) - seeded_number(self.ndt, NDT),
            )),
            _ => None,
        };
        let nodes = nodes_around(v);
        let mut values = [Local::from_re(0.0); NODES];
        // Any node's solve: τ depends on the process, not on the drift it was solved at (the
        // solve at |node| when nodes below zero are mirrored, so no solve is made for τ).
        let mut solved = None;
        for (value, &node) in values.iter_mut().zip(&nodes) {
            *value = self.node_score(node, observation)?;
            let solved_at = if self.mirrors { node.abs() } else { node };
            if let (Some((bound, t)), Some(solution)) =
                (passage, self.local_solution(solved_at, false))
            {
                *value -= solution.drift_exponent(t, bound, Local::from_re(node));
                solved = Some(solution);
            }
        }
        match interpolate(drift, nodes, values) {
            Some(mut total) => {
                if let (Some((bound, t)), Some(solution)) = (passage, solved) {
                    total += solution.drift_exponent(t, bound, drift);
                }
                Some(total)
            }
            // A node's density is zero on the grid (far in a tail the polynomial cannot
            // bridge): a solve at the drift itself.
            None => self.score_on(v, true, None, observation),
        }
    }

    /// ln P(observation) on the stage's numbers from the solve at the drift node `node`; a node
    /// below zero from the solve at −node with the other bound when the process starts midway
    /// (`mirrors`). The bounds ±S(t) are symmetric about the midpoint, so with start w the
    /// process at drift v is the mirror image of the one at −v started at 1 − w:
    /// g_upper(t; v, w) = g_lower(t; −v, 1 − w) (the reflection x → −x of the diffusion, common
    /// practice), and the engine's grid, start and steps are symmetric about the midpoint too,
    /// so the mirrored solve equals the direct one up to rounding (tests/suite/
    /// numerical_passage.rs compares them). At w = ½ the values agree and the derivative in w
    /// changes sign; those in the boundary, ndt, leak and the shape's parameters do not. Halves
    /// the solves of a subject whose drifts span both signs.
    fn node_score(&self, node: f64, observation: &Observation) -> Option<Local> {
        if !(self.mirrors && node < 0.0) {
            return self.score_on(node, false, None, observation);
        }
        let mirrored = Observation {
            choice: observation
                .choice
                .map(|c| if c == Choice::A { Choice::B } else { Choice::A }),
            ..*observation
        };
        let mut score = self.score_on(-node, false, None, &mirrored)?;
        if let Some(partials) = score.eps.0.as_mut() {
            partials[START] = -partials[START];
        }
        Some(score)
    }

    /// ln P(observation) on the stage's numbers from the solve at drift `at` (with its
    /// derivative in the drift when `seeded`), changed to `drift` by Girsanov's theorem when
    /// given (no leak).
    fn score_on(
        &self,
        at: f64,
        seeded: bool,
        drift: Option<Local>,
        observation: &Observation,
    ) -> Option<Local> {
        let minus_infinity = Local::from_re(f64::NEG_INFINITY);
        let Some(solution) = self.local_solution(at, seeded) else {
            return Some(minus_infinity);
        };
        let ndt = seeded_number(self.ndt, NDT);
        let decision = |time: f64| Local::from_re(time) - ndt;
        // ln P(no bound by the lock), what every observation is conditioned on.
        let window = match self.context.lock {
            Some(lock) if lock > self.ndt => {
                Some(solution.ln_undecided(decision(lock), drift).ok()?)
            }
            _ => None,
        };
        let conditioned = |x: Local| match window {
            Some(w) => x - w,
            None => x,
        };
        let value = match (observation.choice, observation.rt) {
            (Some(choice), Some(rt)) => {
                let t = decision(rt);
                let bound = bound_of(choice);
                let ln_g = match drift {
                    Some(v) => solution.ln_density_at_drift(t, bound, v),
                    None => solution.ln_density(t, bound),
                };
                conditioned(ln_g.unwrap_or(minus_infinity))
            }
            (None, _) => {
                let deadline = self.context.deadline?;
                conditioned(
                    solution
                        .ln_undecided(decision(deadline), drift)
                        .unwrap_or(minus_infinity),
                )
            }
            (Some(choice), None) => {
                let bound = bound_of(choice);
                match (self.context.lock, window) {
                    (Some(lock), Some(w)) => {
                        // P(bound after the lock | none before) = (P_c(∞) − P_c(L))/S(L).
                        let settled = self.local_settled(at, seeded)?;
                        let all =
                            settled.absorbed_by(Local::from_re(settled.horizon()), bound, drift);
                        let before = settled.absorbed_by(decision(lock), bound, drift);
                        match (all, before) {
                            (Ok(all), Ok(before)) if (all - before).re > 0.0 => {
                                (all - before).ln() - w
                            }
                            _ => minus_infinity,
                        }
                    }
                    _ => {
                        let settled = self.local_settled(at, seeded)?;
                        let end = Local::from_re(settled.horizon());
                        let mass = |b| settled.absorbed_by(end, b, drift).ok();
                        match (mass(bound), mass(bound.other())) {
                            (Some(c), Some(o)) if c.re > 0.0 => (c / (c + o)).ln(),
                            _ => minus_infinity,
                        }
                    }
                }
            }
        };
        Some(value)
    }

    /// The solve on the stage's numbers that holds the whole distribution at the fixed drift
    /// `at`.
    fn local_settled(&self, at: f64, seeded: bool) -> Option<Rc<Solution<Local>>> {
        self.local_solved(at, seeded, &self.settled_local, |process| {
            solve_settled(
                process,
                self.horizon().max(1.0),
                MAX_HORIZON,
                self.stage.grid,
                SETTLED,
            )
            .ok()
        })
    }

    /// P(a), the mean decision time, at drift v, from the settled plain solve.
    fn summary(&self, v: f64) -> Option<(f64, Option<f64>)> {
        let (solution, drift) = self.plain_settled(v)?;
        let end = solution.horizon();
        let up = solution.absorbed_by(end, Bound::Upper, drift).ok()?;
        let down = solution.absorbed_by(end, Bound::Lower, drift).ok()?;
        let mean = solution.mean_decision_time(drift).ok()?;
        (up + down > 0.0).then(|| (up / (up + down), mean))
    }
}

impl PreparedChoice for Prepared<'_> {
    fn ln_likelihood(&self, signal: &[D], observation: &Observation) -> Option<D> {
        let signal = signal[0];
        let score = self.score(signal.re, observation)?;
        Some(self.chained(score, &signal))
    }

    fn probabilities(&self, signal: &[f64]) -> Vec<f64> {
        let p = self.summary(signal[0]).map_or(f64::NAN, |s| s.0);
        vec![p, 1.0 - p]
    }

    fn expected_times(&self, signal: &[f64]) -> Option<(f64, f64)> {
        let decision = self.summary(signal[0])?.1?;
        Some((decision, decision + self.ndt))
    }

    fn simulate(&self, signal: &[f64], rng: &mut dyn Rng) -> (Choice, Option<f64>) {
        let Some((solution, drift)) = self.plain_settled(signal[0]) else {
            return (Choice::A, None);
        };
        let lock = self.context.lock.unwrap_or(f64::NEG_INFINITY);
        // Rejection below the lock, as in the `diffusion` stage.
        for _ in 0..1_000_000 {
            // Conditioned on a passage by the horizon (the mass left after it is below SETTLED,
            // or the horizon is MAX_HORIZON).
            let Some((bound, t)) = solution.sample(drift, rng).ok().flatten() else {
                return (Choice::A, None);
            };
            let rt = t + self.ndt;
            if rt >= lock {
                let choice = if bound == Bound::Upper {
                    Choice::A
                } else {
                    Choice::B
                };
                return (choice, Some(rt));
            }
        }
        (Choice::A, Some(lock))
    }
}

/// The bound of a choice: a (index 0) is the upper bound, b the lower.
fn bound_of(choice: Choice) -> Bound {
    if choice == Choice::A {
        Bound::Upper
    } else {
        Bound::Lower
    }
}
