//! Defective distribution function, survival and bound probabilities.

use super::density::{
    A, DensityGradient, Partials, ST, T, V, W, density_over_start_with_gradient, ln_sum_with_mean,
    oriented, over_start_with_gradient,
};
use super::density::{
    ln_density_over_start, lower_bound_core, over_start, start_panels, time_shape,
};
use super::params::{Bound, DiffusionParams, positive};
use super::quadrature::{ln_integrate_time, ln_mean_over_pair, time_nodes};
use super::series::{StdCdf, ln_add_exp, ln_prob_lower, std_cdf};

/// Defective distribution function F_b(rt) = P(the process ends at `bound` with response time
/// ≤ rt).
///
/// Without across-trial variability, in standardised units (λ = v·a, u = (rt − ndt)/a²):
/// the small-time sum of Wald distribution functions for u < 0.5 and the large-time series of the
/// survival for u ≥ 0.5 (Blurton, Kesselmeier & Gondan 2012, eqs. 5 and 8; see
/// the series module). With drift variability η > 0 the closed-form density of
/// [`ln_density`](super::ln_density) is integrated over time; start and non-decision time ranges
/// are averaged by composite Gauss–Legendre quadrature.
///
/// # Accuracy
/// Within 1e-8 absolute of mpmath references over the domain stated for
/// [`ln_density`](super::ln_density) (tests/suite/first_passage_reference.rs); about 1e-14 relative
/// without variability.
pub fn cdf(rt: f64, bound: Bound, params: &DiffusionParams) -> f64 {
    ln_cdf(rt, bound, params).exp()
}

/// ln F_b(rt); see [`cdf`]. −∞ exactly when F_b(rt) = 0.
pub fn ln_cdf(rt: f64, bound: Bound, params: &DiffusionParams) -> f64 {
    cdf_parts(rt, bound, params).ln_cdf
}

/// P(the process ends at `bound` later than rt) = P_b − F_b(rt), accurate in relative terms for
/// large rt (large-time series, Blurton et al. 2012, eq. 5).
pub fn survival(rt: f64, bound: Bound, params: &DiffusionParams) -> f64 {
    ln_survival(rt, bound, params).exp()
}

/// ln of [`survival`].
pub fn ln_survival(rt: f64, bound: Bound, params: &DiffusionParams) -> f64 {
    cdf_parts(rt, bound, params).ln_survival
}

/// ln P(no bound reached by `deadline`): the probability that a trial with a response deadline
/// ends without a response, S_upper(deadline) + S_lower(deadline).
pub fn ln_prob_no_response(deadline: f64, params: &DiffusionParams) -> f64 {
    ln_add_exp(
        ln_survival(deadline, Bound::Upper, params),
        ln_survival(deadline, Bound::Lower, params),
    )
}

/// [`ln_survival`] with its partial derivatives with respect to drift, boundary, start, ndt,
/// drift_sd, start_range and ndt_range.
///
/// Without a non-decision range, S_b(rt) = ∫_{rt−ndt}^∞ f_b(s) ds: differentiation under the
/// integral gives ∂S/∂x = ∫ f·∂ln f/∂x ds for x = drift, boundary, start, drift_sd, computed with
/// the analytic density gradient on the engine's time-quadrature nodes, and ∂S/∂ndt =
/// f_b(rt − ndt) (Leibniz's rule); with a start range this is averaged over the start nodes as in
/// [`ln_density_with_gradient`](super::ln_density_with_gradient) (∂/∂start_range from the nodes'
/// offsets). At or before ndt the survival is the bound probability, with the gradient of
/// [`ln_bound_probability_with_gradient`].
///
/// With a non-decision range s_t the survival is the window average
/// S(rt) = (1/s_t)∫_{lo}^{hi} S̄(s) ds over decision times s ∈ [lo, hi] = rt − ndt ∓ s_t/2
/// (S̄ the survival at a fixed non-decision time, equal to P_b for s ≤ 0; Ratcliff & Tuerlinckx
/// 2002). Integrating by parts, S(rt) = ∫_{lo⁺}^{hi} k(s)·f̄(s) ds + S̄(hi) with k(s) = (s − lo)/s_t,
/// a sum of positive terms (lo⁺ = max(lo, 0)). Leibniz's rule gives
/// ∂S/∂ndt = (S̄(lo) − S̄(hi))/s_t = (1/s_t)∫_{lo⁺}^{hi} f̄ ds and
/// ∂S/∂s_t = −S/s_t + (S̄(hi) + S̄(lo))/(2s_t) = (1/s_t)∫_{lo⁺}^{hi} (½ − k(s))·f̄(s) ds.
/// Used for trials that end without a response at a deadline and for the response lock.
///
/// # Accuracy
/// The value agrees with [`ln_survival`] within 1e-9 (its time quadrature against the series
/// and the integration by parts of [`ln_survival`]). The partial derivatives agree with central
/// differences of [`ln_survival`] to 1e-6 relative without ranges
/// (tests/suite/first_passage_properties.rs); with ranges the largest relative error measured
/// against Richardson-extrapolated central differences was 3.4e-8 (ndt_range in the slow tail
/// of a 0.02-s window, where the numeric side limits it), 8.3e-9 or less for the others
/// (tests/suite/full_diffusion.rs; required 1e-7).
pub fn ln_survival_with_gradient(
    rt: f64,
    bound: Bound,
    params: &DiffusionParams,
) -> (f64, DensityGradient) {
    let p = params.mirrored_for(bound);
    let (ln_s, g) = if p.ndt_range > 0.0 {
        survival_window_with_gradient(rt, &p)
    } else {
        survival_over_start_with_gradient(rt - p.ndt, &p)
    };
    (ln_s, oriented(bound, g))
}

/// ln S_lower of the mirrored process at decision time t0 with fixed start (no start range),
/// and its partial derivatives (v, a, w, ndt, η): the time integral of the density from t0 on.
fn survival_fixed_start_with_gradient(t0: f64, p: &DiffusionParams) -> (f64, [f64; 5]) {
    let t0 = t0.max(0.0);
    let terms: Vec<(f64, [f64; 5])> = time_nodes(t0, f64::INFINITY, time_shape(p))
        .into_iter()
        .map(|(s, ln_weight)| {
            let (ln_f, g) = lower_bound_core::<true>(s, p);
            (ln_weight + ln_f, g)
        })
        .collect();
    let (ln_s, mut g) = ln_sum_with_mean(&terms);
    g[T] = if t0 > 0.0 && ln_s > f64::NEG_INFINITY {
        (lower_bound_core::<false>(t0, p).0 - ln_s).exp()
    } else {
        0.0
    };
    (ln_s, g)
}

/// ln S_lower of the mirrored process at decision time t0 (no non-decision range), averaged
/// over the start range, with its gradient ([`T`] holds ∂/∂ndt).
fn survival_over_start_with_gradient(t0: f64, p: &DiffusionParams) -> (f64, Partials) {
    if !positive(t0) {
        return bound_probability_over_start_with_gradient(p);
    }
    over_start_with_gradient(t0, p, |q| survival_fixed_start_with_gradient(t0, q))
}

/// ln S_lower of the mirrored process with a non-decision range (above zero), with its gradient;
/// the equations are those of [`ln_survival_with_gradient`].
fn survival_window_with_gradient(rt: f64, p: &DiffusionParams) -> (f64, Partials) {
    let st = p.ndt_range;
    let half = 0.5 * st;
    let (lo, hi) = (rt - p.ndt - half, rt - p.ndt + half);
    if !positive(hi) {
        // Every decision time of the window is at or below zero: S = P_b.
        return bound_probability_over_start_with_gradient(p);
    }
    // S̄(hi): its own dependence on ndt and s_t is in the window terms' Leibniz derivatives.
    let (ln_tail, mut g_tail) = survival_over_start_with_gradient(hi, p);
    g_tail[T] = 0.0;
    let mut terms = vec![(ln_tail, g_tail)];
    for (s, ln_weight) in time_nodes(lo.max(0.0), hi, time_shape(p)) {
        let k = (s - lo) / st;
        let (ln_f, mut g) = density_over_start_with_gradient(s, p);
        // e^{term}·g = weight·k·f̄·g: the ndt and s_t derivatives are weight·f̄/s_t and
        // weight·(½ − k)·f̄/s_t.
        g[T] = 1.0 / (st * k);
        g[ST] = (0.5 - k) / (st * k);
        terms.push((ln_weight + k.ln() + ln_f, g));
    }
    ln_sum_with_mean(&terms)
}

/// Probability that the process ends at `bound`.
///
/// P_upper = (1 − e^(−2vaw)) / (1 − e^(−2va)), P_upper = w for v = 0 (Cox & Miller 1965, §5.7;
/// Navarro & Fuss 2009, eq. 3), averaged over the start range by Gauss–Legendre quadrature and,
/// with drift variability, obtained as the integral of the density over all times.
pub fn bound_probability(bound: Bound, params: &DiffusionParams) -> f64 {
    ln_bound_probability(bound, params).exp()
}

/// ln of [`bound_probability`].
pub fn ln_bound_probability(bound: Bound, params: &DiffusionParams) -> f64 {
    let p = params.mirrored_for(bound);
    ln_prob_lower_over_start(&p)
}

/// [`ln_bound_probability`] with its partial derivatives: the log-probability of a choice whose
/// response time is not used (for example a trimmed time).
///
/// Without drift variability, in the frame of the bound (upper: λ = v·a, ω = w; lower: the
/// mirrored process λ = −v·a, ω = 1 − w, Navarro & Fuss 2009, eq. 2), the absorption
/// probability is P = (1 − e^(−2λω)) / (1 − e^(−2λ)) (Feller 1968, XIV.2; Cox & Miller 1965,
/// §5.7). Writing x = −2λ, P = expm1(xω) / expm1(x); with k(y) = 1/(1 − e^(−y)) − 1/y, a smooth
/// function with k(0) = ½, differentiation gives
///
/// ∂ ln P/∂λ = −2·[ω·k(−2λω) − k(−2λ)],   ∂ ln P/∂ω = 1/ω − 2λ·k(−2λω),
///
/// and ∂/∂v = ±a·∂/∂λ, ∂/∂a = ±v·∂/∂λ, ∂/∂w = ±∂/∂ω (+ for the upper bound), ∂/∂ndt = 0. The
/// 1/y poles of the two k terms cancel exactly, so the derivative is evaluated without loss
/// near λ = 0; k is summed from its Bernoulli-number series for |y| < 0.1 (Abramowitz & Stegun
/// 1964, 23.1.1). With drift variability the probability is the survival at zero decision time,
/// whose derivatives come from the time integral of [`ln_survival_with_gradient`]. With a start
/// range the probability is averaged over the start nodes of [`ln_bound_probability`], the
/// derivatives as in [`ln_density_with_gradient`](super::ln_density_with_gradient); it does not
/// depend on ndt or ndt_range (those derivatives are zero).
///
/// # Accuracy
/// The value agrees with [`ln_bound_probability`] within 1e-9 and, through it, with the mpmath
/// table tests/reference/first_passage_moments.csv (tests/suite/first_passage_reference.rs). The derivatives agree with central differences of
/// [`ln_bound_probability`] to 1e-6 relative without ranges
/// (tests/suite/first_passage_properties.rs); with start ranges the largest relative error
/// measured against Richardson-extrapolated central differences was 7.2e-11
/// (tests/suite/full_diffusion.rs; required 1e-7).
pub fn ln_bound_probability_with_gradient(
    bound: Bound,
    params: &DiffusionParams,
) -> (f64, DensityGradient) {
    let (ln_p, g) = bound_probability_over_start_with_gradient(&params.mirrored_for(bound));
    (ln_p, oriented(bound, g))
}

/// ln P_lower of the mirrored process, averaged over the start range, with its gradient (the
/// start nodes of [`ln_bound_probability`]).
fn bound_probability_over_start_with_gradient(p: &DiffusionParams) -> (f64, Partials) {
    let t_ref = p.boundary * p.boundary;
    if p.drift_sd > 0.0 {
        over_start_with_gradient(t_ref, p, |q| survival_fixed_start_with_gradient(0.0, q))
    } else {
        over_start_with_gradient(t_ref, p, prob_lower_with_gradient)
    }
}

/// ln P_lower at a fixed start without drift variability and its partial derivatives
/// (v, a, w, ndt, η) = (−a·∂λ, −v·∂λ, −∂ω, 0, 0) in the frame λ = −v·a, ω = 1 − w of
/// [`ln_bound_probability_with_gradient`].
fn prob_lower_with_gradient(q: &DiffusionParams) -> (f64, [f64; 5]) {
    let (v, a) = (q.drift, q.boundary);
    let (lambda, omega) = (-v * a, 1.0 - q.start);
    let value = super::series::ln_prob_upper(lambda, omega);
    let d_lambda = -2.0 * (omega * pole_free_k(-2.0 * lambda * omega) - pole_free_k(-2.0 * lambda));
    let d_omega = 1.0 / omega - 2.0 * lambda * pole_free_k(-2.0 * lambda * omega);
    let mut g = [0.0; 5];
    g[V] = -a * d_lambda;
    g[A] = -v * d_lambda;
    g[W] = -d_omega;
    (value, g)
}

/// k(y) = 1/(1 − e^(−y)) − 1/y, the generating function y/(1 − e^(−y)) = Σ Bₙ⁺ yⁿ/n! less its
/// first term, divided by y (Abramowitz & Stegun 1964, 23.1.1): the series
/// ½ + y/12 − y³/720 + y⁵/30240 − y⁷/1209600 for |y| < 0.1 (next term below 1e-16), the closed
/// form elsewhere (finite for every finite y: −expm1(−y) = −∞ gives 0).
fn pole_free_k(y: f64) -> f64 {
    if y.abs() < 0.1 {
        let y2 = y * y;
        0.5 + y * (1.0 / 12.0 - y2 * (1.0 / 720.0 - y2 * (1.0 / 30240.0 - y2 / 1209600.0)))
    } else {
        1.0 / -(-y).exp_m1() - 1.0 / y
    }
}

fn ln_prob_lower_over_start(p: &DiffusionParams) -> f64 {
    let t_ref = p.boundary * p.boundary;
    if p.drift_sd == 0.0 {
        over_start(t_ref, p, |q| ln_prob_lower(q.drift * q.boundary, q.start))
    } else {
        let parts = cdf_over_start(t_ref, p);
        ln_add_exp(parts.ln_cdf, parts.ln_survival)
    }
}

/// Both parts of the lower-bound distribution at response time rt for the mirrored process.
///
/// With a uniform non-decision time τ ~ U(ndt − st/2, ndt + st/2) the decision time s = rt − τ
/// ranges over [lo, hi]; the averages of F and S = P − F over it follow by integration by parts,
/// ∫F ds = [s·F(s)] − ∫ s·f(s) ds and ∫S ds = [s·S(s)] + ∫ s·f(s) ds, so that only one time
/// integral of the density is needed (F = 0 and S = P where s ≤ 0).
fn cdf_parts(rt: f64, bound: Bound, params: &DiffusionParams) -> StdCdf {
    let p = params.mirrored_for(bound);
    if p.ndt_range == 0.0 {
        return cdf_over_start(rt - p.ndt, &p);
    }
    let half = 0.5 * p.ndt_range;
    let (lo, hi) = (rt - p.ndt - half, rt - p.ndt + half);
    let ln_p = ln_prob_lower_over_start(&p);
    if !positive(hi) {
        return StdCdf {
            ln_cdf: f64::NEG_INFINITY,
            ln_survival: ln_p,
        };
    }
    let s_lo = lo.max(0.0);
    let at_hi = cdf_over_start(hi, &p);
    let moment = ln_integrate_time(s_lo, hi, time_shape(&p), |s| {
        s.ln() + ln_density_over_start(s, &p)
    })
    .exp();
    let (f_lo, s_lo_surv) = if s_lo > 0.0 {
        let at_lo = cdf_over_start(s_lo, &p);
        (s_lo * at_lo.ln_cdf.exp(), s_lo * at_lo.ln_survival.exp())
    } else {
        (0.0, 0.0)
    };
    let cdf_integral = (hi * at_hi.ln_cdf.exp() - f_lo - moment).max(0.0);
    let below_zero = (-lo).max(0.0) * ln_p.exp();
    let survival_integral =
        (hi * at_hi.ln_survival.exp() - s_lo_surv + moment + below_zero).max(0.0);
    let ln_st = p.ndt_range.ln();
    StdCdf {
        ln_cdf: cdf_integral.ln() - ln_st,
        ln_survival: survival_integral.ln() - ln_st,
    }
}

/// Lower-bound parts at decision time t of the mirrored process, averaged over the start range.
fn cdf_over_start(t: f64, p: &DiffusionParams) -> StdCdf {
    if p.start_range == 0.0 {
        return cdf_fixed_start(t, p);
    }
    let half = 0.5 * p.start_range;
    let (ln_cdf, ln_survival) =
        ln_mean_over_pair(p.start - half, p.start + half, start_panels(t, p), |w| {
            let parts = cdf_fixed_start(t, &p.with_start(w));
            (parts.ln_cdf, parts.ln_survival)
        });
    StdCdf {
        ln_cdf,
        ln_survival,
    }
}

fn cdf_fixed_start(t: f64, p: &DiffusionParams) -> StdCdf {
    let a = p.boundary;
    if p.drift_sd == 0.0 {
        let lambda = p.drift * a;
        if !positive(t) {
            return StdCdf {
                ln_cdf: f64::NEG_INFINITY,
                ln_survival: ln_prob_lower(lambda, p.start),
            };
        }
        return std_cdf(lambda, t / (a * a), p.start);
    }
    let shape = time_shape(p);
    let density = |s: f64| lower_bound_core::<false>(s, p).0;
    let t = t.max(0.0);
    StdCdf {
        ln_cdf: ln_integrate_time(0.0, t, shape, density),
        ln_survival: ln_integrate_time(t, f64::INFINITY, shape, density),
    }
}
