//! Gauss–Legendre quadrature used where the engine has no closed form: across-trial start and
//! non-decision-time variability, and drift variability in the distribution function.

use super::params::positive;
use nalgebra::{DMatrix, SymmetricEigen};
use std::sync::OnceLock;

/// Points per Gauss–Legendre panel.
pub(crate) const NODES: usize = 10;

/// Largest change of the log-integrand allowed across one panel, in nats. With 10 points the
/// Gauss–Legendre remainder for exp(αy) over a panel with αh = 5 is about
/// (αh)^20·(10!)⁴ / (21·(20!)³) ≈ 2e-15 relative (Abramowitz & Stegun 1964, 25.4.30).
const MAX_NATS_PER_PANEL: f64 = 5.0;

/// Largest panel width in log-time.
const MAX_LOG_TIME_PANEL: f64 = 1.0;

/// Nats below the integrand's largest value at which the far tails are cut (e^−45 ≈ 3e-20).
const TAIL_NATS: f64 = 45.0;

/// Nodes x_i in (−1, 1) and weights ω_i (summing to 2) of the 10-point Gauss–Legendre rule,
/// computed once by the Golub & Welsch (1969) method: the nodes are the eigenvalues of the
/// symmetric tridiagonal Jacobi matrix of the Legendre polynomials, with off-diagonal
/// β_k = k/√(4k² − 1), and ω_i = 2·(first component of the i-th unit eigenvector)².
///
/// # Accuracy
/// Nodes and weights to about 1e-15 (a symmetric eigen-decomposition in double precision).
pub(crate) fn gauss_legendre() -> &'static [(f64, f64); NODES] {
    static RULE: OnceLock<[(f64, f64); NODES]> = OnceLock::new();
    RULE.get_or_init(|| {
        let jacobi = DMatrix::from_fn(NODES, NODES, |i, j| {
            if i + 1 == j || j + 1 == i {
                let k = i.max(j) as f64;
                k / (4.0 * k * k - 1.0).sqrt()
            } else {
                0.0
            }
        });
        let eigen = SymmetricEigen::new(jacobi);
        let mut rule: Vec<(f64, f64)> = (0..NODES)
            .map(|i| {
                let v0 = eigen.eigenvectors[(0, i)];
                (eigen.eigenvalues[i], 2.0 * v0 * v0)
            })
            .collect();
        rule.sort_by(|a, b| a.0.total_cmp(&b.0));
        let mut out = [(0.0, 0.0); NODES];
        out.copy_from_slice(&rule);
        out
    })
}

/// ln of the mean of exp(ln_h(x)) over [lo, hi], by composite Gauss–Legendre with `panels`
/// equal panels, summed in log space (ln Σ ω_i e^{h_i} − ln 2P).
pub(crate) fn ln_mean_over(
    lo: f64,
    hi: f64,
    panels: usize,
    mut ln_h: impl FnMut(f64) -> f64,
) -> f64 {
    ln_mean_over_pair(lo, hi, panels, |x| (ln_h(x), f64::NEG_INFINITY)).0
}

/// [`ln_mean_over`] for two integrands evaluated together.
pub(crate) fn ln_mean_over_pair(
    lo: f64,
    hi: f64,
    panels: usize,
    mut ln_h: impl FnMut(f64) -> (f64, f64),
) -> (f64, f64) {
    let rule = gauss_legendre();
    let width = (hi - lo) / panels as f64;
    let mut first = Vec::with_capacity(panels * NODES);
    let mut second = Vec::with_capacity(panels * NODES);
    for p in 0..panels {
        let mid = lo + (p as f64 + 0.5) * width;
        for &(x, weight) in rule {
            let (h1, h2) = ln_h(mid + 0.5 * width * x);
            first.push(weight.ln() + h1);
            second.push(weight.ln() + h2);
        }
    }
    let norm = (2.0 * panels as f64).ln();
    (ln_sum_exp(&first) - norm, ln_sum_exp(&second) - norm)
}

/// ln Σ exp(x_i), −∞ for an empty slice or all −∞.
pub(crate) fn ln_sum_exp(xs: &[f64]) -> f64 {
    let top = xs.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if top == f64::NEG_INFINITY {
        return top;
    }
    top + xs.iter().map(|x| (x - top).exp()).sum::<f64>().ln()
}

/// Shape of a first-passage integrand in time, used to place the panels: near zero it falls like
/// exp(−c/s); at large s like exp(−κ(s)·s) with κ(s) = κ₀ + κ₁/(1 + η²s).
#[derive(Clone, Copy, Debug)]
pub(crate) struct TimeShape {
    pub c: f64,
    pub kappa0: f64,
    pub kappa1: f64,
    pub eta2: f64,
}

impl TimeShape {
    fn nats_per_log_time(&self, s: f64) -> f64 {
        self.c / s + (self.kappa0 + self.kappa1 / (1.0 + self.eta2 * s)) * s
    }
}

/// ln ∫_lo^hi exp(ln_h(s)) ds for a first-passage integrand, lo ≥ 0, hi ≤ ∞, on the nodes of
/// [`time_nodes`].
pub(crate) fn ln_integrate_time(
    lo: f64,
    hi: f64,
    shape: TimeShape,
    mut ln_h: impl FnMut(f64) -> f64,
) -> f64 {
    let terms: Vec<f64> = time_nodes(lo, hi, shape)
        .into_iter()
        .map(|(s, ln_weight)| ln_weight + ln_h(s))
        .collect();
    ln_sum_exp(&terms)
}

/// Quadrature nodes s_i and log-weights for ∫_lo^hi h(s) ds ≈ Σ e^{ln_weight_i}·h(s_i).
///
/// Substitutes s = e^y (ds = s dy) and lays 10-point Gauss–Legendre panels in y whose width keeps
/// the change of the log-integrand per panel below 5 nats (from the shape in `shape`), at most 1.
/// An open end (lo = 0 or hi = ∞), or a lower end closer to 0 than that point, is cut where the
/// integrand has fallen 45 nats below its value at the nearest interior point of interest, which
/// bounds the neglected mass near 1e-19 relative.
pub(crate) fn time_nodes(lo: f64, hi: f64, shape: TimeShape) -> Vec<(f64, f64)> {
    let mut nodes = Vec::new();
    if !positive(hi - lo) {
        return nodes;
    }
    // The integrand behaves like s^(−3/2)·exp(−c/s − κs); its mode solves κs² + 1.5s − c = 0,
    // s = 2c/(1.5 + √(2.25 + 4κc)) (κ = κ₀ + κ₁, its largest value, which puts the mode no later
    // than the true one; κ = 0 gives 2c/3). Without the drift term the reference lies far beyond
    // the mass of fast processes and the panels there are needlessly narrow.
    let kappa = shape.kappa0 + shape.kappa1;
    let mode =
        (2.0 * shape.c / (1.5 + (2.25 + 4.0 * kappa * shape.c).sqrt())).max(f64::MIN_POSITIVE);
    let reference = mode.clamp(lo, hi.min(f64::MAX));
    // Below c/(c/reference + 45) the integrand (which rises like e^{−c/s}) lies more than 45
    // nats under its value at the reference point, so the lower end is cut there whether the
    // range is open (lo = 0) or starts closer to 0 than that: a range from a tiny lo would
    // otherwise need ever narrower panels (the log-integrand changes by c/s per unit of ln s).
    let s_lo = lo.max(shape.c / (shape.c / reference + TAIL_NATS));
    let s_hi = if hi.is_finite() {
        hi
    } else {
        // The tail falls at rate κ(s) ≥ κ₀ + κ₁/(1 + η²s); taking it at the far end of the
        // slowest case keeps the cut conservative.
        // Beyond `from` the −c/s part of the log-integrand can still rise by at most c/from,
        // so the cut lies (45 + c/from)/κ past it.
        let from = reference.max(lo);
        let nats = TAIL_NATS + shape.c / from;
        let far = from + nats / shape.kappa0.max(1e-300);
        let rate = shape.kappa0 + shape.kappa1 / (1.0 + shape.eta2 * far);
        from + nats / rate.max(1e-300)
    };
    let (y_lo, y_hi) = (s_lo.ln(), s_hi.ln());
    let rule = gauss_legendre();
    let mut y = y_lo;
    while y < y_hi {
        let probe_end = (y + MAX_LOG_TIME_PANEL).min(y_hi);
        let steep = shape
            .nats_per_log_time(y.exp())
            .max(shape.nats_per_log_time(probe_end.exp()));
        // A panel is never narrower than a few rounding units of y: at decision times near
        // 1e-17 (a window end that rounding puts just above zero) the steepness c/s asks for
        // panels below the spacing of doubles around ln s, and y would stop advancing.
        let width = (MAX_NATS_PER_PANEL / steep)
            .max(8.0 * f64::EPSILON * y.abs().max(1.0))
            .min(MAX_LOG_TIME_PANEL)
            .min(y_hi - y);
        let width = if y_hi - y - width < 1e-3 * width {
            y_hi - y
        } else {
            width
        };
        let mid = y + 0.5 * width;
        for &(x, weight) in rule {
            let yy = mid + 0.5 * width * x;
            nodes.push((yy.exp(), (0.5 * width * weight).ln() + yy));
        }
        y += width;
    }
    nodes
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gauss_legendre_integrates_polynomials_exactly() {
        // An n-point Gauss–Legendre rule is exact for polynomials up to degree 2n − 1
        // (Abramowitz & Stegun 1964, 25.4.29): ∫_{-1}^{1} x^18 dx = 2/19.
        let rule = gauss_legendre();
        let total: f64 = rule.iter().map(|&(_, w)| w).sum();
        assert!((total - 2.0).abs() < 1e-14);
        let moment: f64 = rule.iter().map(|&(x, w)| w * x.powi(18)).sum();
        assert!((moment - 2.0 / 19.0).abs() < 1e-14);
        // Largest node of the 10-point rule, 0.9739065285171717 (Abramowitz & Stegun 1964,
        // table 25.4).
        assert!((rule[NODES - 1].0 - 0.973_906_528_517_171_7).abs() < 1e-14);
    }

    #[test]
    fn time_integral_of_a_wald_density_is_one() {
        // Inverse-Gaussian first-passage density to a level d with drift μ > 0 integrates to one
        // (Cox & Miller 1965, §5.7): d/√(2πs³)·exp(−(d − μs)²/(2s)).
        let (d, mu) = (0.7_f64, 1.3_f64);
        let shape = TimeShape {
            c: d * d / 2.0,
            kappa0: mu * mu / 2.0,
            kappa1: 0.0,
            eta2: 0.0,
        };
        let ln_total = ln_integrate_time(0.0, f64::INFINITY, shape, |s| {
            d.ln()
                - 0.5 * (2.0 * std::f64::consts::PI * s * s * s).ln()
                - (d - mu * s).powi(2) / (2.0 * s)
        });
        assert!(ln_total.abs() < 1e-13, "{ln_total}");
    }
}
