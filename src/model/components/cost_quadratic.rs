//! Quadratic (parabolic) effort discounting, SV = Q − k·E² (Hartmann, Hager, Tobler & Kaiser
//! 2013; Klein-Flügge, Kennerley, Friston & Bestmann 2015).

use super::{CostShape, Entry, weighted_cost};

/// The table entry.
pub const ENTRY: Entry<dyn CostShape> = Entry {
    name: "quadratic",
    parameters: &["effort_weight"],
    defaults: &[],
    equation: "SV = Q − effort_weight·E²  (Hartmann et al. 2013)",
    build: |options, slots| {
        weighted_cost(options, slots, true, |q, effort, k| {
            q - k * (effort * effort)
        })
    },
};
