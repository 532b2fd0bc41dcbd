//! Quadratic (parabolic) effort discounting, SV = Q − k·E² (Hartmann, Hager, Tobler & Kaiser
//! 2013; Klein-Flügge, Kennerley, Friston & Bestmann 2015).

use super::{CostShape, Entry, Formula, weighted_cost};
use num_dual::DualNum;

/// The table entry.
pub const ENTRY: Entry<dyn CostShape> = Entry {
    name: "quadratic",
    parameters: &["effort_weight"],
    defaults: &[],
    equation: "SV = Q − effort_weight·E²  (Hartmann et al. 2013)",
    build: |options, slots| weighted_cost::<Quadratic>(options, slots, true),
};

/// The formula.
struct Quadratic;

impl Formula for Quadratic {
    fn formula<N: DualNum<Primitive = f64> + Copy>(q: N, effort: f64, k: N) -> N {
        q - k * (effort * effort)
    }
}
