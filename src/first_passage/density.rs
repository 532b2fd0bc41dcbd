//! Log-density of the defective first-passage distribution at one bound, with its gradient.

use super::params::{Bound, DiffusionParams, StartTerms, positive};
use super::quadrature::{TimeShape, gauss_legendre, ln_integrate_time, ln_mean_over, time_nodes};
use super::series::std_density;
use std::f64::consts::PI;

/// Partial derivatives of a log-quantity (log-density, log-survival, log-probability of a
/// bound) with respect to the process parameters.
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
    /// ∂ ln f / ∂ start_range (zero when the range is zero: the derivative there is one-sided).
    pub start_range: f64,
    /// ∂ ln f / ∂ ndt_range (zero when the range is zero).
    pub ndt_range: f64,
}

impl DensityGradient {
    /// The partial derivatives in the order drift, boundary, start, ndt, drift_sd, start_range,
    /// ndt_range.
    pub fn to_array(self) -> [f64; 7] {
        let g = self;
        [
            g.drift,
            g.boundary,
            g.start,
            g.ndt,
            g.drift_sd,
            g.start_range,
            g.ndt_range,
        ]
    }
}

/// Positions in a gradient of the mirrored process: drift v, boundary a, start w, time or
/// non-decision time, drift_sd η, start_range, ndt_range.
pub(crate) const V: usize = 0;
pub(crate) const A: usize = 1;
pub(crate) const W: usize = 2;
pub(crate) const T: usize = 3;
pub(crate) const ETA: usize = 4;
pub(crate) const SZ: usize = 5;
pub(crate) const ST: usize = 6;

/// Partial derivatives of a log-quantity of the mirrored process, indexed by [`V`] … [`ST`].
pub(crate) type Partials = [f64; 7];

/// ln of the defective density of the response time `rt` (seconds) at `bound`.
///
/// Lower bound, decision time t = rt − ndt, u = t/a², D = 1 + η²t
/// (Navarro & Fuss 2009, eq. 4, with the normal drift integrated out in closed form as in
/// Blurton, Kesselmeier & Gondan 2017, eq. 8):
///
/// ln f = −2 ln a − ½ ln D + (η²a²w² − 2avw − v²t) / (2D) + ln g(u, w),
///
/// where g is the standardised density of the series module (small-time or large-time
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
    let (v, terms) = oriented_start(params.drift, params, bound);
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

/// Drift and start functions of the lower-bound problem for `bound` of the process `p` with
/// drift `drift`, without copying the whole parameter set (the hot path of [`ln_density`]).
#[inline]
fn oriented_start(drift: f64, p: &DiffusionParams, bound: Bound) -> (f64, StartTerms) {
    match bound {
        Bound::Lower => (drift, p.start_terms),
        Bound::Upper => (
            -drift,
            StartTerms {
                w: 1.0 - p.start,
                ln_w: p.ln_start_complement,
                cos_pi_w: -p.start_terms.cos_pi_w,
                ..p.start_terms
            },
        ),
    }
}

/// [`ln_density`] together with its partial derivatives with respect to drift, boundary, start,
/// ndt, drift_sd, start_range and ndt_range.
///
/// Without ranges: the equation of [`ln_density`] differentiated term by term (the series
/// derivatives come from the same terms). With ranges the density is the average
/// f̄(rt) = (1/s_t)∫ (1/s_z)∫ f(rt − τ | w′) dw′ dτ over w′ ∈ [w − s_z/2, w + s_z/2] and
/// τ ∈ [ndt − s_t/2, ndt + s_t/2] (Ratcliff & Tuerlinckx 2002), and the partial derivatives are
/// taken under the integrals on the same Gauss–Legendre nodes (Golub & Welsch 1969) that give the
/// value:
///
/// * start range: with w′ = w + s_z·y, y ∈ [−½, ½] fixed on the nodes, ∂/∂w = mean of ∂f/∂w′
///   and ∂/∂s_z = mean of y·∂f/∂w′. This equals the endpoint form
///   −mean/s_z + (f(w + s_z/2) + f(w − s_z/2))/(2s_z) of Leibniz's rule, integrated by parts,
///   without the cancellation of its two 1/s_z terms at small ranges;
/// * non-decision range: with decision time s = m + s_t·y, m = rt − ndt, ∂/∂ndt = −mean of
///   ∂f/∂s and ∂/∂s_t = mean of y·∂f/∂s, both over the decision times s > 0 of the window (the
///   density is zero at and below s = 0 with every derivative, so the end of the window that
///   falls before ndt − s_t/2 adds no endpoint term);
/// * drift, boundary and drift_sd: the mean of the integrand's own partial derivatives.
///
/// The log-derivative of an average is the density-weighted mean of the integrand's
/// log-derivatives, summed in log space. Where the density is zero the log-density is −∞ and
/// the gradient is all zeros; never NaN for finite rt.
///
/// # Accuracy
/// The value is [`ln_density`]'s (within 1e-12). Without ranges the partial derivatives agree
/// with central differences of [`ln_density`] to 1e-6 relative
/// (tests/suite/first_passage_properties.rs). With ranges the start-range derivatives are those
/// of the quadrature itself and the non-decision ones those of the exact integral, evaluated by
/// the same quadrature; against Richardson-extrapolated central differences of [`ln_density`]
/// the largest relative error measured was 4.1e-9 (ndt_range, 0.02 s after the earliest
/// response), below 3.2e-10 for the other six (tests/suite/full_diffusion.rs; required 1e-7).
pub fn ln_density_with_gradient(
    rt: f64,
    bound: Bound,
    params: &DiffusionParams,
) -> (f64, DensityGradient) {
    if !params.has_integrated_variability() {
        return fixed_with_gradient(rt, bound, params.drift, params);
    }
    let p = params.mirrored_for(bound);
    let (ln_f, g) = if p.ndt_range > 0.0 {
        ln_density_window_with_gradient(rt, &p)
    } else {
        let (ln_f, mut g) = density_over_start_with_gradient(rt - p.ndt, &p);
        // ∂/∂ndt = −∂/∂t.
        g[T] = -g[T];
        (ln_f, g)
    };
    (ln_f, oriented(bound, g))
}

/// [`ln_density_with_gradient`] of the process `params` with its drift replaced by `drift`
/// (the same numbers as on `params.with_drift(drift)`), without copying the parameter set when
/// it has no start or non-decision range: the per-trial call of the likelihood's fused kernel
/// (inlined there, so that the partial derivatives stay in registers).
#[inline]
pub(crate) fn ln_density_with_gradient_at(
    rt: f64,
    bound: Bound,
    drift: f64,
    params: &DiffusionParams,
) -> (f64, DensityGradient) {
    if params.has_integrated_variability() {
        return ln_density_with_gradient(rt, bound, &params.with_drift(drift));
    }
    fixed_with_gradient(rt, bound, drift, params)
}

/// The value of [`ln_density_with_gradient_at`] alone, the same number to the last bit: without
/// start or non-decision range the kernel's log-density is computed by the same operations
/// whether or not it also gives the partial derivatives (only they are skipped); with them it
/// is taken from [`ln_density_with_gradient_at`].
pub(crate) fn ln_density_at(rt: f64, bound: Bound, drift: f64, params: &DiffusionParams) -> f64 {
    if params.has_integrated_variability() {
        return ln_density_with_gradient_at(rt, bound, drift, params).0;
    }
    let t = rt - params.ndt;
    if !positive(t) {
        return f64::NEG_INFINITY;
    }
    let (v, terms) = oriented_start(drift, params, bound);
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

/// [`ln_density_with_gradient`] without start or non-decision range, at drift `drift`: the
/// kernel alone (the hot path of fits).
#[inline]
fn fixed_with_gradient(
    rt: f64,
    bound: Bound,
    drift: f64,
    params: &DiffusionParams,
) -> (f64, DensityGradient) {
    let t = rt - params.ndt;
    if !positive(t) {
        return (f64::NEG_INFINITY, DensityGradient::default());
    }
    let (v, terms) = oriented_start(drift, params, bound);
    let (ln_f, g) = lower_bound_kernel::<true>(
        t,
        v,
        params.boundary,
        params.drift_sd,
        params.ln_boundary,
        &terms,
    );
    (
        ln_f,
        oriented(bound, [g[V], g[A], g[W], -g[T], g[ETA], 0.0, 0.0]),
    )
}

/// A gradient of the mirrored process expressed in the parameters as given: mirroring for the
/// upper bound negates drift and start; the ranges are symmetric and keep their sign.
pub(crate) fn oriented(bound: Bound, g: Partials) -> DensityGradient {
    let sign = match bound {
        Bound::Lower => 1.0,
        Bound::Upper => -1.0,
    };
    DensityGradient {
        drift: sign * g[V],
        boundary: g[A],
        start: sign * g[W],
        ndt: g[T],
        drift_sd: g[ETA],
        start_range: g[SZ],
        ndt_range: g[ST],
    }
}

/// ln Σ e^{l_i} and the e^{l_i}-weighted mean of the g_i: for a positive sum of terms whose
/// log-derivatives are g_i, the log of the sum and its log-derivatives. Terms at −∞ carry no
/// weight; (−∞, zeros) when every term is −∞.
pub(crate) fn ln_sum_with_mean<const N: usize>(terms: &[(f64, [f64; N])]) -> (f64, [f64; N]) {
    let top = terms.iter().map(|t| t.0).fold(f64::NEG_INFINITY, f64::max);
    if top == f64::NEG_INFINITY {
        return (top, [0.0; N]);
    }
    let mut total = 0.0;
    let mut mean = [0.0; N];
    for (ln_term, g) in terms {
        if *ln_term == f64::NEG_INFINITY {
            continue;
        }
        let weight = (ln_term - top).exp();
        total += weight;
        for (m, x) in mean.iter_mut().zip(g) {
            *m += weight * x;
        }
    }
    for m in &mut mean {
        *m /= total;
    }
    (top + total.ln(), mean)
}

/// Averages a log-quantity with its gradient, `at(start)` → (ln q, ∂ln q/∂(v, a, w, ·, η)), over
/// the start range of `p` (already mirrored) on the nodes of [`over_start`] (panels for decision
/// time `t_panels`): ln of the mean, and its partial derivatives with ∂/∂start_range from the
/// nodes' offsets (see [`ln_density_with_gradient`]); position [`ST`] is zero. Without a range,
/// `at(p)` itself.
pub(crate) fn over_start_with_gradient(
    t_panels: f64,
    p: &DiffusionParams,
    mut at: impl FnMut(&DiffusionParams) -> (f64, [f64; 5]),
) -> (f64, Partials) {
    let widen = |(ln_q, g): (f64, [f64; 5]), offset: f64| {
        (ln_q, [g[V], g[A], g[W], g[T], g[ETA], offset * g[W], 0.0])
    };
    if p.start_range == 0.0 {
        return widen(at(p), 0.0);
    }
    let panels = start_panels(t_panels, p);
    let width = p.start_range / panels as f64;
    let lo = p.start - 0.5 * p.start_range;
    let mut terms = Vec::with_capacity(panels * gauss_legendre().len());
    for k in 0..panels {
        let mid = lo + (k as f64 + 0.5) * width;
        for &(x, weight) in gauss_legendre() {
            // Node w′ = w − s_z/2 + s_z·(k + ½ + x/2)/P: ∂w′/∂s_z is its offset y ∈ (−½, ½).
            let offset = (k as f64 + 0.5 + 0.5 * x) / panels as f64 - 0.5;
            let (ln_q, g) = widen(at(&p.with_start(mid + 0.5 * width * x)), offset);
            terms.push((weight.ln() + ln_q, g));
        }
    }
    let (ln_sum, mean) = ln_sum_with_mean(&terms);
    (ln_sum - (2.0 * panels as f64).ln(), mean)
}

/// ln density at decision time t of the mirrored process averaged over the start range, with
/// its gradient; position [`T`] holds ∂/∂t. (−∞, zeros) for t ≤ 0.
pub(crate) fn density_over_start_with_gradient(t: f64, p: &DiffusionParams) -> (f64, Partials) {
    if !positive(t) {
        return (f64::NEG_INFINITY, [0.0; 7]);
    }
    over_start_with_gradient(t, p, |q| lower_bound_core::<true>(t, q))
}

/// The density of the mirrored process averaged over its non-decision range (above zero), with
/// its gradient: on the time nodes of [`ln_density`]'s integral, decision time s = m + s_t·y
/// with m = rt − ndt, so ∂s/∂ndt = −1 and ∂s/∂s_t = y = (s − m)/s_t.
fn ln_density_window_with_gradient(rt: f64, p: &DiffusionParams) -> (f64, Partials) {
    let st = p.ndt_range;
    let middle = rt - p.ndt;
    let (lo, hi) = (middle - 0.5 * st, middle + 0.5 * st);
    if !positive(hi) {
        return (f64::NEG_INFINITY, [0.0; 7]);
    }
    let terms: Vec<(f64, Partials)> = time_nodes(lo.max(0.0), hi, time_shape(p))
        .into_iter()
        .map(|(s, ln_weight)| {
            let (ln_f, mut g) = density_over_start_with_gradient(s, p);
            let slope = g[T];
            g[T] = -slope;
            g[ST] = (s - middle) / st * slope;
            (ln_weight + ln_f, g)
        })
        .collect();
    let (ln_integral, g) = ln_sum_with_mean(&terms);
    (ln_integral - st.ln(), g)
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
