//! Linear effort discounting, SV = Q − k·E (e.g. Hartmann, Hager, Tobler & Kaiser 2013;
//! Klein-Flügge, Kennerley, Friston & Bestmann 2015).

use super::{CostShape, Entry, Formula, weighted_cost};
use num_dual::DualNum;

/// The table entry.
pub const ENTRY: Entry<dyn CostShape> = Entry {
    name: "linear",
    parameters: &["effort_weight"],
    defaults: &[],
    equation: "SV = Q − effort_weight·E  (Hartmann et al. 2013)",
    build: |options, slots| weighted_cost::<Linear>(options, slots, true),
};

/// The formula.
struct Linear;

impl Formula for Linear {
    const LINEAR: bool = true;

    fn formula<N: DualNum<Primitive = f64> + Copy>(q: N, effort: f64, k: N) -> N {
        q - k * effort
    }
}

/// SV = Q − k·E on plain numbers: the formula of [`Linear`], for the likelihood's fused kernel.
#[inline]
pub(crate) fn linear_cost(q: f64, effort: f64, k: f64) -> f64 {
    Linear::formula(q, effort, k)
}
