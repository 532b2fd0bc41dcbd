//! Hyperbolic effort discounting, SV = Q / (1 + k·E) (Prévost, Pessiglione, Météreau,
//! Cléry-Melin & Dreher 2010; Hartmann et al. 2013).

use super::{CostShape, Entry, weighted_cost};

/// The table entry.
pub const ENTRY: Entry<dyn CostShape> = Entry {
    name: "hyperbolic",
    parameters: &["effort_weight"],
    defaults: &[],
    equation: "SV = Q / (1 + effort_weight·E)  (Prévost et al. 2010)",
    build: |options, slots| {
        weighted_cost(options, slots, true, |q, effort, k| q / (k * effort + 1.0))
    },
};
