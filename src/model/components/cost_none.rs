//! No effort cost: SV = Q.

use super::{CostShape, Entry, weighted_cost};
use num_dual::DualNum;

/// The table entry.
pub const ENTRY: Entry<dyn CostShape> = Entry {
    name: "none",
    parameters: &[],
    defaults: &[],
    equation: "SV = Q",
    build: |options, slots| weighted_cost(options, slots, false, formula, formula),
};

/// The formula, on any dual number.
fn formula<N: DualNum<Primitive = f64> + Copy>(q: N, _effort: f64, _k: N) -> N {
    q
}
