//! Power of a two-group comparison: the noncentral t distribution, the normal-theory power of
//! Welch's test, and the interval of a Monte Carlo proportion.
//!
//! The planning command ([`crate::plan`]) estimates power by simulation (the share of simulated
//! studies whose Welch test rejects); beside it, [`welch_power`] gives the power the same test
//! would have if the estimates were normally distributed with the simulated groups' means and
//! standard deviations, a smooth curve over the numbers of participants.
//!
//! Accuracy: [`noncentral_t_cdf`] agrees with SciPy's `scipy.stats.nct.cdf` to 2.9e-12
//! absolute (the test requires 1e-10) on the committed table `tests/reference/power.csv` (t
//! from −6 to 12, 2 to 200 degrees of freedom, noncentrality −3 to 8; tests/suite/power.rs);
//! [`welch_power`] to 1e-9 and [`wilson_interval`] to 1e-12.

use statrs::distribution::{ContinuousCDF, Normal, StudentsT};
use statrs::function::beta::beta_reg;
use statrs::function::gamma::ln_gamma;

/// Distribution function of the noncentral t distribution with ν = `df` degrees of freedom and
/// noncentrality δ = `ncp`, by the Poisson-weighted series of incomplete beta functions of
/// Lenth (1989, "Algorithm AS 243: cumulative distribution function of the non-central t
/// distribution", Applied Statistics 38:185–189; Guenther 1978): for t ≥ 0, with x = t²/(t² + ν)
/// and λ = δ²/2,
///
/// F(t; ν, δ) = Φ(−δ) + ½ Σ_{j≥0} [ p_j I_x(j + ½, ν/2) + q_j I_x(j + 1, ν/2) ],
/// p_j = e^{−λ} λ^j / j!,  q_j = δ e^{−λ} λ^j / (√2 Γ(j + 3/2)),
///
/// and F(t; ν, δ) = 1 − F(−t; ν, −δ) for t < 0 (I_x: the regularised incomplete beta function).
/// The weights are computed in log space; the sum runs from j = 0 to λ + 12√λ + 40, beyond which
/// the Poisson weights left out sum to less than 1e-16. Returns NaN for ν ≤ 0 or non-finite
/// arguments other than t = ±∞.
pub fn noncentral_t_cdf(t: f64, df: f64, ncp: f64) -> f64 {
    if df.is_nan() || df <= 0.0 || !ncp.is_finite() || t.is_nan() {
        return f64::NAN;
    }
    if t == f64::INFINITY {
        return 1.0;
    }
    if t == f64::NEG_INFINITY {
        return 0.0;
    }
    if t < 0.0 {
        return (1.0 - upper_half_cdf(-t, df, -ncp)).clamp(0.0, 1.0);
    }
    upper_half_cdf(t, df, ncp).clamp(0.0, 1.0)
}

/// The series of [`noncentral_t_cdf`] for t ≥ 0.
fn upper_half_cdf(t: f64, df: f64, ncp: f64) -> f64 {
    let standard = Normal::standard();
    let base = standard.cdf(-ncp);
    if t == 0.0 {
        return base;
    }
    let x = t * t / (t * t + df);
    let lambda = ncp * ncp / 2.0;
    let last = (lambda + 12.0 * lambda.sqrt() + 40.0).ceil() as usize;
    let mut sum = 0.0;
    for j in 0..=last {
        let jf = j as f64;
        let ln_power = if lambda > 0.0 {
            jf * lambda.ln()
        } else if j == 0 {
            0.0
        } else {
            break;
        };
        let ln_p = -lambda + ln_power - ln_gamma(jf + 1.0);
        let p = ln_p.exp();
        let q = if ncp == 0.0 {
            0.0
        } else {
            let ln_q = ncp.abs().ln() - lambda + ln_power
                - 0.5 * std::f64::consts::LN_2
                - ln_gamma(jf + 1.5);
            ncp.signum() * ln_q.exp()
        };
        sum += p * beta_reg(jf + 0.5, df / 2.0, x) + q * beta_reg(jf + 1.0, df / 2.0, x);
    }
    base + 0.5 * sum
}

/// Normal-theory power of the two-sided Welch test (Welch 1947) at level α when the two groups'
/// values are normal with a difference of means `difference`, standard deviations `sd1`, `sd2`
/// and sizes `n1`, `n2`: with s² = sd1²/n1 + sd2²/n2, δ = difference/s and the
/// Welch–Satterthwaite degrees of freedom ν = s⁴ / [(sd1²/n1)²/(n1 − 1) + (sd2²/n2)²/(n2 − 1)]
/// evaluated at the population standard deviations (Satterthwaite 1946),
///
/// power = 1 − F(c; ν, δ) + F(−c; ν, δ),  c = t_{1−α/2, ν},
///
/// F the noncentral t distribution function ([`noncentral_t_cdf`]). This is the usual
/// approximation of the Welch test's power (exact for the pooled t test when sd1 = sd2 and
/// n1 = n2, where ν = 2n − 2; Cohen 1988, ch. 2). `None` when n1 or n2 < 2, a standard deviation
/// is negative, both are 0, or α is not in (0, 1).
pub fn welch_power(
    difference: f64,
    sd1: f64,
    sd2: f64,
    n1: usize,
    n2: usize,
    alpha: f64,
) -> Option<f64> {
    if n1 < 2 || n2 < 2 || !(alpha > 0.0 && alpha < 1.0) || !difference.is_finite() {
        return None;
    }
    if !(sd1 >= 0.0 && sd2 >= 0.0 && sd1.is_finite() && sd2.is_finite()) {
        return None;
    }
    let (a, b) = (sd1 * sd1 / n1 as f64, sd2 * sd2 / n2 as f64);
    let s2 = a + b;
    if s2 <= 0.0 {
        return None;
    }
    let df = s2 * s2 / (a * a / (n1 - 1) as f64 + b * b / (n2 - 1) as f64);
    let ncp = difference / s2.sqrt();
    let critical = StudentsT::new(0.0, 1.0, df)
        .ok()?
        .inverse_cdf(1.0 - alpha / 2.0);
    let power = 1.0 - noncentral_t_cdf(critical, df, ncp) + noncentral_t_cdf(-critical, df, ncp);
    power.is_finite().then_some(power.clamp(0.0, 1.0))
}

/// The Wilson score interval of a proportion (Wilson 1927, "Probable inference, the law of
/// succession, and statistical inference", JASA 22:209–212): with p̂ = k/n and z the
/// (1 + level)/2 normal quantile,
///
/// (p̂ + z²/2n ± z √(p̂(1 − p̂)/n + z²/4n²)) / (1 + z²/n).
///
/// It keeps near-nominal coverage for proportions near 0 and 1, where the Wald interval
/// p̂ ± z√(p̂(1 − p̂)/n) collapses (Brown, Cai & DasGupta 2001). `None` when n = 0, k > n or
/// `level` is not in (0, 1).
pub fn wilson_interval(successes: usize, n: usize, level: f64) -> Option<(f64, f64)> {
    if n == 0 || successes > n || !(level > 0.0 && level < 1.0) {
        return None;
    }
    let z = Normal::standard().inverse_cdf(0.5 + level / 2.0);
    let nf = n as f64;
    let p = successes as f64 / nf;
    let z2 = z * z;
    let centre = (p + z2 / (2.0 * nf)) / (1.0 + z2 / nf);
    let half = z * (p * (1.0 - p) / nf + z2 / (4.0 * nf * nf)).sqrt() / (1.0 + z2 / nf);
    Some(((centre - half).max(0.0), (centre + half).min(1.0)))
}
