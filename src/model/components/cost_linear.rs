//! Linear effort discounting, SV = Q − k·E (e.g. Hartmann, Hager, Tobler & Kaiser 2013;
//! Klein-Flügge, Kennerley, Friston & Bestmann 2015).

use super::{CostShape, Entry, weighted_cost};

/// The table entry.
pub const ENTRY: Entry<dyn CostShape> = Entry {
    name: "linear",
    parameters: &["effort_weight"],
    defaults: &[],
    equation: "SV = Q − effort_weight·E  (Hartmann et al. 2013)",
    build: |options, slots| weighted_cost(options, slots, true, |q, effort, k| q - k * effort),
};
