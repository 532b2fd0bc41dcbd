//! No learning: values are the offered magnitudes `reward_a`, `reward_b` shown on each trial.

use super::{Entry, LearningRule, Options, Slots, only_options};
use crate::model::dual::D;

/// The table entry.
pub const ENTRY: Entry<dyn LearningRule> = Entry {
    name: "none",
    parameters: &[],
    defaults: &[],
    equation: "Q = offered magnitude (reward_a, reward_b); no learning",
    build,
};

struct Offered;

fn build(options: &Options, _slots: Slots<'_>) -> Result<Box<dyn LearningRule>, String> {
    only_options(options, &[])?;
    Ok(Box::new(Offered))
}

impl LearningRule for Offered {
    fn update(&self, q: D, _outcome: f64, _p: &[D]) -> D {
        q
    }

    fn learns(&self) -> bool {
        false
    }
}
