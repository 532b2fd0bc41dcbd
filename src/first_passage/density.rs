//! Log-density of the defective first-passage distribution at one bound, with its gradient.

use super::params::{Bound, DiffusionParams, StartTerms, positive};
use super::quadrature::{TimeShape, ln_integrate_time, ln_mean_over};
use super::series::std_density;
use std::f64::consts::PI;

/// Partial derivatives of the log-density with respect to the process parameters.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct DensityGradient {
    /// ∂ ln f / ∂ drift.
    pub drift: f64,
    /// ∂ ln f / ∂ boundary.
    pub boundary: f64,
    /// ∂ ln f / ∂ start.
    pub start: f64,
    /// ∂ ln f / ∂ ndt (equal to −∂ ln f / ∂ rt).
    pub ndt: f64,
    /// ∂ ln f / ∂ drift_sd.
    pub drift_sd: f64,
}

/// The analytic gradient exists for drift, boundary, start, ndt and drift_sd only; processes
/// with `start_range` or `ndt_range` above zero are integrated numerically and have no gradient.
#[derive(Clone, Copy, Debug, PartialEq, Eq, thiserror::Error)]
#[error(
    "the analytic gradient is not available when start_range or ndt_range is above zero \
     (those are integrated numerically)"
)]
pub struct GradientUnavailable;

/// ln of the defective density of the response time `rt` (seconds) at `bound`.
///
/// Lower bound, decision time t = rt − ndt, u = t/a², D = 1 + η²t
/// (Navarro & Fuss 2009, eq. 4, with the normal drift integrated out in closed form as in
/// Blurton, Kesselmeier & Gondan 2017, eq. 8):
///
/// ln f = −2 ln a − ½ ln D + (η²a²w² − 2avw − v²t) / (2D) + ln g(u, w),
///
/// where g is the standardised density of [`series`](super::series) (small-time or large-time
/// series of Navarro & Fuss 2009). The upper bound uses f_upper(t | v, w) = f_lower(t | −v, 1 − w).
/// With `start_range` or `ndt_range` above zero the density is averaged over the uniform start
/// and non-decision time by composite Gauss–Legendre quadrature (see the crate's accuracy notes).
///
/// Returns `f64::NEG_INFINITY` exactly when the density is zero (rt at or before the earliest
/// possible response, ndt − ndt_range/2); never NaN for finite rt.
///
/// # Accuracy
/// Within 1e-8 absolute in log density of mpmath references over t/a² ∈ [1e-3, 20], |v| ≤ 8,
/// a ∈ [0.3, 5], w ∈ [0.05, 0.95], η ≤ 3 (tests/suite/first_passage_reference.rs); relative accuracy of
/// the density itself is near 1e-13 in that range, including densities far below 1e-300.
pub fn ln_density(rt: f64, bound: Bound, params: &DiffusionParams) -> f64 {
    if params.has_integrated_variability() {
        return ln_density_integrated(rt, bound, params);
    }
    let t = rt - params.ndt;
    if !positive(t) {
        return f64::NEG_INFINITY;
    }
    let (v, terms) = oriented_start(params, bound);
    lower_bound_kernel::<false>(
        t,
        v,
        params.boundary,
        params.drift_sd,
        params.ln_boundary,
        &terms,
    )
    .0
}

/// Drift and start functions of the lower-bound problem for `bound`, without copying the whole
/// parameter set (the hot path of [`ln_density`]).
#[inline]
fn oriented_start(p: &DiffusionParams, bound: Bound) -> (f64, StartTerms) {
    match bound {
        Bound::Lower => (p.drift, p.start_terms),
        Bound::Upper => (
            -p.drift,
            StartTerms {
                w: 1.0 - p.start,
                ln_w: p.ln_start_complement,
                cos_pi_w: -p.start_terms.cos_pi_w,
                ..p.start_terms
            },
        ),
    }
}

/// [`ln_density`] together with its analytic partial derivatives (same equation,
/// differentiated term by term; the series derivatives come from the same terms).
///
/// Where the density is zero the log-density is −∞ and the gradient is all zeros.
///
/// # Accuracy
/// Partial derivatives agree with central differences of [`ln_density`] to 1e-6 relative
/// (tests/suite/first_passage_properties.rs).
pub fn ln_density_with_gradient(
    rt: f64,
    bound: Bound,
    params: &DiffusionParams,
) -> Result<(f64, DensityGradient), GradientUnavailable> {
    if params.has_integrated_variability() {
        return Err(GradientUnavailable);
    }
    let t = rt - params.ndt;
    if !positive(t) {
        return Ok((f64::NEG_INFINITY, DensityGradient::default()));
    }
    let (ln_f, g) = lower_bound_core::<true>(t, &params.mirrored_for(bound));
    Ok((ln_f, oriented(bound, [g[0], g[1], g[2], -g[3], g[4]])))
}

/// A gradient with respect to (v, a, w, ndt, η) of the mirrored process, expressed in the
/// parameters as given: mirroring for the upper bound negates drift and start.
pub(crate) fn oriented(bound: Bound, g: [f64; 5]) -> DensityGradient {
    let sign = match bound {
        Bound::Lower => 1.0,
        Bound::Upper => -1.0,
    };
    DensityGradient {
        drift: sign * g[0],
        boundary: g[1],
        start: sign * g[2],
        ndt: g[3],
        drift_sd: g[4],
    }
}

/// ln f_lower at decision time t > 0 and its derivatives with respect to (v, a, w, t, η) of the
/// parameters as given (already mirrored for the upper bound).
#[inline]
pub(crate) fn lower_bound_core<const GRAD: bool>(t: f64, p: &DiffusionParams) -> (f64, [f64; 5]) {
    lower_bound_kernel::<GRAD>(
        t,
        p.drift,
        p.boundary,
        p.drift_sd,
        p.ln_boundary,
        &p.start_terms,
    )
}

/// [`lower_bound_core`] on its parts: drift v, boundary a, drift_sd η, ln a and the start terms.
#[inline]
fn lower_bound_kernel<const GRAD: bool>(
    t: f64,
    v: f64,
    a: f64,
    eta: f64,
    ln_boundary: f64,
    start: &StartTerms,
) -> (f64, [f64; 5]) {
    let w = start.w;
    let inv_a2 = 1.0 / (a * a);
    let u = t * inv_a2;
    let g = std_density::<GRAD>(u, start);
    if eta == 0.0 {
        let ln_f = -2.0 * ln_boundary - v * a * w - 0.5 * v * v * t + g.ln_g;
        if !GRAD {
            return (ln_f, [0.0; 5]);
        }
        let d_v = -a * w - v * t;
        let d_a = -2.0 / a - v * w - 2.0 * t * g.d_u * inv_a2 / a;
        let d_w = -v * a + g.d_w;
        let d_t = -0.5 * v * v + g.d_u * inv_a2;
        return (ln_f, [d_v, d_a, d_w, d_t, 0.0]);
    }
    let eta2 = eta * eta;
    let d = 1.0 + eta2 * t;
    let n = eta2 * a * a * w * w - 2.0 * a * v * w - v * v * t;
    let ln_f = -2.0 * ln_boundary - 0.5 * (eta2 * t).ln_1p() + n / (2.0 * d) + g.ln_g;
    if !GRAD {
        return (ln_f, [0.0; 5]);
    }
    let d_v = -(a * w + v * t) / d;
    let d_a = -2.0 / a + (eta2 * a * w * w - v * w) / d - 2.0 * t * g.d_u * inv_a2 / a;
    let d_w = (eta2 * a * a * w - a * v) / d + g.d_w;
    let d_t = -0.5 * eta2 / d - (v * v * d + n * eta2) / (2.0 * d * d) + g.d_u * inv_a2;
    let d_eta = -eta * t / d + eta * (a * a * w * w * d - t * n) / (d * d);
    (ln_f, [d_v, d_a, d_w, d_t, d_eta])
}

/// Panel layout in time for integrals of the lower-bound density of `p` (already mirrored).
pub(crate) fn time_shape(p: &DiffusionParams) -> TimeShape {
    let nearest = p.boundary * (p.start - 0.5 * p.start_range);
    TimeShape {
        c: 0.5 * nearest * nearest,
        kappa0: 0.5 * PI * PI / (p.boundary * p.boundary),
        kappa1: 0.5 * p.drift * p.drift,
        eta2: p.drift_sd * p.drift_sd,
    }
}

/// Number of Gauss–Legendre panels across the start range at decision time t: the change of
/// the log-density over the range is bounded by the slope of its leading terms,
/// w/u (small time), π·cot(πw) (large time), |v|·a and η²a², times the range.
pub(crate) fn start_panels(t: f64, p: &DiffusionParams) -> usize {
    let (lo, hi) = (p.start - 0.5 * p.start_range, p.start + 0.5 * p.start_range);
    let u = t / (p.boundary * p.boundary);
    let slope = hi / u
        + 1.0 / lo
        + 1.0 / (1.0 - hi)
        + p.drift.abs() * p.boundary
        + p.drift_sd * p.drift_sd * p.boundary * p.boundary;
    ((slope * p.start_range / 5.0).ceil() as usize).clamp(1, 512)
}

/// Averages ln-quantity `at(start)` over the uniform start range of `p` (already mirrored) at
/// decision time t, or evaluates it at `start` when there is no range.
pub(crate) fn over_start(
    t: f64,
    p: &DiffusionParams,
    mut at: impl FnMut(&DiffusionParams) -> f64,
) -> f64 {
    if p.start_range > 0.0 {
        let half = 0.5 * p.start_range;
        ln_mean_over(p.start - half, p.start + half, start_panels(t, p), |w| {
            at(&p.with_start(w))
        })
    } else {
        at(p)
    }
}

/// ln density at decision time t of the mirrored process, averaged over the start range.
pub(crate) fn ln_density_over_start(t: f64, p: &DiffusionParams) -> f64 {
    if !positive(t) {
        return f64::NEG_INFINITY;
    }
    over_start(t, p, |q| lower_bound_core::<false>(t, q).0)
}

fn ln_density_integrated(rt: f64, bound: Bound, params: &DiffusionParams) -> f64 {
    let p = params.mirrored_for(bound);
    if p.ndt_range > 0.0 {
        let half = 0.5 * p.ndt_range;
        let lo = (rt - p.ndt - half).max(0.0);
        let hi = rt - p.ndt + half;
        if !positive(hi) {
            return f64::NEG_INFINITY;
        }
        ln_integrate_time(lo, hi, time_shape(&p), |s| ln_density_over_start(s, &p))
            - p.ndt_range.ln()
    } else {
        ln_density_over_start(rt - p.ndt, &p)
    }
}
