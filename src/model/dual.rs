//! Forward-mode dual numbers carrying the gradient with respect to a model's free parameters.
//!
//! The learning recursion, cost shapes and drift mappings are written once on [`D`]; every value
//! they produce carries its exact partial derivatives with respect to the unconstrained free
//! parameters (forward sensitivities), so the likelihood gradient needs no finite differences.

use nalgebra::{Const, SVector, U1};
use num_dual::{Derivative, DualSVec64};

/// Largest number of free parameters a model may have.
pub const MAX_FREE: usize = 12;

/// A value with its gradient with respect to the free parameters.
pub type D = DualSVec64<MAX_FREE>;

/// A constant (zero gradient).
#[inline]
pub fn constant(x: f64) -> D {
    D::from_re(x)
}

/// The gradient part of `x` as a plain vector (zeros where it has none).
#[inline]
pub fn gradient(x: &D) -> SVector<f64, MAX_FREE> {
    x.eps.unwrap_generic(Const::<MAX_FREE>, U1)
}

/// A dual number from a value and a linear combination of the gradients of `parts`:
/// value `re`, gradient Σ weightᵢ·∇partᵢ (the chain rule for a function whose partial
/// derivatives are known, such as the first-passage log-density).
#[inline]
pub fn chain(re: f64, parts: &[(f64, &D)]) -> D {
    let mut eps: Derivative<f64, Const<MAX_FREE>, U1> = Derivative::none();
    for &(weight, part) in parts {
        if weight != 0.0 {
            eps += part.eps * weight;
        }
    }
    D::new(re, eps)
}

/// A component's output as a plain number with its partial derivatives with respect to its
/// input and to the (at most two) model parameters it reads: what the likelihood's adjoint pass
/// needs of a learning rule, cost shape or drift mapping (see `likelihood::adjoint`). Unused
/// parameter entries have weight zero.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Local {
    /// The output.
    pub value: f64,
    /// ∂output/∂input (the value, subjective value or value difference it transforms).
    pub d_input: f64,
    /// (slot, ∂output/∂p[slot]) of the parameters it reads.
    pub d_parameters: [(usize, f64); 2],
}

impl Local {
    /// An output with its slope in the input and in up to two parameters.
    #[inline]
    pub fn new(value: f64, d_input: f64, d_parameters: [(usize, f64); 2]) -> Local {
        Local {
            value,
            d_input,
            d_parameters,
        }
    }
}
