//! The linear ballistic accumulator (Brown & Heathcote 2008): evidence starts uniformly on
//! [0, A] and rises linearly at a rate d drawn once per trial from Normal(v, s²) until it
//! reaches the threshold b = A + gap (gap > 0, so b > A always holds). It arrives at time
//! (b − start)/d when d > 0 and never when d ≤ 0. With z₁ = (b − A − tv)/(ts) and
//! z₂ = (b − tv)/(ts) (Brown & Heathcote 2008, eqs. 1–2):
//!
//! * density f(t) = (1/A)·[v·(Φ(z₂) − Φ(z₁)) + s·(φ(z₁) − φ(z₂))] = (1/A)∫_{z₁}^{z₂} (v + su)φ(u) du;
//! * survival S(t) = 1 − F(t) = (ts/A)·[G(z₂) − G(z₁)] = (ts/A)∫_{z₁}^{z₂} Φ(u) du, with
//!   G(z) = zΦ(z) + φ(z) (G' = Φ), which is the closed form of Brown & Heathcote rearranged;
//! * P(arrives) = Φ(v/s).
//!
//! # Accuracy
//! Both integrals have positive integrands, so they are evaluated without cancellation: the
//! density from the closed form when its two terms differ by more than 1 % (so that their
//! difference amplifies rounding at most a hundredfold), else
//! by Gauss–Legendre quadrature of c·φ((c/t − v)/s) over the distance c to the threshold
//! (Brown & Heathcote's integral over the start point); the survival from
//! G(z₂) − G(z₁) with G(z) = z + G(−z) for z ≥ 0 (so that the large part z₂ − z₁ = A/(ts) is
//! formed without subtraction) and G(−x) = φ(x)/(1 + x·K(x)) for x ≥ 5, K the continued
//! fraction x + 2/(x + 3/(x + …)) from Laplace's fraction for the Mills ratio (Abramowitz &
//! Stegun 1964, 26.2.14); when z₂ − z₁ < 1e-3 both by quadrature over the distance to the
//! threshold. Relative accuracy about
//! 1e-13 (checked against mpmath in tests/suite/race_reference.rs).

use super::Accumulator;
use super::real::{LN_SQRT_2PI, Real, lift, ln_add_exp, ln_normal_cdf_of, ln_sub_exp, ln_sum_exp};
use crate::first_passage::ln_normal_cdf;
use rand::{Rng, RngExt};
use rand_distr::{Distribution, StandardNormal};

/// A linear ballistic accumulator.
#[derive(Clone, Copy, Debug)]
pub struct BallisticAccumulator<T> {
    /// Width A > 0 of the uniform start-point range.
    pub start_range: T,
    /// Distance from the top of the start range to the threshold, b − A > 0.
    pub threshold_gap: T,
    /// Across-trial standard deviation s > 0 of the rate.
    pub drift_sd: T,
}

/// 10-point Gauss–Legendre nodes and weights on (−1, 1) (Abramowitz & Stegun 1964, table 25.4).
fn rule() -> &'static [(f64, f64); 10] {
    crate::first_passage::gauss_legendre_rule()
}

/// Below this width z₂ − z₁ = A/(ts) the closed forms' differences would lose more than about
/// three digits (z₁ and z₂ carry rounding of order 1e-16·|z|), so both quantities are
/// integrated over the distance to the threshold instead.
const NARROW: f64 = 1e-3;

/// When the closed form's two density terms differ by less than this in log (1 %), their
/// difference would amplify rounding more than a hundredfold, so the density is integrated.
const CANCELLING: f64 = 0.01;

/// Most Gauss–Legendre panels of one [`ln_integral`].
const MAX_PANELS: usize = 2000;

/// Nodes and log-weights of Gauss–Legendre panels over [lo, hi] narrow enough that a
/// log-integrand with |h'| ≤ `slope(u)` (at the panel's ends) changes by at most about 2 nats
/// across each, at most 0.5 wide; after 1999 panels the last one takes the rest of the range.
fn panel_nodes(lo: f64, hi: f64, slope: impl Fn(f64) -> f64) -> Vec<(f64, f64)> {
    let mut nodes = Vec::new();
    let mut x = lo;
    for panel in 1..=MAX_PANELS {
        if x >= hi {
            break;
        }
        let steep = slope(x).max(slope((x + 0.5).min(hi)));
        let width = if steep > 1.0 { 2.0 / steep } else { 2.0 };
        let width = if panel == MAX_PANELS {
            hi - x
        } else {
            width.min(hi - x).min(0.5)
        };
        let mid = x + 0.5 * width;
        for &(node, weight) in rule() {
            nodes.push((mid + 0.5 * width * node, (0.5 * width * weight).ln()));
        }
        x += width;
    }
    nodes
}

/// ln G(z) for G(z) = zΦ(z) + φ(z) > 0.
fn ln_g(z: f64) -> f64 {
    if z >= 0.0 {
        // G(z) = z + G(−z).
        ln_add_exp(z.ln(), ln_g(-z))
    } else if z > -5.0 {
        (z * ln_normal_cdf(z).exp() + (-0.5 * z * z - LN_SQRT_2PI).exp()).ln()
    } else {
        let x = -z;
        let mut tail = x;
        for k in (2..=80).rev() {
            tail = x + k as f64 / tail;
        }
        -0.5 * x * x - LN_SQRT_2PI - (1.0 + x * tail).ln()
    }
}

/// ln(Φ(z₂) − Φ(z₁)) for z₁ < z₂, on the side of the smaller tail.
fn ln_normal_interval(z1: f64, z2: f64) -> f64 {
    if z1 > 0.0 {
        ln_sub_exp(ln_normal_cdf(-z1), ln_normal_cdf(-z2))
    } else {
        ln_sub_exp(ln_normal_cdf(z2), ln_normal_cdf(z1))
    }
}

/// ln ∫_{z1}^{z2} Φ(u) du for z2 − z1 = `width` ≥ 1e-3 (passed exactly), from G = zΦ + φ:
/// when both are negative the difference loses about log10(1/(width·max(1, |z|))) digits.
fn ln_phi_integral(z1: f64, z2: f64, width: f64) -> f64 {
    if z1 >= 0.0 {
        // (z2 − z1) + G(−z2) − G(−z1); the last two are small.
        ln_sub_exp(ln_add_exp(width.ln(), ln_g(-z2)), ln_g(-z1))
    } else {
        ln_sub_exp(ln_g(z2), ln_g(z1))
    }
}

impl<T: Real> BallisticAccumulator<T> {
    /// ln ∫_{b−A}^{b} e^{h(c, u(c))} dc over the distance c from a start point to the
    /// threshold, u(c) = (c/t − v)/s, by Gauss–Legendre panels (the nodes fixed fractions of
    /// the range, so that the result's derivatives are those of the quadrature).
    fn ln_over_distances(&self, t: T, v: T, h: impl Fn(T, T) -> T) -> T {
        let (tv, vv) = (t.value(), v.value());
        let s = self.drift_sd.value();
        let (gap, a) = (self.threshold_gap.value(), self.start_range.value());
        let u = |c: f64| (c / tv - vv) / s;
        let terms: Vec<T> = panel_nodes(gap, gap + a, |c| 1.0 / c + (u(c).abs() + 1.0) / (tv * s))
            .into_iter()
            .map(|(c, ln_w)| {
                // The node as a fixed fraction of the range, so that its derivatives follow A and
                // the gap.
                let c = self.threshold_gap + self.start_range * ((c - gap) / a);
                h(c, (c / t - v) / self.drift_sd) + ln_w - a.ln()
            })
            .collect();
        self.start_range.ln() + ln_sum_exp(&terms)
    }

    /// (z₁, z₂) at time t and mean rate v.
    fn bounds(&self, t: T, drift: T) -> (T, T) {
        // (b/t − v)/s rather than (b − tv)/(ts): no cancellation between b and tv at long t.
        (
            (self.threshold_gap / t - drift) / self.drift_sd,
            ((self.threshold_gap + self.start_range) / t - drift) / self.drift_sd,
        )
    }
}

impl<T: Real> Accumulator<T> for BallisticAccumulator<T> {
    /// ln f(t), f = (1/A)[v(Φ(z₂) − Φ(z₁)) + s(φ(z₁) − φ(z₂))], with ∂f/∂z₂ = φ(z₂)(v + sz₂)/A,
    /// ∂f/∂z₁ = −φ(z₁)(v + sz₁)/A, ∂f/∂v = (Φ(z₂) − Φ(z₁))/A, ∂f/∂s = (φ(z₁) − φ(z₂))/A,
    /// ∂f/∂A = −f/A at fixed z (Brown & Heathcote 2008).
    fn ln_density(&self, t: T, drift: T) -> T {
        if t.value() <= 0.0 {
            return T::from(f64::NEG_INFINITY);
        }
        let (z1, z2) = self.bounds(t, drift);
        let (u1, u2) = (z1.value(), z2.value());
        let (v, s, a) = (
            drift.value(),
            self.drift_sd.value(),
            self.start_range.value(),
        );
        let width = a / (t.value() * s);
        let (ln_dcdf, ln_p1, ln_p2) = (
            ln_normal_interval(u1, u2),
            -0.5 * u1 * u1 - LN_SQRT_2PI,
            -0.5 * u2 * u2 - LN_SQRT_2PI,
        );
        // s(φ(z₁) − φ(z₂)) with its sign.
        let (pdf_positive, ln_dpdf) = if ln_p1 >= ln_p2 {
            (true, ln_sub_exp(ln_p1, ln_p2))
        } else {
            (false, ln_sub_exp(ln_p2, ln_p1))
        };
        let ln_first = v.abs().ln() + ln_dcdf;
        let ln_second = s.ln() + ln_dpdf;
        let same_sign = (v >= 0.0) == pdf_positive;
        if width < NARROW || (!same_sign && (ln_first - ln_second).abs() < CANCELLING) {
            // z₁ ≈ z₂, or the two terms cancel: f = (1/(At²s))∫_{b−A}^{b} c·φ((c/t − v)/s) dc,
            // a positive integrand over the distance c to the threshold.
            return self.ln_over_distances(t, drift, |c, u| c.ln() - u * u * 0.5 - LN_SQRT_2PI)
                - t.ln() * 2.0
                - self.drift_sd.ln()
                - self.start_range.ln();
        }
        let ln_fa = if same_sign {
            ln_add_exp(ln_first, ln_second)
        } else {
            ln_sub_exp(ln_first.max(ln_second), ln_first.min(ln_second))
        };
        let ln_f = ln_fa - a.ln();
        if !T::CARRIES_DERIVATIVES {
            return T::from(ln_f);
        }
        let over = |ln_x: f64| (ln_x - ln_fa).exp();
        let tv = t.value();
        let gap = self.threshold_gap.value();
        lift(
            ln_f,
            &[
                (over(ln_p2) * (gap + a) / tv, z2),
                (-over(ln_p1) * gap / tv, z1),
                (over(ln_dcdf), drift),
                (
                    if pdf_positive {
                        over(ln_dpdf)
                    } else {
                        -over(ln_dpdf)
                    },
                    self.drift_sd,
                ),
                (-1.0 / a, self.start_range),
            ],
        )
    }

    /// ln S(t) = ln(ts/A) + ln ∫_{z₁}^{z₂} Φ(u) du, with ∂/∂z₂ = Φ(z₂)/∫ and ∂/∂z₁ = −Φ(z₁)/∫.
    fn ln_survival(&self, t: T, drift: T) -> T {
        if t.value() <= 0.0 {
            return T::from(0.0);
        }
        let (z1, z2) = self.bounds(t, drift);
        let (u1, u2) = (z1.value(), z2.value());
        let (tv, s) = (t.value(), self.drift_sd.value());
        let width = self.start_range.value() / (tv * s);
        if width < NARROW {
            // S = (1/A)∫_{b−A}^{b} Φ((c/t − v)/s) dc over the distance c to the threshold
            // (z₁ ≈ z₂ would lose digits in z₂ − z₁).
            let ln_s = self.ln_over_distances(t, drift, |_, u| ln_normal_cdf_of(u))
                - self.start_range.ln();
            return if ln_s.value() > 0.0 {
                T::from(0.0)
            } else {
                ln_s
            };
        }
        // S ≤ 1: rounding can put (ts/A)·∫ a hair above 1 where nothing has arrived yet.
        let ln_integral = ln_phi_integral(u1, u2, width).min(width.ln());
        if !T::CARRIES_DERIVATIVES {
            return T::from(ln_integral - width.ln());
        }
        let scale = (t * self.drift_sd / self.start_range).ln();
        scale
            + lift(
                ln_integral,
                &[
                    ((ln_normal_cdf(u2) - ln_integral).exp(), z2),
                    (-(ln_normal_cdf(u1) - ln_integral).exp(), z1),
                ],
            )
    }

    /// ln P(arrives) = ln Φ(v/s).
    fn ln_arrival_probability(&self, drift: T) -> T {
        ln_normal_cdf_of(drift / self.drift_sd)
    }

    /// ln P(never arrives) = ln Φ(−v/s).
    fn ln_never(&self, drift: T) -> T {
        ln_normal_cdf_of(-drift / self.drift_sd)
    }

    /// An exact draw: start = A·U, rate d = v + s·Z; (b − start)/d when d > 0, else infinity.
    fn sample(&self, drift: f64, rng: &mut dyn Rng) -> f64 {
        let a = self.start_range.value();
        let start = a * rng.random::<f64>();
        let z: f64 = StandardNormal.sample(rng);
        let rate = drift + self.drift_sd.value() * z;
        if rate <= 0.0 {
            f64::INFINITY
        } else {
            (self.threshold_gap.value() + a - start) / rate
        }
    }

    fn leading_edge(&self) -> f64 {
        let s = self.drift_sd.value();
        let gap = self.threshold_gap.value();
        0.5 * gap * gap / (s * s)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::first_passage::ln_normal_cdf;

    /// The closed forms of Brown & Heathcote (2008, eqs. 1–2) evaluated directly: accurate in
    /// double precision at moderate arguments, where no term cancels badly.
    fn direct(t: f64, a: f64, gap: f64, s: f64, v: f64) -> (f64, f64) {
        let b = a + gap;
        let z1 = (b - a - t * v) / (t * s);
        let z2 = (b - t * v) / (t * s);
        let cdf = |z: f64| ln_normal_cdf(z).exp();
        let pdf = |z: f64| (-0.5 * z * z - LN_SQRT_2PI).exp();
        let f = (-v * cdf(z1) + s * pdf(z1) + v * cdf(z2) - s * pdf(z2)) / a;
        let big_f = 1.0 + (b - a - t * v) / a * cdf(z1) - (b - t * v) / a * cdf(z2)
            + t * s / a * pdf(z1)
            - t * s / a * pdf(z2);
        (f.ln(), (1.0 - big_f).ln())
    }

    #[test]
    fn matches_the_closed_forms_at_moderate_arguments() {
        for &(t, a, gap, s, v) in &[
            (0.5, 0.5, 0.5, 1.0, 1.5),
            (1.2, 1.0, 0.3, 0.7, 0.8),
            (0.3, 0.2, 1.0, 1.0, 3.0),
            (2.0, 0.8, 0.5, 1.2, -0.4),
        ] {
            let acc = BallisticAccumulator {
                start_range: a,
                threshold_gap: gap,
                drift_sd: s,
            };
            let (ln_f, ln_s) = direct(t, a, gap, s, v);
            let got_f = acc.ln_density(t, v);
            let got_s = acc.ln_survival(t, v);
            assert!(
                (got_f - ln_f).abs() < 1e-10,
                "density at {t}: {got_f} vs {ln_f}"
            );
            assert!(
                (got_s - ln_s).abs() < 1e-10,
                "survival at {t}: {got_s} vs {ln_s}"
            );
        }
    }
}
