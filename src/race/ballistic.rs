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
//! Both integrals have positive integrands. They are evaluated in linear space from the closed
//! forms ([`Closed`]): Φ, φ and G at z₁ and z₂ from the scaled normal tails of `tails.rs` (Cody
//! 1969's rational approximations, relative accuracy 5e-16 for Φ and 1.4e-14 for G(−x)), with
//! the larger Gaussian factor e^{−z²/2} taken out so that nothing underflows, and
//! G(z) = z + G(−z) for z ≥ 0 (so that the large part z₂ − z₁ = A/(ts) is formed without
//! subtraction). Where the closed forms would lose digits they are replaced by Gauss–Legendre
//! quadrature over the distance c to the threshold (Brown & Heathcote's integral over the start
//! point): both quantities when z₂ − z₁ < 1e-3, and the density when its two terms
//! v·(Φ(z₂) − Φ(z₁)) and s·(φ(z₁) − φ(z₂)) have opposite signs and cancel to within 1 % of the
//! larger (so that their difference would amplify rounding more than a hundredfold). Largest
//! error against mpmath 3.8e-12 in ln f and 2.6e-13 in ln S (tests/suite/race_reference.rs).

use super::real::{LN_SQRT_2PI, Real, lift, ln_normal_cdf_of, ln_sum_exp};
use super::tails::{INV_SQRT_2PI, scaled_tails};
use super::{Accumulator, Moment};
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

/// When the closed form's two density terms of opposite sign cancel to less than this fraction
/// (1 %) of the larger, their difference would amplify rounding more than a hundredfold, so
/// the density is integrated.
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

/// The closed forms of one accumulator at bounds z₁ < z₂ (width w = z₂ − z₁, passed exactly)
/// in linear space, from the scaled tails M(x) = Φ(−x)·e^{x²/2} and K(x) = G(−x)·e^{x²/2} of
/// [`scaled_tails`] (Cody 1969; accuracy in `tails.rs`). Every quantity is held divided by a
/// lead factor e_L = e^{−z_L²/2}, the larger of e₁ = e^{−z₁²/2} and e₂ = e^{−z₂²/2} when z₁ and
/// z₂ lie on one side of 0 (e_L = 1 when they straddle it), so that nothing underflows: with
/// ρ_i = e_i/e_L (formed as e^{∓w(z₁ + z₂)/2}, one exponential),
///
/// * ΔΦ = Φ(z₂) − Φ(z₁) = e_L·(ρ₁M(z₁) − ρ₂M(z₂)) for z₁ ≥ 0, e_L·(ρ₂M(−z₂) − ρ₁M(−z₁)) for
///   z₂ ≤ 0, and 1 − e₁M(−z₁) − e₂M(z₂) between;
/// * Δφ = φ(z₁) − φ(z₂) = e_L·(ρ₁ − ρ₂)/√(2π);
/// * w·S = G(z₂) − G(z₁) = w − e₁(K(z₁) − ρ₂K(z₂)) for z₁ ≥ 0 (G(z) = z + G(−z)),
///   e_L·(ρ₂K(−z₂) − ρ₁K(−z₁)) for z₂ ≤ 0, and z₂ + e₂K(z₂) − e₁K(−z₁) between.
///
/// The differences of like-signed terms are those of the closed forms themselves; below
/// w = [`NARROW`] they would lose more than three digits, and there the caller integrates.
#[derive(Clone, Copy)]
struct Closed {
    /// Where z₁ and z₂ lie against 0.
    side: Side,
    /// ln e_L.
    ln_lead: f64,
    /// ρ₁, ρ₂.
    rho: (f64, f64),
    /// M and K at |z₁| and at |z₂|.
    tails: ((f64, f64), (f64, f64)),
    /// z₂.
    z2: f64,
}

/// The bounds of one accumulator at (t, v), with the width w = z₂ − z₁ = A/(ts) and 1/w.
#[derive(Clone, Copy)]
struct Bounds {
    z1: f64,
    z2: f64,
    width: f64,
    inverse_width: f64,
}

/// Beyond z₁ = 9.7 (z₁²/2 > 47) nothing can have arrived to rounding: w·S = w − (G(−z₁) −
/// G(−z₂)) with G(−z₁) < e^{−47}/√(2π) < 1e-21, below 1e-18 of w ≥ 1e-3, so S rounds to 1 and
/// ln S to 0 (its derivatives are as small).
const NOTHING_ARRIVED: f64 = 9.7;

/// A split form (ln e, m) of a logarithm, ln x = ln e + ln m.
type Split = (f64, f64);

/// Where the bounds lie: both at or above 0, both below, or one on each side.
#[derive(Clone, Copy, PartialEq)]
enum Side {
    Above,
    Below,
    Across,
}

impl Closed {
    #[inline]
    fn new(z1: f64, z2: f64, width: f64) -> Self {
        let tails = (scaled_tails(z1.abs()), scaled_tails(z2.abs()));
        if z1 >= 0.0 {
            // e_L = e₁; ρ₂ = e^{−w(z₁ + z₂)/2}.
            Self {
                side: Side::Above,
                ln_lead: -0.5 * z1 * z1,
                rho: (1.0, (-0.5 * width * (z1 + z2)).exp()),
                tails,
                z2,
            }
        } else if z2 < 0.0 {
            // e_L = e₂; ρ₁ = e^{w(z₁ + z₂)/2}.
            Self {
                side: Side::Below,
                ln_lead: -0.5 * z2 * z2,
                rho: ((0.5 * width * (z1 + z2)).exp(), 1.0),
                tails,
                z2,
            }
        } else {
            Self {
                side: Side::Across,
                ln_lead: 0.0,
                rho: ((-0.5 * z1 * z1).exp(), (-0.5 * z2 * z2).exp()),
                tails,
                z2,
            }
        }
    }

    /// ΔΦ/e_L.
    #[inline]
    fn cdf_gap(&self) -> f64 {
        let ((m1, _), (m2, _)) = self.tails;
        let (r1, r2) = self.rho;
        match self.side {
            Side::Above => r1 * m1 - r2 * m2,
            Side::Below => r2 * m2 - r1 * m1,
            Side::Across => 1.0 - r1 * m1 - r2 * m2,
        }
    }

    /// (ln e_L, B) with A·f = e_L·B, B = v·ΔΦ/e_L + s·Δφ/e_L; None when B is not positive or
    /// its two terms cancel to within [`CANCELLING`] (so that rounding would be amplified more
    /// than a hundredfold).
    #[inline]
    fn density(&self, v: f64, s: f64) -> Option<(f64, f64)> {
        let first = v * self.cdf_gap();
        let second = s * (self.rho.0 - self.rho.1) * INV_SQRT_2PI;
        let bracket = first + second;
        let cancels =
            (first < 0.0) != (second < 0.0) && bracket < CANCELLING * first.abs().max(second.abs());
        (bracket > 0.0 && !cancels).then_some((self.ln_lead, bracket))
    }

    /// (ln e, w·S/e, e_L): w·S with e = e_L taken out for z₂ < 0 (where S ≤ ½), else e = 1.
    #[inline]
    fn ws(&self, width: f64) -> (f64, f64, f64) {
        let ((_, k1), (_, k2)) = self.tails;
        let (r1, r2) = self.rho;
        match self.side {
            Side::Above => {
                let lead = self.ln_lead.exp();
                (0.0, width - lead * (k1 - r2 * k2), lead)
            }
            Side::Below => (self.ln_lead, k2 - r1 * k1, 1.0),
            Side::Across => (0.0, self.z2 + r2 * k2 - r1 * k1, 1.0),
        }
    }

    /// (ln e, m) with S = e·m: (ln e_L, w·S/(e_L·w)) for z₂ < 0, else (0, S) with S capped at 1
    /// (rounding can put it a hair above where nothing has arrived yet); None when rounding
    /// left no positive w·S.
    #[inline]
    fn survival(&self, width: f64, inverse_width: f64) -> Option<(f64, f64)> {
        let (ln_e, ws, _) = self.ws(width);
        (ws > 0.0 && ws.is_finite()).then(|| (ln_e, (ws * inverse_width).min(1.0)))
    }

    /// (Φ(z₁), Φ(z₂))/(w·S), that is −∂ln S/∂z₁ and ∂ln S/∂z₂ (values of [`Closed::survival`]'s
    /// domain only).
    fn cdf_over_ws(&self, width: f64) -> (f64, f64) {
        let ((m1, _), (m2, _)) = self.tails;
        let (r1, r2) = self.rho;
        let (_, ws, lead) = self.ws(width);
        let (cdf1, cdf2) = match self.side {
            Side::Above => (1.0 - lead * m1, 1.0 - lead * r2 * m2),
            Side::Below => (r1 * m1, m2),
            Side::Across => (r1 * m1, 1.0 - r2 * m2),
        };
        (cdf1 / ws, cdf2 / ws)
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

    /// The bounds (z₁, z₂) at decision time t and mean rate v with the width w = A/(ts) and
    /// 1/w; None below w = [`NARROW`] (where the caller integrates).
    #[inline]
    fn bounds(&self, at: &Moment, v: f64) -> Option<Bounds> {
        let (gap, a, s) = (
            self.threshold_gap.value(),
            self.start_range.value(),
            self.drift_sd.value(),
        );
        // One division for 1/s and 1/A.
        let q = 1.0 / (s * a);
        let inverse_s = a * q;
        let width = a * at.inverse * inverse_s;
        (width >= NARROW).then_some(Bounds {
            z1: (gap * at.inverse - v) * inverse_s,
            z2: ((gap + a) * at.inverse - v) * inverse_s,
            width,
            inverse_width: at.t * s * s * q,
        })
    }

    /// The closed forms at decision time t and mean rate v, with the bounds; None below
    /// w = [`NARROW`].
    #[inline]
    fn closed(&self, at: &Moment, v: f64) -> Option<(Closed, Bounds)> {
        self.bounds(at, v)
            .map(|b| (Closed::new(b.z1, b.z2, b.width), b))
    }

    /// The survival's split form (ln e, m) at values with the closed forms behind it (None
    /// where nothing can have arrived: S = 1 to rounding), or None below w = [`NARROW`] or
    /// where rounding left no positive w·S.
    #[inline]
    fn split_survival(&self, at: &Moment, v: f64) -> Option<(Split, Option<(Closed, Bounds)>)> {
        let b = self.bounds(at, v)?;
        if b.z1 > NOTHING_ARRIVED {
            return Some(((0.0, 1.0), None));
        }
        let closed = Closed::new(b.z1, b.z2, b.width);
        let split = closed.survival(b.width, b.inverse_width)?;
        Some((split, Some((closed, b))))
    }

    /// A value f0 of ln f or ln S with its derivatives carried to t, v and the parameters: the
    /// partials `d_z` with respect to z₁ and z₂ by the chain rule through
    /// z₁ = (g/t − v)/s, z₂ = ((g + A)/t − v)/s (g the threshold gap), whose derivatives are
    /// ∂z/∂t = −c/(t²s) (c = g or g + A), ∂z/∂v = −1/s, ∂z/∂s = −z/s,
    /// ∂z₁/∂g = ∂z₂/∂g = ∂z₂/∂A = 1/(ts), plus the direct partials `direct` with respect to
    /// (t, v, s, A). One combination of the gradients instead of dual arithmetic for z.
    fn lift_through_bounds(
        &self,
        f0: f64,
        (t, drift): (T, T),
        (d_z1, d_z2): (f64, f64),
        direct: [f64; 4],
    ) -> T {
        let (tv, v) = (t.value(), drift.value());
        let (g, a, s) = (
            self.threshold_gap.value(),
            self.start_range.value(),
            self.drift_sd.value(),
        );
        let its = 1.0 / (tv * s);
        let (z1, z2) = ((g / tv - v) / s, ((g + a) / tv - v) / s);
        lift(
            f0,
            &[
                (direct[0] - (d_z1 * g + d_z2 * (g + a)) * its / tv, t),
                (direct[1] - (d_z1 + d_z2) / s, drift),
                (direct[2] - (d_z1 * z1 + d_z2 * z2) / s, self.drift_sd),
                (direct[3] + d_z2 * its, self.start_range),
                ((d_z1 + d_z2) * its, self.threshold_gap),
            ],
        )
    }
}

impl<T: Real> Accumulator<T> for BallisticAccumulator<T> {
    /// ln f(t), f = (1/A)[v(Φ(z₂) − Φ(z₁)) + s(φ(z₁) − φ(z₂))], with ∂f/∂z₂ = φ(z₂)(v + sz₂)/A,
    /// ∂f/∂z₁ = −φ(z₁)(v + sz₁)/A, ∂f/∂v = (Φ(z₂) − Φ(z₁))/A, ∂f/∂s = (φ(z₁) − φ(z₂))/A,
    /// ∂f/∂A = −f/A at fixed z (Brown & Heathcote 2008); in linear space (`Closed`) unless the
    /// bounds are too close or the terms cancel, then by quadrature over the distance to the
    /// threshold.
    fn ln_density(&self, t: T, drift: T) -> T {
        let (tv, v) = (t.value(), drift.value());
        if tv <= 0.0 {
            return T::from(f64::NEG_INFINITY);
        }
        let (s, a) = (self.drift_sd.value(), self.start_range.value());
        let parts = self
            .closed(&Moment::new(tv), v)
            .and_then(|(closed, _)| closed.density(v, s).map(|d| (closed, d)));
        let Some((closed, (ln_lead, bracket))) = parts else {
            // z₁ ≈ z₂, or the two terms cancel: f = (1/(At²s))∫_{b−A}^{b} c·φ((c/t − v)/s) dc,
            // a positive integrand over the distance c to the threshold.
            return self.ln_over_distances(t, drift, |c, u| c.ln() - u * u * 0.5 - LN_SQRT_2PI)
                - t.ln() * 2.0
                - self.drift_sd.ln()
                - self.start_range.ln();
        };
        let ln_f = ln_lead + (bracket / a).ln();
        if !T::CARRIES_DERIVATIVES {
            return T::from(ln_f);
        }
        let gap = self.threshold_gap.value();
        let (rho1, rho2) = closed.rho;
        let pdf = INV_SQRT_2PI / bracket;
        self.lift_through_bounds(
            ln_f,
            (t, drift),
            (-rho1 * pdf * gap / tv, rho2 * pdf * (gap + a) / tv),
            [
                0.0,
                closed.cdf_gap() / bracket,
                (rho1 - rho2) * pdf,
                -1.0 / a,
            ],
        )
    }

    /// ln S(t) = ln(ts/A) + ln ∫_{z₁}^{z₂} Φ(u) du, with ∂/∂z₂ = Φ(z₂)/∫ and ∂/∂z₁ = −Φ(z₁)/∫;
    /// in linear space (`Closed`) unless the bounds are too close, then by quadrature over the
    /// distance to the threshold.
    fn ln_survival(&self, t: T, drift: T) -> T {
        let (tv, v) = (t.value(), drift.value());
        if tv <= 0.0 {
            return T::from(0.0);
        }
        let Some(((ln_lead, ratio), closed)) = self.split_survival(&Moment::new(tv), v) else {
            // S = (1/A)∫_{b−A}^{b} Φ((c/t − v)/s) dc over the distance c to the threshold
            // (z₁ ≈ z₂ would lose digits in z₂ − z₁).
            let ln_s = self.ln_over_distances(t, drift, |_, u| ln_normal_cdf_of(u))
                - self.start_range.ln();
            return if ln_s.value() > 0.0 {
                T::from(0.0)
            } else {
                ln_s
            };
        };
        let ln_s = ln_lead + ratio.ln();
        let Some((closed, bounds)) = closed.filter(|_| T::CARRIES_DERIVATIVES) else {
            return T::from(ln_s);
        };
        // ln S = ln(ts/A) + ln ∫: the scale's partials directly, the integral's through z₁, z₂.
        let (cdf1, cdf2) = closed.cdf_over_ws(bounds.width);
        self.lift_through_bounds(
            ln_s,
            (t, drift),
            (-cdf1, cdf2),
            [
                1.0 / tv,
                0.0,
                1.0 / self.drift_sd.value(),
                -1.0 / self.start_range.value(),
            ],
        )
    }

    #[inline]
    fn split_ln_density(&self, at: &Moment, drift: f64) -> Option<(f64, f64)> {
        let (closed, _) = self.closed(at, drift)?;
        let (ln_lead, bracket) = closed.density(drift, self.drift_sd.value())?;
        Some((ln_lead, bracket / self.start_range.value()))
    }

    #[inline]
    fn split_ln_survival(&self, at: &Moment, drift: f64) -> Option<(f64, f64)> {
        self.split_survival(at, drift).map(|(split, _)| split)
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

    #[test]
    fn derivatives_match_central_differences() {
        // ∂/∂(t, v, s, A, gap) of ln f and ln S through the dual numbers against central
        // differences of the values (common practice), on each side of z = 0 and across it.
        use num_dual::DualSVec64;
        type D5 = DualSVec64<5>;
        for &(t, v, s, a, gap) in &[
            (0.4, 1.2, 1.0, 0.6, 0.5),
            (2.5, 1.5, 0.8, 0.5, 0.3),
            (0.8, 0.9, 1.1, 0.7, 0.4),
            (0.05, 2.0, 1.0, 0.8, 0.6),
        ] {
            let x = [t, v, s, a, gap];
            let dual = |k: usize| D5::from_re(x[k]).derivative(k);
            let acc = BallisticAccumulator {
                start_range: dual(3),
                threshold_gap: dual(4),
                drift_sd: dual(2),
            };
            let value = |y: [f64; 5], density: bool| {
                let acc = BallisticAccumulator {
                    start_range: y[3],
                    threshold_gap: y[4],
                    drift_sd: y[2],
                };
                if density {
                    acc.ln_density(y[0], y[1])
                } else {
                    acc.ln_survival(y[0], y[1])
                }
            };
            for density in [true, false] {
                let got = if density {
                    acc.ln_density(dual(0), dual(1))
                } else {
                    acc.ln_survival(dual(0), dual(1))
                };
                let grad = got.eps.unwrap_generic(nalgebra::Const::<5>, nalgebra::U1);
                for k in 0..5 {
                    let h = 1e-6 * x[k];
                    let (mut up, mut down) = (x, x);
                    up[k] += h;
                    down[k] -= h;
                    let numeric = (value(up, density) - value(down, density)) / (2.0 * h);
                    assert!(
                        (grad[k] - numeric).abs() < 1e-6 * numeric.abs().max(1.0),
                        "{x:?} density {density} ∂{k}: {} vs {numeric}",
                        grad[k]
                    );
                }
            }
        }
    }
}
