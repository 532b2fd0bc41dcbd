//! First passage through time-varying bounds, with an optional leak, by a Crank–Nicolson
//! solution of the Fokker–Planck equation: the numerical engine beside the closed-form one of
//! [`crate::first_passage`].
//!
//! # The process
//! Evidence y (measured from the midpoint between the starting bounds, unit noise) follows the
//! Ornstein–Uhlenbeck equation dy = (v − λ·y)·dt + dW from y₀ = (w − ½)·a, where v is the drift,
//! λ ≥ 0 the leak (λ = 0: the Wiener diffusion), a the boundary separation at t = 0 and w the
//! relative start. The bounds are ±S(t) with S(t) = (a/2)·s(t), s(0) = 1, given by a [`Collapse`]
//! shape. With a constant shape and no leak this is the process of [`crate::first_passage`]
//! (lower bound at 0, upper at a, start w·a), and the engine reproduces its densities
//! (tests/suite/numerical_passage.rs).
//!
//! # Method
//! The density p(y, t) of processes not yet absorbed solves the Fokker–Planck equation
//! ∂p/∂t = −∂/∂y[(v − λy)p] + ½∂²p/∂y² with p = 0 at both bounds (Cox & Miller 1965). In the
//! coordinate z = y/S(t) ∈ [−1, 1], where the bounds stand still, q(z, t) = S(t)·p(S(t)z, t)
//! solves
//!
//! ```text
//! ∂q/∂t = D(t)·∂²q/∂z² − ∂/∂z[b(z, t)·q],  D = 1/(2S²),  b = (v − λSz)/S − z·S′/S,
//! ```
//!
//! with q(±1, t) = 0, and the first-passage densities are the probability currents through the
//! bounds, g₊(t) = −∂q/∂z(1, t)/(2S²) and g₋(t) = ∂q/∂z(−1, t)/(2S²). The equation is discretised
//! by central differences on M interior points and Crank–Nicolson in time (as Voskuilen, Ratcliff
//! & Smith 2016 did for collapsing bounds), the currents by second-order one-sided differences.
//! The process starts as the Gaussian transition density of the free process at a time t₀ so
//! early that the bounds hold less than 1e-12 of it (t₀ = (d/7.5)², d the distance to the
//! nearer bound), with steps growing geometrically from t₀ to h and four backward-Euler steps
//! first (Rannacher 1984) to damp Crank–Nicolson's oscillations after a sharp start. Before t₀
//! the density is the small-time asymptote 2|ψ(S(t), t | y₀, 0)| of the single-bound integral
//! equation (Buonocore, Nobile & Ricciardi 1987): the free transition density times the speed of
//! approach to the bound. Between grid times the density is interpolated by cubic Hermite
//! polynomials in ln g (linear where a neighbour is not positive), so it is smooth in t and in
//! the non-decision time.
//!
//! # Why not the integral equation
//! The integral-equation method of Buonocore, Nobile & Ricciardi (1987) and Smith (2000) was
//! built first. Its densities are differences of terms that decay like powers of t while the
//! density itself decays like e^{−π²t/(2a²)}, so its relative error grows exponentially with
//! t/a²: measured here at a = 0.5, start 0.3, h = 0.001, the error of ln g was 2e-5 at t/a² = 0.5,
//! 1e-2 at t/a² = 2 and ln g was −∞ (a negative density) at t/a² = 3 — response times of several
//! seconds with narrow bounds are common. A grid of the density only loses mass, so its errors
//! stay relative.
//!
//! # Accuracy and cost
//! Second order in h and in the grid spacing 2/M; see [`DEFAULT_STEP`] for the measured errors.
//! Cost: one tridiagonal solve of M unknowns per step, so a solve to horizon T costs about
//! (T/h)·M·20 operations for the density and about as much again for each parameter the
//! derivatives are taken in. Those derivatives are forward sensitivities of the discretised
//! solution (`march`): the exact derivatives of the grid's numbers, computed on plain numbers with
//! the density's factored matrix. The grid's start time and first steps depend on the distances
//! from the start to the bounds rounded down to a fixed ladder ([`DISTANCE_LADDER`]), so the
//! grid is constant while the parameters move between rungs and those derivatives are the
//! objective's (within 2.0e-6 relative of central differences in
//! tests/suite/numerical_passage.rs; 1.9e-4 when the grid moved continuously, which left L-BFGS
//! short of the optimum on about one fit in four).
//!
//! # Drift without a new solve
//! Without leak, the law of the Wiener process with drift v has density exp(v·(X_t − y₀) −
//! v²t/2) with respect to the law at drift 0 (Girsanov's theorem; at the passage time X equals
//! the bound, by optional stopping). So g_v(t) = g₀(t)·exp(v·(S(t) − y₀) − v²t/2) for either
//! bound: one solve serves every drift ([`Solution::ln_density_at_drift`]). With leak there is no
//! such identity: each drift is a solve, or an interpolation between solves at fixed drift nodes
//! (`drift_nodes`).
//!
//! # Numbers
//! Densities are returned as logarithms; where the discretised density is not positive (far
//! tails below the discretisation error, or after the bounds have met) the logarithm is exactly
//! −∞. No function returns NaN for valid parameters: every parameter is checked by
//! [`Process::new`], and the grid by [`Grid::new`].

mod drift_nodes;
mod march;
mod partials;
mod shape;

pub use drift_nodes::{NODE_SPACING, NODES, interpolate, nodes_around};
pub use partials::Partials;
pub use shape::Collapse;

use march::March;
use partials::carried;

use super::Bound;
use num_dual::DualNum;
use rand::{Rng, RngExt};
use std::f64::consts::PI;

/// Default time step h (seconds).
///
/// # Accuracy
/// With [`DEFAULT_POINTS`], measured by tests/suite/numerical_passage.rs: |Δ ln g| ≤ 1e-3
/// against the closed-form Wiener density (decision times from 0.05 s and from 0.1·d², d the
/// distance from start to bound, start 0.2–0.8, boundary ≥ 0.5; drift by Girsanov's theorem),
/// ≤ 3.2e-3 solved at strong drifts, ≤ 2.7e-4 against an mpmath solution for a linear collapse,
/// ≤ 2.9e-3 against the Ornstein–Uhlenbeck closed form. The error is second order in h and in the
/// spacing 2/M, and grows with h/a² (narrow bounds) and on the leading edge of a bound (times
/// below 0.1·d², where it reached 1e-2 to 8e-2 at densities below e^-5).
pub const DEFAULT_STEP: f64 = 0.002;

/// Default number of interior grid points M between the bounds (accuracy: see [`DEFAULT_STEP`]).
pub const DEFAULT_POINTS: usize = 200;

/// Most time steps one solve may take.
pub const MAX_STEPS: usize = 200_000;

/// Relative growth of a step while steps grow from t₀ to h.
const STEP_GROWTH: f64 = 0.25;

/// On the leading edge of a bound at distance d, where ln g ≈ −d²/(2t) changes fast, steps are
/// at most EDGE_STEP·t²/d² (a change of ln g of EDGE_STEP/2 per step), once −d²/(2t) is above
/// −EDGE_FROM (earlier the density is below e^{−30} and is not resolved).
const EDGE_STEP: f64 = 0.2;

/// See [`EDGE_STEP`].
const EDGE_FROM: f64 = 30.0;

/// Ratio of the ladder the distances to the bounds are rounded down to before they set the grid's
/// start and first steps. Derivatives of the solution hold the grid fixed; with the grid a
/// continuous function of boundary and start they missed the grid's motion and differed from the
/// objective's slope by up to about 5e-3 at fitted optima, enough to stop L-BFGS short. On the
/// ladder the grid is constant between rungs, so the derivatives are exact there, and the
/// objective steps slightly where a distance crosses a rung.
const DISTANCE_LADDER: f64 = 1.0442737824274138; // 2^(1/16)

/// Backward-Euler steps before Crank–Nicolson (Rannacher 1984).
const DAMPING_STEPS: usize = 4;

/// The distance to the nearer bound, in standard deviations of the free process, at which the
/// solve starts (a normal tail of 7.5 sd holds less than 1e-13).
const START_DEVIATIONS: f64 = 7.5;

/// What a solve cannot do.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum NumericalError {
    /// A parameter outside its domain.
    #[error("{name} = {value} is not allowed: expected {expected}")]
    Parameter {
        /// The parameter's name in model files.
        name: &'static str,
        /// Its value.
        value: f64,
        /// What it must be.
        expected: &'static str,
    },
    /// A time step, number of points or horizon that is not allowed.
    #[error(
        "a grid of {points} points and steps of {step} s to {horizon} s is not possible (step and \
         horizon > 0, at least 10 points, at most {MAX_STEPS} steps)"
    )]
    Grid {
        /// The horizon asked for.
        horizon: f64,
        /// The step asked for.
        step: f64,
        /// The number of points asked for.
        points: usize,
    },
    /// A time after the solved horizon.
    #[error("time {time} s is after the solved horizon of {horizon} s")]
    BeyondHorizon {
        /// The time asked for.
        time: f64,
        /// The last time solved.
        horizon: f64,
    },
    /// A change of drift after the solve, which needs a process without leak.
    #[error("the drift can change after a solve only without leak (leak = {0})")]
    TiltWithLeak(f64),
}

/// The discretisation: time step h (seconds) and interior points M.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Grid {
    step: f64,
    points: usize,
}

impl Grid {
    /// A grid with time step h > 0 and M ≥ 10 interior points.
    pub fn new(step: f64, points: usize) -> Result<Grid, NumericalError> {
        if step > 0.0 && step.is_finite() && points >= 10 {
            Ok(Grid { step, points })
        } else {
            Err(NumericalError::Grid {
                horizon: f64::NAN,
                step,
                points,
            })
        }
    }

    /// The time step h.
    pub fn step(&self) -> f64 {
        self.step
    }

    /// The interior points M.
    pub fn points(&self) -> usize {
        self.points
    }
}

impl Default for Grid {
    fn default() -> Grid {
        Grid {
            step: DEFAULT_STEP,
            points: DEFAULT_POINTS,
        }
    }
}

/// The diffusion: drift, boundary separation at t = 0, relative start, leak and collapse shape.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Process<N> {
    drift: N,
    boundary: N,
    start: N,
    leak: N,
    collapse: Collapse<N>,
}

impl<N: DualNum<Primitive = f64> + Copy> Process<N> {
    /// A process with drift v, boundary separation a > 0, relative start w ∈ (0, 1), leak λ ≥ 0
    /// and a collapse shape whose parameters lie in their domains (see [`Collapse`]).
    pub fn new(
        drift: N,
        boundary: N,
        start: N,
        leak: N,
        collapse: Collapse<N>,
    ) -> Result<Self, NumericalError> {
        let check = |name, value: N, ok: bool, expected| {
            if ok && value.re().is_finite() {
                Ok(())
            } else {
                Err(NumericalError::Parameter {
                    name,
                    value: value.re(),
                    expected,
                })
            }
        };
        check("drift", drift, true, "a finite number")?;
        check("boundary", boundary, boundary.re() > 0.0, "a number > 0")?;
        check(
            "start",
            start,
            start.re() > 0.0 && start.re() < 1.0,
            "a number in (0, 1)",
        )?;
        check("leak", leak, leak.re() >= 0.0, "a number ≥ 0")?;
        collapse.check()?;
        Ok(Process {
            drift,
            boundary,
            start,
            leak,
            collapse,
        })
    }

    /// The same process with another drift.
    pub fn with_drift(&self, drift: N) -> Self {
        Process { drift, ..*self }
    }

    /// The drift v.
    pub fn drift(&self) -> N {
        self.drift
    }

    /// The leak λ.
    pub fn leak(&self) -> N {
        self.leak
    }

    /// Every parameter of the process, shape parameters included.
    fn numbers(&self) -> Vec<N> {
        let mut all = vec![self.drift, self.boundary, self.start, self.leak];
        all.extend(self.collapse.parameters().into_iter().map(|(_, x)| x));
        all
    }

    /// The start y₀ = (w − ½)·a, measured from the midpoint.
    fn origin(&self) -> N {
        (self.start - 0.5) * self.boundary
    }

    /// The half-width S(t) and its slope S′(t).
    fn half_width(&self, t: N) -> (N, N) {
        let (s, ds) = self.collapse.factor(t);
        let half = self.boundary * 0.5;
        (half * s, half * ds)
    }

    /// The bound of `bound` at t and its slope, measured from the midpoint.
    fn bound_at(&self, t: N, bound: Bound) -> (N, N) {
        let (s, ds) = self.half_width(t);
        match bound {
            Bound::Upper => (s, ds),
            Bound::Lower => (-s, -ds),
        }
    }
}

/// The transition over a lag Δ: the start's decay e^{−λΔ}, the drift's gain (1 − e^{−λΔ})/λ and
/// the variance (1 − e^{−2λΔ})/(2λ) of the Ornstein–Uhlenbeck process (1, Δ and Δ when λ = 0).
#[derive(Clone, Copy)]
struct Lag<N> {
    decay: N,
    gain: N,
    variance: N,
}

/// (1 − e^{−x})/x, by its series where x is small (no 0/0 at x = 0, and exact derivatives).
fn one_minus_exp_over<N: DualNum<Primitive = f64> + Copy>(x: N) -> N {
    if x.re().abs() < 1e-4 {
        // 1 − x/2 + x²/6 − x³/24: the next term, x⁴/120, is below 1e-18.
        N::from(1.0) - x * (N::from(0.5) - x * (N::from(1.0 / 6.0) - x / 24.0))
    } else {
        (-(-x).exp_m1()) / x
    }
}

impl<N: DualNum<Primitive = f64> + Copy> Lag<N> {
    fn new(delta: N, leak: N) -> Self {
        let x = leak * delta;
        Lag {
            decay: (-x).exp(),
            gain: delta * one_minus_exp_over(x),
            variance: delta * one_minus_exp_over(x * 2.0),
        }
    }

    /// The mean after the lag from y.
    fn mean(&self, from: N, drift: N) -> N {
        from * self.decay + drift * self.gain
    }
}

/// The first-passage densities of a [`Process`] at the grid times, with what is needed to
/// evaluate them anywhere up to the horizon.
#[derive(Clone, Debug)]
pub struct Solution<N> {
    process: Process<N>,
    /// Grid times t₀ < t₁ < … (t₀ the start of the grid).
    times: Vec<f64>,
    /// g₊ and g₋ at the grid times.
    upper: Vec<N>,
    lower: Vec<N>,
    /// The interior mass ∫q dz at the grid times (what has not been absorbed).
    undecided: Vec<N>,
}

/// Solves the Fokker–Planck equation of the module docs up to `horizon` seconds.
///
/// # Accuracy
/// Second order in the grid's step and spacing; see [`DEFAULT_STEP`].
///
/// # Errors
/// [`NumericalError::Grid`] when the horizon is not a positive finite number or more than
/// [`MAX_STEPS`] steps would be needed.
pub fn solve<N: Partials>(
    process: &Process<N>,
    horizon: f64,
    grid: Grid,
) -> Result<Solution<N>, NumericalError> {
    let h = grid.step;
    let m = grid.points;
    if !(horizon > 0.0 && horizon.is_finite()) || horizon / h > MAX_STEPS as f64 {
        return Err(NumericalError::Grid {
            horizon,
            step: h,
            points: m,
        });
    }
    let p = process;
    let zero = N::from(0.0);
    let y0 = p.origin();
    let half0 = p.boundary.re() * 0.5;
    // The grid's start and first steps depend on the distances to the bounds, rounded down to
    // a fixed ladder so that the grid stays the same while the parameters move a little: the
    // derivatives of the grid's numbers are then those of the objective (see [`DISTANCE_LADDER`]).
    let rung = |d: f64| DISTANCE_LADDER.powf((d.ln() / DISTANCE_LADDER.ln()).floor());
    let distance = rung(half0 - y0.re().abs());
    let distances = [rung(half0 - y0.re()), rung(half0 + y0.re())];
    let t0 = (distance / START_DEVIATIONS)
        .powi(2)
        .min(0.5 * h)
        .min(0.5 * horizon);
    let dz = 2.0 / (m + 1) as f64;
    let z = |i: usize| -1.0 + dz * (i + 1) as f64;
    // The free Gaussian at t₀ in z: q = S·p(Sz).
    let (s0, _) = p.half_width(N::from(t0));
    let lag = Lag::new(N::from(t0), p.leak);
    let mean = lag.mean(y0, p.drift);
    let initial: Vec<N> = (0..m)
        .map(|i| {
            let d = s0 * z(i) - mean;
            (-(d * d) / (lag.variance * 2.0)).exp() * s0 / (lag.variance * (2.0 * PI)).sqrt()
        })
        .collect();
    let mut solution = Solution {
        process: *p,
        times: vec![t0],
        upper: vec![zero],
        lower: vec![zero],
        undecided: vec![initial.iter().fold(zero, |acc, &x| acc + x) * dz],
    };
    let step = |t: f64| {
        let edge = distances
            .iter()
            .filter(|&&d| d * d / (2.0 * t) < EDGE_FROM)
            .map(|&d| EDGE_STEP * t * t / (d * d))
            .fold(f64::INFINITY, f64::min);
        h.min(STEP_GROWTH * t)
            .min(edge)
            .max(t0.min(h))
            .min(horizon - t)
    };
    let march = March {
        process: p,
        directions: carried(&p.numbers()),
        points: m,
        horizon,
        step: &step,
    };
    march.run(&initial, &mut solution);
    Ok(solution)
}

impl<N: DualNum<Primitive = f64> + Copy> Solution<N> {
    fn push(&mut self, t: f64, upper: N, lower: N, undecided: N) {
        self.times.push(t);
        self.upper.push(upper);
        self.lower.push(lower);
        self.undecided.push(undecided);
    }

    /// The last time solved.
    pub fn horizon(&self) -> f64 {
        *self.times.last().unwrap_or(&0.0)
    }

    /// The process solved.
    pub fn process(&self) -> &Process<N> {
        &self.process
    }

    fn nodes(&self, bound: Bound) -> &[N] {
        match bound {
            Bound::Upper => &self.upper,
            Bound::Lower => &self.lower,
        }
    }

    /// The small-time density before the grid starts: the free transition density at the bound
    /// times the speed of approach, |(S(t) − m)/σ² − (S′(t) − v + λS(t))|·f (twice the
    /// single-bound kernel of Buonocore, Nobile & Ricciardi 1987 at τ = 0).
    fn small_time(&self, t: N, bound: Bound) -> N {
        let p = &self.process;
        let (position, slope) = p.bound_at(t, bound);
        let lag = Lag::new(t, p.leak);
        let d = position - lag.mean(p.origin(), p.drift);
        let speed = d / lag.variance - (slope - p.drift + p.leak * position);
        let density = (-(d * d) / (lag.variance * 2.0)).exp() / (lag.variance * (2.0 * PI)).sqrt();
        let value = density * speed;
        if value.re() < 0.0 { -value } else { value }
    }

    /// ln g(t) of `bound` at decision time 0 < t ≤ horizon (see the module docs for how it is
    /// computed between grid times); exactly −∞ where the discretised density is not positive.
    ///
    /// # Accuracy
    /// See [`DEFAULT_STEP`].
    pub fn ln_density(&self, t: N, bound: Bound) -> Result<N, NumericalError> {
        let tv = t.re();
        let horizon = self.horizon();
        if tv > horizon * (1.0 + 1e-12) {
            return Err(NumericalError::BeyondHorizon { time: tv, horizon });
        }
        let minus_infinity = N::from(f64::NEG_INFINITY);
        if tv <= 0.0 {
            return Ok(minus_infinity);
        }
        let positive_ln = |g: N| if g.re() > 0.0 { g.ln() } else { minus_infinity };
        if tv <= self.times[0] {
            return Ok(positive_ln(self.small_time(t, bound)));
        }
        let g = self.nodes(bound);
        let n = self.times.len();
        // The step [t_k, t_{k+1}] holding t.
        let k = self.times.partition_point(|&x| x <= tv).clamp(1, n - 1) - 1;
        let (ta, tb) = (self.times[k], self.times[k + 1]);
        let width = tb - ta;
        let u = (t - ta) / width;
        let ends = [g[k], g[k + 1]];
        let (left, right) = (k.checked_sub(1), (k + 2 < n).then_some(k + 2));
        let logs_usable = ends.iter().all(|x| x.re() > 0.0)
            && left.is_none_or(|j| g[j].re() > 0.0)
            && right.is_none_or(|j| g[j].re() > 0.0);
        if !logs_usable {
            return Ok(positive_ln(ends[0] * (-u + 1.0) + ends[1] * u));
        }
        // Cubic Hermite in ln g with three-point slopes (one-sided at the ends of the grid).
        let (la, lb) = (ends[0].ln(), ends[1].ln());
        let secant = (lb - la) / width;
        let slope_at = |j: usize, other: Option<usize>, value: N| match other {
            Some(o) => {
                let (to, lo) = (self.times[o], g[o].ln());
                let outer = (value - lo) / (self.times[j] - to);
                let (h_outer, h_inner) = ((self.times[j] - to).abs(), width);
                (outer * h_inner + secant * h_outer) / (h_outer + h_inner)
            }
            None => secant,
        };
        let (ma, mb) = (slope_at(k, left, la), slope_at(k + 1, right, lb));
        let u2 = u * u;
        let u3 = u2 * u;
        let h00 = u3 * 2.0 - u2 * 3.0 + 1.0;
        let h10 = u3 - u2 * 2.0 + u;
        let h01 = -u3 * 2.0 + u2 * 3.0;
        let h11 = u3 - u2;
        Ok(la * h00 + ma * h10 * width + lb * h01 + mb * h11 * width)
    }

    /// The exponent of the change of drift from the solved v₀ to v at a passage through
    /// `bound` at t: (v − v₀)·(S(t) − y₀) − (v² − v₀²)·t/2 (Girsanov's theorem, module docs).
    fn tilt(&self, t: N, bound: Bound, drift: N) -> Result<N, NumericalError> {
        let p = &self.process;
        if p.leak.re() != 0.0 {
            return Err(NumericalError::TiltWithLeak(p.leak.re()));
        }
        Ok(self.drift_exponent(t, bound, drift) - self.drift_exponent(t, bound, p.drift))
    }

    /// τ(v) = v·(B(t) − y₀) − v²t/2 for a passage through `bound` at t: the part of ln g_v(t)
    /// that carries its dependence on the drift exactly without leak (Girsanov's theorem) and
    /// mostly with it (see `drift_nodes`).
    pub fn drift_exponent(&self, t: N, bound: Bound, drift: N) -> N {
        let p = &self.process;
        let (position, _) = p.bound_at(t, bound);
        drift * (position - p.origin()) - drift * drift * t * 0.5
    }

    /// ln g_v(t) of `bound` for the solved process with its drift replaced by v:
    /// ln g_{v₀}(t) + (v − v₀)·(S(t) − y₀) − (v² − v₀²)·t/2 (Girsanov's theorem; exact for a
    /// process without leak, so it adds no error to the solve's).
    ///
    /// # Errors
    /// [`NumericalError::TiltWithLeak`] when the process has a leak; [`NumericalError::BeyondHorizon`].
    pub fn ln_density_at_drift(&self, t: N, bound: Bound, drift: N) -> Result<N, NumericalError> {
        let tilt = self.tilt(t, bound, drift)?;
        Ok(self.ln_density(t, bound)? + tilt)
    }

    /// P(no bound reached by decision time t ≤ horizon) at the solved drift: the interior mass of
    /// the grid, linear between grid times. Not clamped: it can fall below 0 by the solve's error.
    pub fn undecided(&self, t: f64) -> Result<N, NumericalError> {
        let horizon = self.horizon();
        if t > horizon * (1.0 + 1e-12) {
            return Err(NumericalError::BeyondHorizon { time: t, horizon });
        }
        if t <= self.times[0] {
            return Ok(N::from(1.0));
        }
        let n = self.times.len();
        let k = self.times.partition_point(|&x| x <= t).clamp(1, n - 1) - 1;
        let u = (t - self.times[k]) / (self.times[k + 1] - self.times[k]);
        Ok(self.undecided[k] * (1.0 - u) + self.undecided[k + 1] * u)
    }

    /// The density of `bound` at grid time k, at drift v (`None`: the solved drift).
    fn node_at(&self, k: usize, bound: Bound, drift: Option<N>) -> Result<N, NumericalError> {
        let g = self.nodes(bound)[k];
        Ok(match drift {
            Some(v) => g * self.tilt(N::from(self.times[k]), bound, v)?.exp(),
            None => g,
        })
    }

    /// P(`bound` reached by decision time t ≤ horizon) at drift v (`None`: the solved drift;
    /// another drift needs a process without leak), by the trapezoid rule over the grid times,
    /// the last piece up to t with the interpolated density at t (so the result is smooth in t,
    /// with derivative close to g(t)).
    ///
    /// # Accuracy
    /// The solve's, plus the trapezoid rule's O(h²).
    pub fn absorbed_by(&self, t: N, bound: Bound, drift: Option<N>) -> Result<N, NumericalError> {
        let tv = t.re();
        let mut mass = N::from(0.0);
        let mut k = 0;
        while k + 1 < self.times.len() && self.times[k + 1] <= tv {
            mass += (self.node_at(k, bound, drift)? + self.node_at(k + 1, bound, drift)?)
                * (0.5 * (self.times[k + 1] - self.times[k]));
            k += 1;
        }
        if k + 1 < self.times.len() && tv > self.times[k] {
            let ln_at_t = match drift {
                Some(v) => self.ln_density_at_drift(t, bound, v)?,
                None => self.ln_density(t, bound)?,
            };
            mass += (self.node_at(k, bound, drift)? + ln_at_t.exp()) * (t - self.times[k]) * 0.5;
        }
        Ok(mass)
    }

    /// ln P(no bound reached by decision time t ≤ horizon) at drift v (`None`: the solved
    /// drift), as ln(1 − P₊(t) − P₋(t)) from [`Solution::absorbed_by`]; exactly −∞ where that is
    /// not positive (every process has ended, up to the solve's error).
    pub fn ln_undecided(&self, t: N, drift: Option<N>) -> Result<N, NumericalError> {
        let left = N::from(1.0)
            - self.absorbed_by(t, Bound::Upper, drift)?
            - self.absorbed_by(t, Bound::Lower, drift)?;
        Ok(if left.re() > 0.0 {
            left.ln()
        } else {
            N::from(f64::NEG_INFINITY)
        })
    }

    /// The mean decision time of the processes absorbed by the horizon, ∫t·(g₊ + g₋)dt / ∫(g₊ + g₋)dt
    /// by the trapezoid rule, at drift v (`None`: the solved drift); `None` when nothing is
    /// absorbed. On a horizon that holds the whole distribution (see [`solve_settled`]) it is the
    /// mean decision time.
    pub fn mean_decision_time(&self, drift: Option<N>) -> Result<Option<N>, NumericalError> {
        let mut mass = N::from(0.0);
        let mut moment = N::from(0.0);
        for k in 1..self.times.len() {
            let width = 0.5 * (self.times[k] - self.times[k - 1]);
            for bound in [Bound::Upper, Bound::Lower] {
                let (a, b) = (
                    self.node_at(k - 1, bound, drift)?,
                    self.node_at(k, bound, drift)?,
                );
                mass += (a + b) * width;
                moment += (a * self.times[k - 1] + b * self.times[k]) * width;
            }
        }
        Ok((mass.re() > 0.0).then(|| moment / mass))
    }
}

impl Solution<f64> {
    /// A draw of (bound, decision time) at drift v (`None`: the solved drift), conditioned on a
    /// passage by the horizon, by inverting the distribution function on the grid: a uniform u
    /// times the mass absorbed by the horizon picks the step where the cumulative mass of both
    /// bounds (trapezoid rule) passes it, the bound in proportion to each bound's mass in that
    /// step, and the time linearly within it. `None` when nothing is absorbed by the horizon.
    /// On a horizon that holds the whole distribution ([`solve_settled`]) the conditioning
    /// changes nothing beyond its tolerance.
    ///
    /// # Accuracy
    /// Exact up to the solve's error and the linear interpolation within a step (a time error
    /// below h).
    pub fn sample(
        &self,
        drift: Option<f64>,
        rng: &mut dyn Rng,
    ) -> Result<Option<(Bound, f64)>, NumericalError> {
        let mut steps = Vec::with_capacity(self.times.len());
        let mut total = 0.0;
        for k in 1..self.times.len() {
            let width = 0.5 * (self.times[k] - self.times[k - 1]);
            let mass = |bound| -> Result<f64, NumericalError> {
                let sum = self.node_at(k - 1, bound, drift)? + self.node_at(k, bound, drift)?;
                Ok((width * sum).max(0.0))
            };
            let (up, down) = (mass(Bound::Upper)?, mass(Bound::Lower)?);
            steps.push((up, down));
            total += up + down;
        }
        if total <= 0.0 {
            return Ok(None);
        }
        let target = rng.random::<f64>() * total;
        let mut cumulative = 0.0;
        for (k, &(up, down)) in steps.iter().enumerate() {
            let step_mass = up + down;
            if step_mass > 0.0 && cumulative + step_mass >= target {
                let within = ((target - cumulative) / step_mass).clamp(0.0, 1.0);
                let bound = if within * step_mass < up {
                    Bound::Upper
                } else {
                    Bound::Lower
                };
                let (ta, tb) = (self.times[k], self.times[k + 1]);
                return Ok(Some((bound, ta + within * (tb - ta))));
            }
            cumulative += step_mass;
        }
        // Rounding left the target above the last step's sum: the last step with mass.
        let last = steps.iter().rposition(|&(u, d)| u + d > 0.0).unwrap_or(0);
        let bound = if steps[last].0 > 0.0 {
            Bound::Upper
        } else {
            Bound::Lower
        };
        Ok(Some((bound, self.times[last + 1])))
    }
}

/// Solves from `horizon` on, doubling it until the mass not absorbed at the solved drift is
/// below `tolerance` or the horizon reaches `max_horizon` (for probabilities and draws, which
/// need the whole distribution).
///
/// # Errors
/// As [`solve`].
pub fn solve_settled<N: Partials>(
    process: &Process<N>,
    mut horizon: f64,
    max_horizon: f64,
    grid: Grid,
    tolerance: f64,
) -> Result<Solution<N>, NumericalError> {
    loop {
        let solution = solve(process, horizon, grid)?;
        let left = solution.undecided(solution.horizon())?.re();
        if left < tolerance || horizon >= max_horizon {
            return Ok(solution);
        }
        horizon = (2.0 * horizon).min(max_horizon);
    }
}
