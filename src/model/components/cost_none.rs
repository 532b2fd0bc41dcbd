//! No effort cost: SV = Q.

use super::{CostShape, Entry, weighted_cost};

/// The table entry.
pub const ENTRY: Entry<dyn CostShape> = Entry {
    name: "none",
    parameters: &[],
    defaults: &[],
    equation: "SV = Q",
    build: |options, slots| weighted_cost(options, slots, false, |q, _effort, _k| q),
};
