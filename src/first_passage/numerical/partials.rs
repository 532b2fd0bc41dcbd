//! Numbers the engine can take apart into a value and partial derivatives and put back together,
//! so that its grid work runs on plain numbers (see [`super::march`]).

use nalgebra::SVector;
use num_dual::{Derivative, DualNum, DualSVec64};

/// A number type of the engine: plain `f64`, or a dual number carrying partial derivatives in a
/// fixed set of directions.
pub trait Partials: DualNum<Primitive = f64> + Copy {
    /// The partial derivative in `direction` (0 where the number carries none).
    fn partial(&self, direction: usize) -> f64;

    /// The number with value `value` and partial derivative `partials[k]` in direction
    /// `directions[k]` (0 in every other direction).
    fn assemble(value: f64, directions: &[usize], partials: &[f64]) -> Self;

    /// How many directions the type can carry.
    fn width() -> usize;
}

impl Partials for f64 {
    fn partial(&self, _direction: usize) -> f64 {
        0.0
    }

    fn assemble(value: f64, _directions: &[usize], _partials: &[f64]) -> f64 {
        value
    }

    fn width() -> usize {
        0
    }
}

/// At most 8 directions: the engine's march is specialised for up to 8.
impl Partials for DualSVec64<8> {
    fn partial(&self, direction: usize) -> f64 {
        self.eps.0.as_ref().map_or(0.0, |e| e[direction])
    }

    fn assemble(value: f64, directions: &[usize], partials: &[f64]) -> Self {
        let mut eps = SVector::<f64, 8>::zeros();
        for (&d, &x) in directions.iter().zip(partials) {
            eps[d] = x;
        }
        DualSVec64::new(value, Derivative::some(eps))
    }

    fn width() -> usize {
        8
    }
}

/// The directions in which any of `numbers` carries a nonzero partial derivative, in order.
pub(super) fn carried<N: Partials>(numbers: &[N]) -> Vec<usize> {
    (0..N::width())
        .filter(|&d| numbers.iter().any(|x| x.partial(d) != 0.0))
        .collect()
}
