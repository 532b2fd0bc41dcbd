//! Exponential effort discounting, SV = Q·exp(−k·E) (Hartmann, Hager, Tobler & Kaiser 2013;
//! Klein-Flügge, Kennerley, Friston & Bestmann 2015).

use super::{CostShape, Entry, Formula, weighted_cost};
use num_dual::DualNum;

/// The table entry.
pub const ENTRY: Entry<dyn CostShape> = Entry {
    name: "exponential",
    parameters: &["effort_weight"],
    defaults: &[],
    equation: "SV = Q·exp(−effort_weight·E)  (Klein-Flügge et al. 2015)",
    build: |options, slots| weighted_cost::<Exponential>(options, slots, true),
};

/// The formula.
struct Exponential;

impl Formula for Exponential {
    fn formula<N: DualNum<Primitive = f64> + Copy>(q: N, effort: f64, k: N) -> N {
        q * (-(k * effort)).exp()
    }
}
