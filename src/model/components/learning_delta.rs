//! One learning rate: Q ← Q + α·(r − Q) (Rescorla & Wagner 1972; Sutton & Barto 1998, §2.4).

use super::{Entry, LearningRule, Options, RateRule, Slots, only_options};
use crate::model::dual::{D, Local};

/// The table entry.
pub const ENTRY: Entry<dyn LearningRule> = Entry {
    name: "delta",
    parameters: &["learning_rate"],
    defaults: &[],
    equation: "Q(s) += learning_rate·(r − Q(s))  (Rescorla & Wagner 1972)",
    build,
};

struct Delta {
    rate: usize,
}

fn build(options: &Options, slots: Slots<'_>) -> Result<Box<dyn LearningRule>, String> {
    only_options(options, &[])?;
    Ok(Box::new(Delta {
        rate: slots("learning_rate"),
    }))
}

impl Delta {
    /// The rule as a [`RateRule`] with one rate.
    fn rule(&self) -> RateRule {
        RateRule {
            gain: self.rate,
            loss: self.rate,
            by_outcome: false,
        }
    }
}

impl LearningRule for Delta {
    fn update(&self, q: D, outcome: f64, p: &[D]) -> D {
        q + p[self.rate] * (-q + outcome)
    }

    fn update_local(&self, q: f64, outcome: f64, p: &[f64], out: &mut Local) -> bool {
        *out = self.rule().update_local(q, outcome, p);
        true
    }

    fn rate_rule(&self) -> Option<RateRule> {
        Some(self.rule())
    }
}
