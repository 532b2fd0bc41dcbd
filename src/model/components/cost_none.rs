//! No effort cost: SV = Q.

use super::{CostShape, Entry, Formula, weighted_cost};
use num_dual::DualNum;

/// The table entry.
pub const ENTRY: Entry<dyn CostShape> = Entry {
    name: "none",
    parameters: &[],
    defaults: &[],
    equation: "SV = Q",
    build: |options, slots| weighted_cost::<NoCost>(options, slots, false),
};

/// The formula.
struct NoCost;

impl Formula for NoCost {
    fn formula<N: DualNum<Primitive = f64> + Copy>(q: N, _effort: f64, _k: N) -> N {
        q
    }
}
