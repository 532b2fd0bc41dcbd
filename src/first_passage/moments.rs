//! Mean decision times, overall and per bound.

use super::density::{ln_density_over_start, time_shape};
use super::distribution::ln_bound_probability;
use super::params::{Bound, DiffusionParams};
use super::quadrature::ln_integrate_time;
use super::series::ln_prob_upper;

/// Below this |λ| = |v·a| the conditional means use their Taylor series (error below 1e-12).
const SMALL_SCALED_DRIFT: f64 = 0.01;

/// (coth λ − x·coth(λx)) / λ, the standardised mean first-passage time conditional on the bound
/// at distance fraction 1 − x from the start, an even function of λ; at small |λ| its series
/// (1 − x²)/3 − λ²(1 − x⁴)/45 + 2λ⁴(1 − x⁶)/945 (from the Laurent series of coth).
pub(super) fn conditional_mean_std(lambda: f64, x: f64) -> f64 {
    if lambda.abs() < SMALL_SCALED_DRIFT {
        let l2 = lambda * lambda;
        let x2 = x * x;
        (1.0 - x2) / 3.0 - l2 * (1.0 - x2 * x2) / 45.0
            + 2.0 * l2 * l2 * (1.0 - x2 * x2 * x2) / 945.0
    } else {
        (1.0 / lambda.tanh() - x / (lambda * x).tanh()) / lambda
    }
}

/// Mean decision time (response time minus non-decision time) conditional on ending at `bound`.
///
/// Without variability (Grasman, Wagenmakers & van der Maas 2009, eqs. 7–8, unit noise, z = a·w):
/// E[T | upper] = (a·coth(va) − z·coth(vz)) / v, E[T | lower] = (a·coth(va) − (a − z)·coth(v(a − z))) / v,
/// with the limits (a² − z²)/3 and (a² − (a − z)²)/3 at v = 0. With across-trial drift or start
/// variability, ∫ t·f_b(t) dt / P_b by the engine's time quadrature.
///
/// # Accuracy
/// Closed form to about 1e-13 relative; the quadrature to about 1e-10 relative
/// (tests/suite/first_passage_properties.rs compares both with mpmath integrals).
pub fn mean_decision_time_given(bound: Bound, params: &DiffusionParams) -> f64 {
    let p = params.mirrored_for(bound);
    if p.drift_sd == 0.0 && p.start_range == 0.0 {
        // Lower bound of the mirrored process: the remaining distance fraction is w.
        let a = p.boundary;
        return a * a * conditional_mean_std(p.drift * a, 1.0 - p.start);
    }
    let shape = time_shape(&p);
    let ln_moment = ln_integrate_time(0.0, f64::INFINITY, shape, |s| {
        s.ln() + ln_density_over_start(s, &p)
    });
    (ln_moment - ln_bound_probability(bound, params)).exp()
}

/// Unconditional mean decision time E\[T\] = P_upper·E\[T | upper\] + P_lower·E\[T | lower\]
/// (for fixed drift and start equal to (a·P_upper − z)/v, Grasman et al. 2009; for an
/// unbiased start a/(2v)·(1 − e^(−va))/(1 + e^(−va)), Wagenmakers, van der Maas & Grasman 2007).
pub fn mean_decision_time(params: &DiffusionParams) -> f64 {
    if params.drift_sd == 0.0 && params.start_range == 0.0 {
        let a = params.boundary;
        let lambda = params.drift * a;
        let p_upper = ln_prob_upper(lambda, params.start).exp();
        let upper = conditional_mean_std(lambda, params.start);
        let lower = conditional_mean_std(lambda, 1.0 - params.start);
        return a * a * (p_upper * upper + (1.0 - p_upper) * lower);
    }
    [Bound::Upper, Bound::Lower]
        .iter()
        .map(|&b| bound_weighted_mean(b, params))
        .sum()
}

fn bound_weighted_mean(bound: Bound, params: &DiffusionParams) -> f64 {
    let p = params.mirrored_for(bound);
    let shape = time_shape(&p);
    ln_integrate_time(0.0, f64::INFINITY, shape, |s| {
        s.ln() + ln_density_over_start(s, &p)
    })
    .exp()
}

/// Mean response time: ndt plus [`mean_decision_time`] (the uniform non-decision range is
/// centred on ndt).
pub fn mean_response_time(params: &DiffusionParams) -> f64 {
    params.ndt + mean_decision_time(params)
}
