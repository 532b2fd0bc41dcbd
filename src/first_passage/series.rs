//! Series for the standardised first-passage problem: zero drift or scaled drift λ = v·a,
//! unit boundary separation, standardised time u = t/a², relative start w, lower bound.
//!
//! Every other quantity of the engine is a change of variables away from these kernels
//! (Navarro & Fuss 2009, eq. 4: f_lower(t | v, a, w) = a⁻²·exp(−v·a·w − v²t/2)·f(t/a² | 0, 1, w)).
//!
//! Truncation: each series is summed until the next term is below [`SERIES_EPS`] times the
//! partial sum, after the point where the magnitudes decrease monotonically. The small-time
//! density series is alternating in that region, so by Leibniz's rule the truncation error is
//! below the first omitted term; the large-time series decay faster than geometrically with ratio
//! below 0.1 in the region where they are used. This gives relative truncation errors near 1e-16,
//! tighter than the absolute bounds of Navarro & Fuss (2009) and Gondan, Blurton & Kesselmeier
//! (2014), which is what keeps densities far below 1e-300 accurate in log space.

use super::normal::{LN_SQRT_2PI, ln_normal_cdf};
use super::params::StartTerms;
use std::f64::consts::PI;

/// Relative size of the first omitted term at which a series is stopped.
pub(crate) const SERIES_EPS: f64 = 1e-16;

/// ln [`SERIES_EPS`].
const LN_SERIES_EPS: f64 = -36.841_361_487_904_734;

/// Standardised time below which the small-time density series is used (large-time above).
/// At u = 0.2 both series need about six terms; the large-time series needs one exponential
/// only, so the switch favours it slightly.
pub(crate) const DENSITY_SMALL_TIME_BELOW: f64 = 0.3;

/// Standardised time below which the distribution function uses the sum of Wald distribution
/// functions (Blurton, Kesselmeier & Gondan 2012); above it the large-time survival series.
pub(crate) const CDF_SMALL_TIME_BELOW: f64 = 0.5;

/// Safety cap on the number of terms of any series (never reached for the documented domain).
const MAX_TERMS: usize = 200;

const LN_PI: f64 = 1.144_729_885_849_400_2;
const LN_2PI: f64 = 1.837_877_066_409_345_5;

/// ln g(u, w) of the standardised lower-bound density and its partial derivatives
/// ∂ln g/∂u and ∂ln g/∂w.
#[derive(Clone, Copy, Debug)]
pub(crate) struct StdDensity {
    pub ln_g: f64,
    pub d_u: f64,
    pub d_w: f64,
}

/// Standardised lower-bound density g(u, w) = f(u | 0, 1, w) in log space, with its partial
/// derivatives when `GRAD` is true (otherwise `d_u` and `d_w` are zero).
///
/// Small time (Navarro & Fuss 2009, eq. 6; Feller 1968):
/// g(u, w) = (2πu³)^(−1/2) · Σ_{k∈ℤ} (w + 2k)·exp(−(w + 2k)²/(2u)).
/// Large time (Navarro & Fuss 2009, eq. 5):
/// g(u, w) = π · Σ_{k≥1} k·exp(−k²π²u/2)·sin(kπw).
#[inline]
pub(crate) fn std_density<const GRAD: bool>(u: f64, start: &StartTerms) -> StdDensity {
    if u < DENSITY_SMALL_TIME_BELOW {
        small_time::<GRAD>(u, start)
            .unwrap_or_else(|| large_time::<GRAD>(u, start).unwrap_or(ZERO_DENSITY))
    } else {
        large_time::<GRAD>(u, start)
            .unwrap_or_else(|| small_time::<GRAD>(u, start).unwrap_or(ZERO_DENSITY))
    }
}

/// Above this u the large-time series is its first term to double precision: the second term
/// relative to the first is at most 4·exp(−3π²u/2) < 1e-17.
const LARGE_TIME_ONE_TERM_ABOVE: f64 = 2.6;

const ZERO_DENSITY: StdDensity = StdDensity {
    ln_g: f64::NEG_INFINITY,
    d_u: 0.0,
    d_w: 0.0,
};

/// Small-time series with the k = 0 term factored out; the images k = −m and k = +m are added
/// in pairs. The exponentials e_k = exp(−(x_k² − w²)/(2u)) follow from three exponentials by
/// the recurrences e_{±(m+1)} = e_{±m}·ρ_{±m}, ρ_{±(m+1)} = ρ_{±m}·exp(−4/u).
#[inline]
fn small_time<const GRAD: bool>(u: f64, start: &StartTerms) -> Option<StdDensity> {
    let w = start.w;
    let inv_u = 1.0 / u;
    let lead = -LN_SQRT_2PI - 0.5 * w * w * inv_u;
    // The first image, k = −1, relative to the k = 0 term is ((2 − w)/w)·exp(−2(1 − w)/u); when
    // even its bound (2/w)·exp(−2(1 − w)/u) is below SERIES_EPS the series is one term.
    let first_exponent = -2.0 * (1.0 - w) * inv_u;
    if first_exponent + std::f64::consts::LN_2 - start.ln_w < LN_SERIES_EPS {
        let ln_g = lead + start.ln_w - 1.5 * u.ln();
        let (d_u, d_w) = if GRAD {
            (
                -1.5 * inv_u + 0.5 * w * w * inv_u * inv_u,
                1.0 / w - w * inv_u,
            )
        } else {
            (0.0, 0.0)
        };
        return Some(StdDensity { ln_g, d_u, d_w });
    }
    let mut s = w;
    let mut s3 = w * w * w;
    let mut sw = 1.0 - w * w * inv_u;
    let mut e_neg = first_exponent.exp();
    let second_exponent = -2.0 * (1.0 + w) * inv_u;
    if second_exponent + 3f64.ln() - start.ln_w < LN_SERIES_EPS {
        // Only the image k = −1 matters; k = +1 and beyond are below SERIES_EPS.
        let x = w - 2.0;
        s += x * e_neg;
        if GRAD {
            s3 += x * x * x * e_neg;
            sw += (1.0 - x * x * inv_u) * e_neg;
        }
        return finish_small_time::<GRAD>(u, inv_u, lead, s, s3, sw);
    }
    let mut e_pos = second_exponent.exp();
    // exp(−4/u) = exp(−2(1 − w)/u)·exp(−2(1 + w)/u).
    let c = e_neg * e_pos;
    let mut r_neg = e_neg * c;
    let mut r_pos = e_pos * c;
    for m in 1..MAX_TERMS {
        let two_m = 2.0 * m as f64;
        let x_neg = w - two_m;
        let x_pos = w + two_m;
        let t_pos = x_pos * e_pos;
        s += x_neg * e_neg + t_pos;
        if GRAD {
            s3 += x_neg * x_neg * x_neg * e_neg + x_pos * x_pos * x_pos * e_pos;
            sw += (1.0 - x_neg * x_neg * inv_u) * e_neg + (1.0 - x_pos * x_pos * inv_u) * e_pos;
        }
        if t_pos <= SERIES_EPS * s.abs() {
            break;
        }
        e_neg *= r_neg;
        e_pos *= r_pos;
        r_neg *= c;
        r_pos *= c;
    }
    finish_small_time::<GRAD>(u, inv_u, lead, s, s3, sw)
}

/// ln g and its derivatives from the sums S' = Σ x_k e_k, Σ x_k³ e_k and Σ (1 − x_k²/u) e_k.
#[inline]
fn finish_small_time<const GRAD: bool>(
    u: f64,
    inv_u: f64,
    lead: f64,
    s: f64,
    s3: f64,
    sw: f64,
) -> Option<StdDensity> {
    if s.is_nan() || s <= 0.0 {
        return None;
    }
    // ln(S'/u^{3/2}) in one logarithm.
    let ln_g = lead + (s * inv_u / u.sqrt()).ln();
    let (d_u, d_w) = if GRAD {
        (-1.5 * inv_u + 0.5 * s3 * inv_u * inv_u / s, sw / s)
    } else {
        (0.0, 0.0)
    };
    Some(StdDensity { ln_g, d_u, d_w })
}

/// Large-time series with the factor exp(−π²u/2) taken out; q_k = exp(−(k² − 1)π²u/2) by
/// q_{k+1} = q_k·r^(2k+1), r = exp(−π²u/2), and sin(kπw), cos(kπw) by recurrence.
#[inline]
fn large_time<const GRAD: bool>(u: f64, start: &StartTerms) -> Option<StdDensity> {
    let half_pi2 = 0.5 * PI * PI;
    let (sin1, cos1) = (start.sin_pi_w, start.cos_pi_w);
    if u > LARGE_TIME_ONE_TERM_ABOVE {
        let ln_g = LN_PI - half_pi2 * u + start.ln_sin_pi_w;
        let (d_u, d_w) = if GRAD {
            (-half_pi2, PI * cos1 / sin1)
        } else {
            (0.0, 0.0)
        };
        return Some(StdDensity { ln_g, d_u, d_w });
    }
    let r = (-half_pi2 * u).exp();
    let r2 = r * r;
    let mut q = 1.0;
    let mut ratio = r2 * r;
    // sin(kπw) and cos(kπw) by the Chebyshev recurrence x_{k+1} = 2cos(πw)·x_k − x_{k−1}.
    let two_cos = 2.0 * cos1;
    let (mut s_prev, mut sk) = (0.0, sin1);
    let (mut c_prev, mut ck) = (1.0, cos1);
    let mut l = sin1;
    let mut lu = 0.0;
    let mut lw = cos1;
    for k in 2..MAX_TERMS {
        q *= ratio;
        ratio *= r2;
        let s_next = two_cos * sk - s_prev;
        s_prev = sk;
        sk = s_next;
        let kf = k as f64;
        let term = kf * q;
        l += term * sk;
        if GRAD {
            let c_next = two_cos * ck - c_prev;
            c_prev = ck;
            ck = c_next;
            lu += term * (kf * kf - 1.0) * sk;
            lw += term * kf * ck;
        }
        if term <= SERIES_EPS * l.abs() {
            break;
        }
    }
    if l.is_nan() || l <= 0.0 {
        return None;
    }
    let ln_g = LN_PI - half_pi2 * u + start.ln_sin_pi_w + ((l - sin1) / sin1).ln_1p();
    let (d_u, d_w) = if GRAD {
        (-half_pi2 - half_pi2 * lu / l, PI * lw / l)
    } else {
        (0.0, 0.0)
    };
    Some(StdDensity { ln_g, d_u, d_w })
}

/// ln P(lower bound) for scaled drift λ = v·a and relative start w:
/// P_upper = (1 − e^(−2λw)) / (1 − e^(−2λ)) (Cox & Miller 1965, §5.7; Navarro & Fuss 2009,
/// eq. 3), P_lower(λ, w) = P_upper(−λ, 1 − w); P_upper = w when λ = 0. Written with `expm1`
/// so that it is accurate for |λ| from 1e-300 to 1e300.
pub(crate) fn ln_prob_lower(lambda: f64, w: f64) -> f64 {
    ln_prob_upper(-lambda, 1.0 - w)
}

/// ln P(upper bound); see [`ln_prob_lower`].
pub(crate) fn ln_prob_upper(lambda: f64, w: f64) -> f64 {
    if lambda == 0.0 {
        w.ln()
    } else if lambda > 0.0 {
        (-(-2.0 * lambda * w).exp_m1()).ln() - (-(-2.0 * lambda).exp_m1()).ln()
    } else {
        let mu = -lambda;
        2.0 * mu * (w - 1.0) + (-(-2.0 * mu * w).exp_m1()).ln() - (-(-2.0 * mu).exp_m1()).ln()
    }
}

/// ln(e^a + e^b), finite whenever one argument is.
pub(crate) fn ln_add_exp(a: f64, b: f64) -> f64 {
    let (hi, lo) = if a > b { (a, b) } else { (b, a) };
    if hi == f64::NEG_INFINITY {
        hi
    } else {
        hi + (lo - hi).exp().ln_1p()
    }
}

/// Log of the lower-bound defective distribution function and of its survival part
/// P_lower − F_lower, standardised (scaled drift λ, time u, start w).
#[derive(Clone, Copy, Debug)]
pub(crate) struct StdCdf {
    pub ln_cdf: f64,
    pub ln_survival: f64,
}

/// Lower-bound defective distribution function F(u) and survival P − F(u) in log space.
///
/// Small time: F is a sum of first-passage (Wald) distribution functions to single levels at
/// the image distances x_k = w + 2k (Blurton, Kesselmeier & Gondan 2012, eq. 8, obtained by
/// integrating each term of the small-time density):
/// F = Σ_{k≥0} e^{2λk}·W(u; w + 2k, −λ) − Σ_{m≥1} e^{−2λm}·W(u; 2m − w, λ),
/// W(u; x, μ) = Φ((μu − x)/√u) + e^{2μx}·Φ((−μu − x)/√u).
/// Large time (Blurton et al. 2012, eq. 5; integral of the large-time density):
/// P − F = 2π·e^{−λw − λ²u/2}·Σ_{k≥1} k·sin(kπw)·e^{−k²π²u/2} / (λ² + k²π²).
/// The representation that is accurate in relative terms is computed and the other part follows
/// from P_lower.
pub(crate) fn std_cdf(lambda: f64, u: f64, w: f64) -> StdCdf {
    std_cdf_given(lambda, u, w, ln_prob_lower(lambda, w))
}

/// [`std_cdf`] with ln P_lower = [`ln_prob_lower`]`(λ, w)` already computed (the sampler
/// evaluates the distribution function many times for one λ and w).
pub(crate) fn std_cdf_given(lambda: f64, u: f64, w: f64, ln_p: f64) -> StdCdf {
    if u < CDF_SMALL_TIME_BELOW {
        let ln_cdf = wald_sum(lambda, u, w).min(ln_p);
        StdCdf {
            ln_cdf,
            ln_survival: ln_sub_exp(ln_p, ln_cdf),
        }
    } else {
        let ln_survival = large_time_survival(lambda, u, w).min(ln_p);
        StdCdf {
            ln_cdf: ln_sub_exp(ln_p, ln_survival),
            ln_survival,
        }
    }
}

/// ln(e^a − e^b) for a ≥ b; −∞ when they are equal.
pub(crate) fn ln_sub_exp(a: f64, b: f64) -> f64 {
    if b == f64::NEG_INFINITY {
        a
    } else if b >= a {
        f64::NEG_INFINITY
    } else {
        a + (-(b - a).exp()).ln_1p()
    }
}

fn wald_sum(lambda: f64, u: f64, w: f64) -> f64 {
    let sqrt_u = u.sqrt();
    let mut ln_pos = f64::NEG_INFINITY;
    let mut ln_neg = f64::NEG_INFINITY;
    let mut previous_top = f64::INFINITY;
    for k in 0..MAX_TERMS {
        let kf = k as f64;
        // Level w + 2k, drift −λ towards it, weight e^{2λk}.
        let x = w + 2.0 * kf;
        let m = kf + 1.0;
        let y = 2.0 * m - w;
        let decreasing = x > sqrt_u + lambda.abs() * u;
        if k > 0 && decreasing && images_bound(lambda, u, sqrt_u, kf, x, y) < ln_pos + LN_SERIES_EPS
        {
            // Every term of this image and of the later ones is below SERIES_EPS of the positive
            // part of the sum (the test the loop makes below with the terms themselves), known
            // without computing them.
            break;
        }
        let a = 2.0 * lambda * kf + ln_normal_cdf((-lambda * u - x) / sqrt_u);
        let b = 2.0 * lambda * (kf - x) + ln_normal_cdf((lambda * u - x) / sqrt_u);
        ln_pos = ln_add_exp(ln_pos, ln_add_exp(a, b));
        // Level 2(k+1) − w, drift λ, weight e^{−2λ(k+1)}, subtracted.
        let c = -2.0 * lambda * m + ln_normal_cdf((lambda * u - y) / sqrt_u);
        let d = 2.0 * lambda * (y - m) + ln_normal_cdf((-lambda * u - y) / sqrt_u);
        ln_neg = ln_add_exp(ln_neg, ln_add_exp(c, d));
        let top = a.max(b).max(c).max(d);
        let past_peak = top < previous_top && decreasing;
        if past_peak && top < ln_pos + LN_SERIES_EPS {
            break;
        }
        previous_top = top;
    }
    ln_sub_exp(ln_pos, ln_neg)
}

/// An upper bound on the four log-terms of image k of [`wald_sum`] (levels x = w + 2k and
/// y = 2(k + 1) − w), by the Gaussian tail bound Φ(z) ≤ e^{−z²/2}/2 for z ≤ 0 (the Chernoff
/// bound sharpened by the factor 1/2; common practice, from memory): where x > √u + |λ|·u every
/// argument of Φ is below −1, and each bound falls as k grows (its exponent has slope −2x/u or
/// −2y/u in k), so the bound on image k bounds every term of the later images too. It costs no
/// special function, where the terms themselves cost four normal tails.
fn images_bound(lambda: f64, u: f64, sqrt_u: f64, k: f64, x: f64, y: f64) -> f64 {
    let tail = |z: f64| -0.5 * z * z - std::f64::consts::LN_2;
    let m = k + 1.0;
    let a = 2.0 * lambda * k + tail((lambda * u + x) / sqrt_u);
    let b = 2.0 * lambda * (k - x) + tail((lambda * u - x) / sqrt_u);
    let c = -2.0 * lambda * m + tail((lambda * u - y) / sqrt_u);
    let d = 2.0 * lambda * (y - m) + tail((lambda * u + y) / sqrt_u);
    a.max(b).max(c).max(d)
}

pub(crate) fn large_time_survival(lambda: f64, u: f64, w: f64) -> f64 {
    let pi2 = PI * PI;
    let lambda2 = lambda * lambda;
    let (sin1, cos1) = (PI * w).sin_cos();
    let r = (-0.5 * pi2 * u).exp();
    let r2 = r * r;
    let mut q = 1.0;
    let mut ratio = r2 * r;
    let (mut sk, mut ck) = (sin1, cos1);
    let mut sum = sin1 / (lambda2 + pi2);
    for k in 2..MAX_TERMS {
        q *= ratio;
        ratio *= r2;
        let s_next = sk * cos1 + ck * sin1;
        ck = ck * cos1 - sk * sin1;
        sk = s_next;
        let kf = k as f64;
        let term = kf * q / (lambda2 + kf * kf * pi2);
        sum += term * sk;
        if term <= SERIES_EPS * sum.abs() {
            break;
        }
    }
    if sum <= 0.0 {
        return f64::NEG_INFINITY;
    }
    LN_2PI - lambda * w - 0.5 * lambda2 * u - 0.5 * pi2 * u + sum.ln()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The bound that ends the Wald sum early holds term by term: on a grid of drifts, starts
    /// and standardised times, every term of every image where [`wald_sum`] may use the bound
    /// (x > √u + |λ|·u) is at most the bound on its own image and on every earlier image (the
    /// tail bound Φ(z) ≤ e^{−z²/2}/2 for z ≤ 0; common practice, from memory).
    #[test]
    fn the_images_bound_is_above_every_term_of_its_image_and_of_the_later_ones() {
        let mut checked = 0;
        for lambda in [-12.0_f64, -4.0, -1.0, -0.1, 0.0, 0.3, 2.0, 7.0, 15.0] {
            for w in [0.01, 0.2, 0.5, 0.8, 0.99] {
                for u in [1e-3, 0.01, 0.05, 0.1, 0.2, 0.35, 0.49] {
                    let sqrt_u = f64::sqrt(u);
                    let mut earlier = f64::INFINITY;
                    for k in 1..6 {
                        let kf = k as f64;
                        let (x, m) = (w + 2.0 * kf, kf + 1.0);
                        let y = 2.0 * m - w;
                        if x <= sqrt_u + lambda.abs() * u {
                            continue;
                        }
                        let bound = images_bound(lambda, u, sqrt_u, kf, x, y);
                        earlier = earlier.min(bound);
                        let terms = [
                            2.0 * lambda * kf + ln_normal_cdf((-lambda * u - x) / sqrt_u),
                            2.0 * lambda * (kf - x) + ln_normal_cdf((lambda * u - x) / sqrt_u),
                            -2.0 * lambda * m + ln_normal_cdf((lambda * u - y) / sqrt_u),
                            2.0 * lambda * (y - m) + ln_normal_cdf((-lambda * u - y) / sqrt_u),
                        ];
                        for term in terms {
                            assert!(
                                term <= bound && term <= earlier,
                                "λ={lambda} w={w} u={u} k={k}: term {term} above {bound}"
                            );
                            checked += 1;
                        }
                    }
                }
            }
        }
        assert!(checked > 1000, "only {checked} terms were checked");
    }
}
