//! Hyperbolic effort discounting, SV = Q / (1 + k·E) (Prévost, Pessiglione, Météreau,
//! Cléry-Melin & Dreher 2010; Hartmann et al. 2013).

use super::{CostShape, Entry, Formula, weighted_cost};
use num_dual::DualNum;

/// The table entry.
pub const ENTRY: Entry<dyn CostShape> = Entry {
    name: "hyperbolic",
    parameters: &["effort_weight"],
    defaults: &[],
    equation: "SV = Q / (1 + effort_weight·E)  (Prévost et al. 2010)",
    build: |options, slots| weighted_cost::<Hyperbolic>(options, slots, true),
};

/// The formula.
struct Hyperbolic;

impl Formula for Hyperbolic {
    fn formula<N: DualNum<Primitive = f64> + Copy>(q: N, effort: f64, k: N) -> N {
        q / (k * effort + 1.0)
    }
}
