//! Races of independent accumulators, one per offered option: the first to arrive gives the
//! choice and, with the non-decision time, the response time. Stands beside the two-bound
//! engine of [`crate::first_passage`]; two kinds of accumulator:
//!
//! * [`WaldAccumulator`]: a single-bound Wiener process (Logan, Van Zandt, Verbruggen &
//!   Wagenmakers 2014; Tillman, Van Zandt & Logan 2020);
//! * [`BallisticAccumulator`]: the linear ballistic accumulator (Brown & Heathcote 2008).
//!
//! For accumulators k = 1…N with drifts v_k, densities f_k and survivals S_k, the winner k at
//! decision time t has density g_k(t) = f_k(t)·Π_{j≠k} S_j(t) (the race equation of Logan et
//! al. 2014, eq. 1; Brown & Heathcote 2008, eq. 3); nobody has arrived by t with probability
//! S(t) = Π_j S_j(t); P(k) = ∫_0^∞ g_k(t) dt by quadrature ([`ln_choice_probability`]); and no
//! accumulator ever arrives with probability Π_j P(never_j), zero for a Wiener race with a
//! non-negative drift but positive for the ballistic accumulator (a negative rate draw).
//!
//! Every function is generic over [`Real`], so the same code gives values (`f64`) and exact
//! gradients (dual numbers) for the likelihood.
//!
//! # Speed
//! Both accumulators evaluate their closed forms in linear space from scaled normal tails
//! (Cody 1969's rational approximations, `tails.rs`), the Gaussian factor e^{−z²/2} taken out
//! so that nothing underflows; for values, [`ln_winner_density`] multiplies the accumulators'
//! split factors and takes one logarithm. The gradients of the survivals and of the ballistic
//! density come from the chain rule in `f64`, lifted onto the dual numbers once per quantity
//! (the Wiener density, a short closed form, stays in dual arithmetic). Measured by `cargo run --release --example
//! race_speed` (three options, on a shared 2-core machine, five runs): the Wiener race's
//! winner density 30.8–32.3 ns and the ballistic race's 61.4–64.4 ns against 20.8–22.5 ns for
//! the two-bound diffusion's density, ratios 1.44–1.49 (target ≤ 3 met) and 2.86–3.05 (at the
//! target, not reliably below it); before this engine 135–142 ns and 636–670 ns.

mod ballistic;
mod real;
mod tails;
mod wald;

pub use ballistic::BallisticAccumulator;
pub use real::Real;
pub use wald::{WaldAccumulator, ln_wald_cdf};

use rand::Rng;
use real::{lift, ln_sum_exp};

/// One racing accumulator: its first-passage law at a drift (mean rate) v.
pub trait Accumulator<T: Real>: Copy + Send + Sync {
    /// ln f(t), the (defective) density of the arrival time; −∞ for t ≤ 0.
    fn ln_density(&self, t: T, drift: T) -> T;
    /// ln S(t) = ln P(not arrived by t), counting never arriving; 0 for t ≤ 0.
    fn ln_survival(&self, t: T, drift: T) -> T;
    /// ln P(arrives at all).
    fn ln_arrival_probability(&self, drift: T) -> T;
    /// ln P(never arrives) = ln(1 − P(arrives)), computed without cancellation.
    fn ln_never(&self, drift: T) -> T;
    /// An exact draw of the arrival time at drift `drift` (infinity when it never arrives).
    fn sample(&self, drift: f64, rng: &mut dyn Rng) -> f64;
    /// c such that the density's leading edge falls like e^{−c/t} or faster (for quadrature).
    fn leading_edge(&self) -> f64;
    /// The density at values at decision time `at` > 0, split for a race's product: (e, m) with
    /// ln f(t) = e + ln m and m > 0, so that [`ln_winner_density`] can multiply the m of all
    /// accumulators and take one logarithm; None where the accumulator has no such form (then
    /// logarithms are added).
    fn split_ln_density(&self, _at: &Moment, _drift: f64) -> Option<(f64, f64)> {
        None
    }
    /// The survival at values, split as [`Accumulator::split_ln_density`]: ln S(t) = e + ln m.
    fn split_ln_survival(&self, _at: &Moment, _drift: f64) -> Option<(f64, f64)> {
        None
    }
}

/// A decision time t > 0 with its reciprocal, computed once for all accumulators of a race.
#[derive(Clone, Copy, Debug)]
pub struct Moment {
    /// t.
    pub t: f64,
    /// 1/t.
    pub inverse: f64,
}

impl Moment {
    /// t and 1/t.
    #[inline]
    pub fn new(t: f64) -> Self {
        Self {
            t,
            inverse: 1.0 / t,
        }
    }
}

/// ln g_k(t) = ln f_k(t) + Σ_{j≠k} ln S_j(t): the density that accumulator `k` arrives first at
/// decision time t (Logan et al. 2014, eq. 1). For values, from the accumulators' split forms
/// (ln g_k = Σ e + ln Π m, one logarithm) where every accumulator has one and the product lies
/// within [1e-250, 1e250]; the product's rounding (a few units in the last place of g_k) is an
/// absolute error of the same order in ln g_k.
pub fn ln_winner_density<T: Real, A: Accumulator<T>>(
    accumulator: &A,
    drifts: &[T],
    k: usize,
    t: T,
) -> T {
    if !T::CARRIES_DERIVATIVES
        && let Some(ln_g) = split_winner_density(accumulator, drifts, k, t.value())
    {
        return T::from(ln_g);
    }
    let mut total = accumulator.ln_density(t, drifts[k]);
    for (j, &v) in drifts.iter().enumerate() {
        if j != k && total.value() > f64::NEG_INFINITY {
            total += accumulator.ln_survival(t, v);
        }
    }
    total
}

/// ln g_k(t) = Σ e + ln Π m from the accumulators' split forms; None where one has none or the
/// product leaves [1e-250, 1e250].
fn split_winner_density<T: Real, A: Accumulator<T>>(
    accumulator: &A,
    drifts: &[T],
    k: usize,
    t: f64,
) -> Option<f64> {
    if t <= 0.0 {
        return None;
    }
    let at = Moment::new(t);
    let (mut exponent, mut product) = accumulator.split_ln_density(&at, drifts[k].value())?;
    for (j, v) in drifts.iter().enumerate() {
        if j != k {
            let (e, m) = accumulator.split_ln_survival(&at, v.value())?;
            exponent += e;
            product *= m;
        }
    }
    (1e-250..=1e250)
        .contains(&product)
        .then(|| exponent + product.ln())
}

/// ln S(t) = Σ_j ln S_j(t): no accumulator has arrived by decision time t.
pub fn ln_none_by<T: Real, A: Accumulator<T>>(accumulator: &A, drifts: &[T], t: T) -> T {
    drifts
        .iter()
        .fold(T::from(0.0), |acc, &v| acc + accumulator.ln_survival(t, v))
}

/// ln P(no accumulator ever arrives) = Σ_j ln P(never_j).
pub fn ln_never<T: Real, A: Accumulator<T>>(accumulator: &A, drifts: &[T]) -> T {
    drifts
        .iter()
        .fold(T::from(0.0), |acc, &v| acc + accumulator.ln_never(v))
}

/// ln P(some accumulator arrives) = ln(1 − Π_j P(never_j)). When every accumulator is
/// unlikely to arrive (each ln P(arrives_j) < −30, that is ln P(never_j) > ln(1 − e^−30)) the
/// product's complement is formed as ln Σ_j P(arrives_j), whose relative error is below N·e^−30
/// (the pairwise terms of inclusion–exclusion); otherwise as ln(1 − e^{Σ ln P(never_j)})
/// (Mächler 2012).
pub fn ln_some_arrival<T: Real, A: Accumulator<T>>(accumulator: &A, drifts: &[T]) -> T {
    /// ln(1 − e^−30) (mpmath).
    const NEARLY_NEVER: f64 = -9.357_622_968_840_612e-14;
    let (never, unlikely) = drifts
        .iter()
        .fold((T::from(0.0), true), |(sum, unlikely), &v| {
            let never = accumulator.ln_never(v);
            (sum + never, unlikely && never.value() > NEARLY_NEVER)
        });
    if unlikely {
        let arrivals: Vec<T> = drifts
            .iter()
            .map(|&v| accumulator.ln_arrival_probability(v))
            .collect();
        ln_sum_exp(&arrivals)
    } else {
        real::ln_1m_exp(never)
    }
}

/// ln P(some accumulator arrives after decision time `from`) = ln(S(from) − P(never)): by that
/// difference when P(never) is below 0.9·S(from), else (where the difference would cancel) by
/// summing the winners' probabilities after `from` ([`ln_choice_probability`]).
pub fn ln_arrival_after<T: Real, A: Accumulator<T>>(accumulator: &A, drifts: &[T], from: T) -> T {
    let open = ln_none_by(accumulator, drifts, from);
    let never = ln_never(accumulator, drifts);
    if never.value() - open.value() < (0.9f64).ln() {
        real::ln_sub_exp(open, never)
    } else {
        let each: Vec<T> = (0..drifts.len())
            .map(|k| ln_choice_probability(accumulator, drifts, k, from))
            .collect();
        ln_sum_exp(&each)
    }
}

/// Width in ln t of each Gauss–Legendre panel of the time quadrature.
const PANEL: f64 = 0.25;

/// Nats below the integrand's peak at which its ends are cut (e^−50 ≈ 2e-22).
const CUT_NATS: f64 = 50.0;

/// Quadrature nodes t_i with log-weights for ∫_from^∞ g(t) dt, laid as 10-point Gauss–Legendre
/// panels of width 0.25 in y = ln t (dt = t·dy). The range runs from the peak of g(t)·t down to
/// where it has fallen 50 nats below it on the left (or to `from`), and on the right until it
/// has fallen 50 nats and the mass any accumulator can still bring beyond (`tail`, ln of an
/// upper bound) is below e^−35 of the peak, or t reaches 1e12 times the scale. With panels this
/// narrow the log-integrand changes by at most about 12 nats per panel where it matters (5 nats
/// within 10 of the peak), where the 10-point rule's relative error is below 1e-14
/// (Abramowitz & Stegun 1964, 25.4.30).
fn time_nodes(
    from: f64,
    scale: f64,
    ln_g: &dyn Fn(f64) -> f64,
    tail: &dyn Fn(f64) -> f64,
) -> Vec<(f64, f64)> {
    let h = |y: f64| ln_g(y.exp()) + y;
    let y_from = if from > 0.0 {
        from.ln()
    } else {
        f64::NEG_INFINITY
    };
    let y_scale = scale.max(1e-12).ln();
    // The peak on a coarse grid around the scale.
    let (mut y_peak, mut peak) = (y_scale, f64::NEG_INFINITY);
    let mut y = (y_scale - 12.0).max(y_from);
    while y <= y_scale + 30.0 {
        let value = h(y);
        if value > peak {
            (y_peak, peak) = (y, value);
        }
        y += 0.5;
    }
    if peak == f64::NEG_INFINITY {
        return Vec::new();
    }
    let mut lo = y_peak;
    while lo > y_from && lo > y_scale - 40.0 && h(lo) > peak - CUT_NATS {
        lo -= PANEL;
    }
    let lo = lo.max(y_from);
    let mut hi = y_peak + PANEL;
    while hi < y_scale + 28.0 && (h(hi) > peak - CUT_NATS || tail(hi.exp()) > peak - 35.0) {
        hi += PANEL;
    }
    let rule = crate::first_passage::gauss_legendre_rule();
    let mut nodes = Vec::with_capacity(((hi - lo) / PANEL).ceil() as usize * rule.len());
    let mut start = lo;
    while start < hi {
        let width = PANEL.min(hi - start);
        let mid = start + 0.5 * width;
        for &(x, w) in rule {
            let y = mid + 0.5 * width * x;
            nodes.push((y.exp(), (0.5 * width * w).ln() + y));
        }
        start += width;
    }
    nodes
}

/// A time scale of the race: where the fastest accumulator's leading edge has risen.
fn time_scale<T: Real, A: Accumulator<T>>(accumulator: &A, drifts: &[T]) -> f64 {
    let c = accumulator.leading_edge();
    let fastest = drifts
        .iter()
        .map(|v| v.value())
        .fold(f64::NEG_INFINITY, f64::max)
        .max(0.0);
    // The mode of a Wald density with level √(2c) and drift v lies near c/(0.75 + …); a rough
    // point inside the mass is enough for the grid search.
    (2.0 * c / (1.5 + (2.25 + 2.0 * fastest * fastest * c).sqrt())).max(1e-6)
}

/// ln P(accumulator `k` arrives first, after decision time `from`) = ln ∫_from^∞ g_k(t) dt,
/// by Gauss–Legendre quadrature in ln t (`time_nodes`), with its gradient (including that of
/// the lower limit, ∂/∂from = −g_k(from)/P). Relative accuracy about 1e-12 (checked against
/// mpmath quadrature in tests/suite/race_reference.rs).
pub fn ln_choice_probability<T: Real, A: Accumulator<T>>(
    accumulator: &A,
    drifts: &[T],
    k: usize,
    from: T,
) -> T {
    let plain = plain_drifts(drifts);
    let value_accumulator = ValueOf(accumulator, std::marker::PhantomData::<T>);
    let ln_g = |t: f64| ln_winner_density(&value_accumulator, &plain, k, t);
    let tail = |t: f64| {
        let own = ln_arrival_tail(&value_accumulator, plain[k], t);
        own + plain
            .iter()
            .enumerate()
            .filter(|&(j, _)| j != k)
            .map(|(_, &v)| value_accumulator.ln_survival(t, v))
            .sum::<f64>()
    };
    let scale = time_scale(accumulator, drifts);
    let nodes = time_nodes(from.value(), scale, &ln_g, &tail);
    let terms: Vec<T> = nodes
        .iter()
        .map(|&(t, ln_w)| ln_winner_density(accumulator, drifts, k, T::from(t)) + ln_w)
        .collect();
    let ln_p = ln_sum_exp(&terms);
    if from.value() > 0.0 && ln_p.value().is_finite() {
        let edge = (ln_g(from.value()) - ln_p.value()).exp();
        lift(0.0, &[(-edge, from)]) + ln_p
    } else {
        ln_p
    }
}

/// ln of an upper bound on the mass accumulator `k` brings after t: P(arrives) − F(t) =
/// S(t) − P(never).
fn ln_arrival_tail<A: Accumulator<f64>>(accumulator: &A, drift: f64, t: f64) -> f64 {
    let ln_s = accumulator.ln_survival(t, drift);
    let ln_never = accumulator.ln_never(drift);
    if ln_never >= ln_s {
        f64::NEG_INFINITY
    } else {
        real::ln_sub_exp(ln_s, ln_never)
    }
}

/// Mean decision time of the responses, E[T | some accumulator arrives] =
/// ∫ t·Σ_k g_k(t) dt / (1 − P(never)), by the quadrature of [`ln_choice_probability`]; None
/// when it is not finite (a Wiener race whose drifts are all zero has no finite mean).
pub fn mean_decision_time<A: Accumulator<f64>>(accumulator: &A, drifts: &[f64]) -> Option<f64> {
    let ln_g = |t: f64| {
        let terms: Vec<f64> = (0..drifts.len())
            .map(|k| ln_winner_density(accumulator, drifts, k, t))
            .collect();
        ln_sum_exp(&terms)
    };
    let tail = |t: f64| {
        let ln_s = ln_none_by(accumulator, drifts, t);
        let ln_n = ln_never(accumulator, drifts);
        if ln_n >= ln_s {
            f64::NEG_INFINITY
        } else {
            // The time-weighted tail: generous by the factor t.
            real::ln_sub_exp(ln_s, ln_n) + t.ln()
        }
    };
    let scale = time_scale(accumulator, drifts);
    let nodes = time_nodes(0.0, scale, &|t| ln_g(t) + t.ln(), &tail);
    let terms: Vec<f64> = nodes.iter().map(|&(t, w)| ln_g(t) + t.ln() + w).collect();
    let ln_mean = ln_sum_exp(&terms) - real::ln_1m_exp(ln_never(accumulator, drifts));
    let mean = ln_mean.exp();
    mean.is_finite().then_some(mean)
}

/// One draw of the race: the winner and its decision time, or None when no accumulator ever
/// arrives. Exact when the accumulators' samplers are.
pub fn sample_race<A: Accumulator<f64>>(
    accumulator: &A,
    drifts: &[f64],
    rng: &mut dyn Rng,
) -> Option<(usize, f64)> {
    let mut best: Option<(usize, f64)> = None;
    for (k, &v) in drifts.iter().enumerate() {
        let t = accumulator.sample(v, rng);
        if t.is_finite() && best.is_none_or(|(_, b)| t < b) {
            best = Some((k, t));
        }
    }
    best
}

/// The values of a list of dual drifts.
fn plain_drifts<T: Real>(drifts: &[T]) -> Vec<f64> {
    drifts.iter().map(|d| d.value()).collect()
}

/// An accumulator over dual numbers seen through its values (for choosing quadrature nodes).
struct ValueOf<'a, T, A>(&'a A, std::marker::PhantomData<T>);

impl<T, A> Clone for ValueOf<'_, T, A> {
    fn clone(&self) -> Self {
        *self
    }
}

impl<T, A> Copy for ValueOf<'_, T, A> {}

impl<T: Real, A: Accumulator<T>> Accumulator<f64> for ValueOf<'_, T, A> {
    fn ln_density(&self, t: f64, drift: f64) -> f64 {
        self.0.ln_density(T::from(t), T::from(drift)).value()
    }
    fn ln_survival(&self, t: f64, drift: f64) -> f64 {
        self.0.ln_survival(T::from(t), T::from(drift)).value()
    }
    fn ln_arrival_probability(&self, drift: f64) -> f64 {
        self.0.ln_arrival_probability(T::from(drift)).value()
    }
    fn ln_never(&self, drift: f64) -> f64 {
        self.0.ln_never(T::from(drift)).value()
    }
    fn sample(&self, drift: f64, rng: &mut dyn Rng) -> f64 {
        self.0.sample(drift, rng)
    }
    fn leading_edge(&self) -> f64 {
        self.0.leading_edge()
    }
    fn split_ln_density(&self, at: &Moment, drift: f64) -> Option<(f64, f64)> {
        self.0.split_ln_density(at, drift)
    }
    fn split_ln_survival(&self, at: &Moment, drift: f64) -> Option<(f64, f64)> {
        self.0.split_ln_survival(at, drift)
    }
}
