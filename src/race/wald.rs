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
//!   difference in log space (no 1 − F rounding).
//!
//! # Accuracy
//! ln f is a closed form, accurate to rounding. ln S subtracts two positive terms whose ratio
//! approaches (vt − α)/(vt + α) when vt ≫ α, so its relative error grows like 1e-16·vt/(2α):
//! about 1e-13 at vt = 1000α (checked against mpmath in tests/suite/race_reference.rs).

use super::Accumulator;
use super::real::{LN_SQRT_2PI, Real, lift, ln_1m_exp, ln_add_exp, ln_sub_exp};
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
    /// c₁ = (vt − α)/√t, c₂ = −(vt + α)/√t (differentiating F; e^{2vα}φ(c₂) = φ(c₁)).
    fn ln_survival(&self, t: T, drift: T) -> T {
        let (tv, a, v) = (t.value(), self.threshold.value(), drift.value());
        if tv <= 0.0 {
            return T::from(0.0);
        }
        let root = tv.sqrt();
        let c1 = (v * tv - a) / root;
        let c2 = -(v * tv + a) / root;
        if !T::CARRIES_DERIVATIVES
            && let Some(ln_s) = linear_survival(c1, c2, 2.0 * v * a)
        {
            return T::from(ln_s);
        }
        let ln_first = ln_normal_cdf(-c1);
        let ln_second = 2.0 * v * a + ln_normal_cdf(c2);
        let ln_s = ln_sub_exp(ln_first, ln_second.min(ln_first));
        if !ln_s.is_finite() || !T::CARRIES_DERIVATIVES {
            return T::from(ln_s);
        }
        let gap = a - v * tv;
        let ln_f = a.ln() - LN_SQRT_2PI - 1.5 * tv.ln() - gap * gap / (2.0 * tv);
        let ln_pdf_c1 = -0.5 * c1 * c1 - LN_SQRT_2PI;
        let second_over_s = (ln_second - ln_s).exp();
        lift(
            ln_s,
            &[
                (-(ln_f - ln_s).exp(), t),
                (
                    2.0 * (ln_pdf_c1 - ln_s).exp() / root - 2.0 * v * second_over_s,
                    self.threshold,
                ),
                (-2.0 * a * second_over_s, drift),
            ],
        )
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

/// ln S from its two terms in linear space, Φ(−c₁) − e^{2vα}Φ(c₂) with Φ(x) = ½·erfc(−x/√2)
/// (one logarithm instead of four), where neither term can under- or overflow and the second is
/// below half the first (so the difference loses at most one bit); None elsewhere.
fn linear_survival(c1: f64, c2: f64, two_v_alpha: f64) -> Option<f64> {
    if c1 > 30.0 || c2 < -30.0 || two_v_alpha > 600.0 {
        return None;
    }
    let first = 0.5 * libm::erfc(c1 * std::f64::consts::FRAC_1_SQRT_2);
    let second = two_v_alpha.exp() * 0.5 * libm::erfc(-c2 * std::f64::consts::FRAC_1_SQRT_2);
    (second < 0.5 * first).then(|| (first - second).ln())
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
