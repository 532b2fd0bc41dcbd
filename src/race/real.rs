//! Scalars the race engine computes with: plain `f64` for values, and forward-mode dual numbers
//! (`num_dual::DualSVec64`) that carry the gradient with respect to a model's parameters through
//! the same formulas (exact derivatives, no finite differences).

use super::tails::{INV_SQRT_2PI, scaled_tails};
use num_dual::{DualNum, DualSVec64};

/// ½·ln(2π).
pub(crate) const LN_SQRT_2PI: f64 = 0.918_938_533_204_672_8;

/// A real number with optional forward derivatives.
pub trait Real: DualNum<Primitive = f64> + Copy + Send + Sync {
    /// False for plain values: partial derivatives need not be computed.
    const CARRIES_DERIVATIVES: bool;
    /// The value without derivatives.
    fn value(&self) -> f64;
}

impl Real for f64 {
    const CARRIES_DERIVATIVES: bool = false;
    #[inline]
    fn value(&self) -> f64 {
        *self
    }
}

impl<const N: usize> Real for DualSVec64<N> {
    const CARRIES_DERIVATIVES: bool = true;
    #[inline]
    fn value(&self) -> f64 {
        self.re
    }
}

/// A function value f0 with its partial derivatives ∂f/∂x_i at the values of the x_i: the
/// result carries Σ_i ∂f/∂x_i·∇x_i (the chain rule), and its value is exactly f0.
#[inline]
pub(crate) fn lift<T: Real>(f0: f64, partials: &[(f64, T)]) -> T {
    if !f0.is_finite() {
        // A zero or infinite result has no gradient to carry (and 0·∞ must not appear).
        return T::from(f0);
    }
    partials
        .iter()
        .fold(T::from(f0), |acc, &(d, x)| acc + (x - x.value()) * d)
}

/// ln Φ(z) with derivative φ(z)/Φ(z), from the scaled tail M(x) = Φ(−x)·e^{x²/2} of
/// [`scaled_tails`] (Cody 1969's rational approximations; relative accuracy 5e-16, see
/// `tails.rs`): for z ≤ 0, ln Φ(z) = −z²/2 + ln M(−z) and φ(z)/Φ(z) = 1/(√(2π)·M(−z)); for
/// z > 0, ln Φ(z) = ln(1 − e^{−z²/2}·M(z)) (by ln_1p) and φ(z)/Φ(z) = e^{−z²/2}/(√(2π)·Φ(z)).
#[inline]
pub(crate) fn ln_normal_cdf_of<T: Real>(z: T) -> T {
    let zv = z.value();
    let (ln_cdf, ratio) = if zv <= 0.0 {
        let m = scaled_tails(-zv).0;
        (-0.5 * zv * zv + m.ln(), INV_SQRT_2PI / m)
    } else {
        let gaussian = (-0.5 * zv * zv).exp();
        let upper = gaussian * scaled_tails(zv).0;
        ((-upper).ln_1p(), gaussian * INV_SQRT_2PI / (1.0 - upper))
    };
    if !T::CARRIES_DERIVATIVES {
        return T::from(ln_cdf);
    }
    lift(ln_cdf, &[(ratio, z)])
}

/// ln(e^x + e^y), stable for any x, y (−∞ allowed).
#[inline]
pub(crate) fn ln_add_exp<T: Real>(x: T, y: T) -> T {
    let (hi, lo) = if x.value() >= y.value() {
        (x, y)
    } else {
        (y, x)
    };
    if hi.value() == f64::NEG_INFINITY {
        return hi;
    }
    hi + (lo - hi).exp().ln_1p()
}

/// ln(1 − e^x) for x ≤ 0 (Mächler 2012: expm1 near 0, log1p further out); −∞ at x = 0.
#[inline]
pub(crate) fn ln_1m_exp<T: Real>(x: T) -> T {
    if x.value() > -std::f64::consts::LN_2 {
        (-x.exp_m1()).ln()
    } else {
        (-x.exp()).ln_1p()
    }
}

/// ln(e^x − e^y) for y ≤ x.
#[inline]
pub(crate) fn ln_sub_exp<T: Real>(x: T, y: T) -> T {
    if y.value() == f64::NEG_INFINITY {
        return x;
    }
    x + ln_1m_exp(y - x)
}

/// ln Σ e^{x_i}, with the largest term factored out; −∞ for an empty or all −∞ list.
pub(crate) fn ln_sum_exp<T: Real>(xs: &[T]) -> T {
    let top = xs
        .iter()
        .map(|x| x.value())
        .fold(f64::NEG_INFINITY, f64::max);
    if top == f64::NEG_INFINITY {
        return T::from(f64::NEG_INFINITY);
    }
    let sum = xs
        .iter()
        .fold(T::from(0.0), |acc, &x| acc + (x - top).exp());
    sum.ln() + top
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn log_helpers_match_direct_evaluation() {
        // ln(e^1 + e^2), ln(1 − e^−0.1), ln(e^2 − e^1): direct evaluation in double precision
        // is accurate at these moderate arguments (common practice).
        assert!((ln_add_exp(1.0, 2.0) - (1f64.exp() + 2f64.exp()).ln()).abs() < 1e-15);
        assert!((ln_1m_exp(-0.1) - (1.0 - (-0.1f64).exp()).ln()).abs() < 1e-14);
        assert!((ln_1m_exp(-3.0) - (1.0 - (-3f64).exp()).ln()).abs() < 1e-15);
        assert!((ln_sub_exp(2.0, 1.0) - (2f64.exp() - 1f64.exp()).ln()).abs() < 1e-15);
        assert!(
            (ln_sum_exp(&[0.0, 1.0, 2.0]) - (1.0 + 1f64.exp() + 2f64.exp()).ln()).abs() < 1e-15
        );
    }

    #[test]
    fn lifted_derivative_is_the_chain_rule() {
        // d/dx ln Φ(2x) at x = 0.3 is 2φ(0.6)/Φ(0.6); Φ(0.6) = 0.7257468822499265 and
        // φ(0.6) = 0.33322460289179967 (standard normal tables, from memory to 16 digits).
        let x = DualSVec64::<1>::from_re(0.3).derivative(0);
        let y = ln_normal_cdf_of(x * 2.0);
        let expected = 2.0 * 0.333_224_602_891_799_67 / 0.725_746_882_249_926_5;
        let d = y.eps.unwrap_generic(nalgebra::Const::<1>, nalgebra::U1)[0];
        assert!((d - expected).abs() < 1e-14, "{d} vs {expected}");
        assert!((y.re - 0.725_746_882_249_926_5f64.ln()).abs() < 1e-15);
    }
}
