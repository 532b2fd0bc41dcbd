//! The single-bound Wiener accumulator of a diffusion race: Brownian motion from 0 with drift v
//! and unit diffusion coefficient, absorbed at a threshold α > 0. Its first-passage time has the
//! Wald (inverse Gaussian) law (Wald 1947; Cox & Miller 1965, §5.7), used as the racing
//! accumulator by Logan, Van Zandt, Verbruggen & Wagenmakers (2014) and Tillman, Van Zandt &
//! Logan (2020):
//!
//! * density f(t) = α/√(2πt³)·exp(−(α − vt)²/(2t));
//! * distribution F(t) = Φ((vt − α)/√t) + e^{2vα}·Φ(−(vt + α)/√t), defective for v < 0 with
//!   total mass e^{2vα} (the process may drift away and never arrive);
//! * survival S(t) = 1 − F(t) = Φ((α − vt)/√t) − e^{2vα}·Φ(−(vt + α)/√t), computed as that
//!   difference (no 1 − F rounding) with the Gaussian factor e^{−c₁²/2} taken out of both terms
//!   (scaled normal tails of Cody 1969, `tails.rs`), so that ln S needs two rational
//!   evaluations and one logarithm; where vt + α < 0 (a negative drift at long times) from two
//!   log-space normal distribution functions instead.
//!
//! # Accuracy
//! ln f is a closed form, accurate to rounding. ln S subtracts two positive terms whose ratio
//! approaches (vt − α)/(vt + α) when vt ≫ α, so its relative error grows like 1e-16·vt/(2α):
//! about 1e-13 at vt = 1000α. Largest errors against mpmath (tests/suite/race_reference.rs, 601
//! points with the ballistic accumulator): 3.8e-12 in ln f, 2.6e-13 in ln S, 5.7e-14 in ln F.

use super::real::{LN_SQRT_2PI, Real, lift, ln_1m_exp, ln_add_exp, ln_sub_exp};
use super::tails::{INV_SQRT_2PI, ln_normal_pdf, scaled_tails};
use super::{Accumulator, Moment};
use crate::first_passage::ln_normal_cdf;
use rand::Rng;
use rand_distr::{Distribution, InverseGaussian, StandardNormal};

/// A Wiener accumulator with threshold α (unit noise, start 0).
#[derive(Clone, Copy, Debug)]
pub struct WaldAccumulator<T> {
    /// Threshold α > 0 (distance from start to bound).
    pub threshold: T,
}

impl<T: Real> Accumulator<T> for WaldAccumulator<T> {
    /// ln f(t) = ln α − ½ln(2π) − 1.5·ln t − (α − vt)²/(2t) (Wald 1947).
    fn ln_density(&self, t: T, drift: T) -> T {
        if t.value() <= 0.0 {
            return T::from(f64::NEG_INFINITY);
        }
        let alpha = self.threshold;
        let gap = alpha - drift * t;
        alpha.ln() - LN_SQRT_2PI - t.ln() * 1.5 - gap * gap / (t * 2.0)
    }

    /// ln S(t) = ln[Φ((α − vt)/√t) − e^{2vα}·Φ(−(vt + α)/√t)], with ∂/∂t = −f/S,
    /// ∂/∂α = [2φ(c₁)/√t − 2v·e^{2vα}Φ(c₂)]/S and ∂/∂v = −2α·e^{2vα}Φ(c₂)/S, where
    /// c₁ = (vt − α)/√t, c₂ = −(vt + α)/√t (differentiating F; e^{2vα}φ(c₂) = φ(c₁), and
    /// f = α·t^{−3/2}·φ(c₁)). From the scaled normal tails (`ln_survival_by_tails`) where
    /// vt + α ≥ 0, else from two log-space normal distribution functions.
    fn ln_survival(&self, t: T, drift: T) -> T {
        let (tv, a, v) = (t.value(), self.threshold.value(), drift.value());
        if tv <= 0.0 {
            return T::from(0.0);
        }
        let root = tv.sqrt();
        let c1 = (v * tv - a) / root;
        let c2 = -(v * tv + a) / root;
        let (ln_s, second_over_s) = match ln_survival_by_tails(c1, -c2) {
            Some((ln_s, m2)) => {
                if !T::CARRIES_DERIVATIVES {
                    return T::from(ln_s);
                }
                // e^{2vα}Φ(c₂)/S = e^{−c₁²/2}·M(−c₂)/S.
                (ln_s, m2 * (-0.5 * c1 * c1 - ln_s).exp())
            }
            None => {
                let ln_first = ln_normal_cdf(-c1);
                let ln_second = 2.0 * v * a + ln_normal_cdf(c2);
                let ln_s = ln_sub_exp(ln_first, ln_second.min(ln_first));
                if !T::CARRIES_DERIVATIVES {
                    return T::from(ln_s);
                }
                (ln_s, (ln_second - ln_s).exp())
            }
        };
        if !ln_s.is_finite() {
            return T::from(ln_s);
        }
        // φ(c₁)/S.
        let pdf_over_s = (ln_normal_pdf(c1) - ln_s).exp();
        lift(
            ln_s,
            &[
                (-pdf_over_s * a / (tv * root), t),
                (
                    2.0 * pdf_over_s / root - 2.0 * v * second_over_s,
                    self.threshold,
                ),
                (-2.0 * a * second_over_s, drift),
            ],
        )
    }

    /// (−(α − vt)²/(2t), α/(√(2π)·t^{3/2})): the density without a logarithm.
    fn split_ln_density(&self, at: &Moment, drift: f64) -> Option<(f64, f64)> {
        let a = self.threshold.value();
        let gap = a - drift * at.t;
        Some((
            -0.5 * gap * gap * at.inverse,
            a * INV_SQRT_2PI * at.inverse * at.inverse.sqrt(),
        ))
    }

    /// `ln_survival_by_tails`'s two parts before their logarithm.
    fn split_ln_survival(&self, at: &Moment, drift: f64) -> Option<(f64, f64)> {
        let a = self.threshold.value();
        let inverse_root = at.inverse.sqrt();
        let c1 = (drift * at.t - a) * inverse_root;
        let (part, _) = survival_by_tails(c1, (drift * at.t + a) * inverse_root)?;
        Some(if c1 >= 0.0 {
            (-0.5 * c1 * c1, part)
        } else {
            (0.0, 1.0 - part)
        })
    }

    /// ln P(the accumulator ever arrives): 0 for v ≥ 0, 2vα for v < 0.
    fn ln_arrival_probability(&self, drift: T) -> T {
        if drift.value() >= 0.0 {
            T::from(0.0)
        } else {
            drift * self.threshold * 2.0
        }
    }

    /// ln P(never arrives) = ln(1 − e^{2vα}); −∞ for v ≥ 0.
    fn ln_never(&self, drift: T) -> T {
        if drift.value() >= 0.0 {
            T::from(f64::NEG_INFINITY)
        } else {
            ln_1m_exp(drift * self.threshold * 2.0)
        }
    }

    /// An exact draw: for v > 0 the inverse Gaussian law with mean α/v and shape α²
    /// (`rand_distr`, the transformation method of Michael, Schucany & Haas 1976); for v < 0 it
    /// arrives with probability e^{2vα} and then follows the law of drift |v| (the density at v
    /// is e^{2vα} times that at −v); for v = 0 the Lévy law T = α²/Z², Z standard normal.
    /// Infinity when it never arrives.
    fn sample(&self, drift: f64, rng: &mut dyn Rng) -> f64 {
        let a = self.threshold.value();
        let v = drift;
        if v == 0.0 {
            let z: f64 = StandardNormal.sample(rng);
            return a * a / (z * z);
        }
        if v < 0.0 && rand::RngExt::random::<f64>(rng) >= (2.0 * v * a).exp() {
            return f64::INFINITY;
        }
        match InverseGaussian::new(a / v.abs(), a * a) {
            Ok(law) => law.sample(rng),
            Err(_) => f64::INFINITY,
        }
    }

    fn leading_edge(&self) -> f64 {
        let a = self.threshold.value();
        0.5 * a * a
    }
}

/// ln S = ln[Φ(−c₁) − e^{2vα}Φ(c₂)] from the scaled tails M(x) = Φ(−x)·e^{x²/2} of
/// [`scaled_tails`] (Cody 1969; accuracy in `tails.rs`), with x₂ = −c₂ = (vt + α)/√t ≥ 0. Since
/// c₂² − c₁² = 4vα, e^{2vα}Φ(c₂) = e^{−c₁²/2}·M(x₂) and, for c₁ ≥ 0, Φ(−c₁) = e^{−c₁²/2}·M(c₁):
///
/// * c₁ ≥ 0: ln S = −c₁²/2 + ln(M(c₁) − M(x₂)) (no exponential; x₂ > c₁ so the difference is
///   positive);
/// * c₁ < 0: ln S = ln(1 − e^{−c₁²/2}·(M(−c₁) + M(x₂))), the bracket being F(t) ≤ ½ + ½.
///
/// The difference M(c₁) − M(x₂) (or 1 − F) amplifies rounding as the two log-space terms did
/// (by about (vt + α)/(2α), the ratio of the terms to S). Returns (ln S, M(x₂)); None when
/// x₂ < 0 or rounding leaves no positive difference.
fn ln_survival_by_tails(c1: f64, x2: f64) -> Option<(f64, f64)> {
    let (part, m2) = survival_by_tails(c1, x2)?;
    let ln_s = if c1 >= 0.0 {
        -0.5 * c1 * c1 + part.ln()
    } else {
        (-part).ln_1p()
    };
    Some((ln_s, m2))
}

/// The parts of [`ln_survival_by_tails`] before the logarithm: (M(c₁) − M(x₂), M(x₂)) for
/// c₁ ≥ 0, (F, M(x₂)) for c₁ < 0.
#[inline]
fn survival_by_tails(c1: f64, x2: f64) -> Option<(f64, f64)> {
    if x2.is_nan() || x2 < 0.0 {
        return None;
    }
    let m2 = scaled_tails(x2).0;
    if c1 >= 0.0 {
        let difference = scaled_tails(c1).0 - m2;
        (difference > 0.0).then_some((difference, m2))
    } else {
        let arrived = (-0.5 * c1 * c1).exp() * (scaled_tails(-c1).0 + m2);
        (arrived < 1.0).then_some((arrived, m2))
    }
}

/// ln F(t) = ln[Φ((vt − α)/√t) + e^{2vα}·Φ(−(vt + α)/√t)] (values only; for tests and
/// listings).
pub fn ln_wald_cdf(t: f64, threshold: f64, drift: f64) -> f64 {
    if t <= 0.0 {
        return f64::NEG_INFINITY;
    }
    let root = t.sqrt();
    ln_add_exp(
        ln_normal_cdf((drift * t - threshold) / root),
        2.0 * drift * threshold + ln_normal_cdf(-(drift * t + threshold) / root),
    )
}
