//! Separate learning rates for gains and losses (Niv, Edlund, Dayan & O'Doherty 2012):
//! d = r − Q(s), Q(s) ← Q(s) + α·d with α = gain_rate when the prediction error is positive
//! (default) or, with `split = "outcome"`, when the outcome is positive; loss_rate otherwise.

use super::{Entry, LearningRule, Options, RateRule, Slots, only_options};
use crate::model::dual::{D, Local};

/// The table entry.
pub const ENTRY: Entry<dyn LearningRule> = Entry {
    name: "gain-loss",
    parameters: &["gain_rate", "loss_rate"],
    defaults: &[],
    equation: "d = r − Q(s); Q(s) += (gain_rate if d > 0 else loss_rate)·d; split = \"outcome\" \
               uses the sign of r instead (Niv et al. 2012)",
    build,
};

#[derive(Clone, Copy, PartialEq)]
enum Split {
    PredictionError,
    Outcome,
}

struct GainLoss {
    gain: usize,
    loss: usize,
    split: Split,
}

fn build(options: &Options, slots: Slots<'_>) -> Result<Box<dyn LearningRule>, String> {
    only_options(options, &["split"])?;
    let split = match options.get("split").map(|v| v.as_str()) {
        None => Split::PredictionError,
        Some(Some("prediction-error")) => Split::PredictionError,
        Some(Some("outcome")) => Split::Outcome,
        Some(_) => return Err("option 'split' must be \"prediction-error\" or \"outcome\"".into()),
    };
    Ok(Box::new(GainLoss {
        gain: slots("gain_rate"),
        loss: slots("loss_rate"),
        split,
    }))
}

impl GainLoss {
    /// The rule as a [`RateRule`].
    fn rule(&self) -> RateRule {
        RateRule {
            gain: self.gain,
            loss: self.loss,
            by_outcome: self.split == Split::Outcome,
        }
    }

    /// The slot of the rate that applies to prediction error `error` of outcome `outcome`.
    fn rate_slot(&self, error: f64, outcome: f64) -> usize {
        let positive = match self.split {
            Split::PredictionError => error > 0.0,
            Split::Outcome => outcome > 0.0,
        };
        if positive { self.gain } else { self.loss }
    }
}

impl LearningRule for GainLoss {
    fn update(&self, q: D, outcome: f64, p: &[D]) -> D {
        let error = -q + outcome;
        let rate = p[self.rate_slot(error.re, outcome)];
        q + rate * error
    }

    fn update_local(&self, q: f64, outcome: f64, p: &[f64], out: &mut Local) -> bool {
        *out = self.rule().update_local(q, outcome, p);
        true
    }

    fn rate_rule(&self) -> Option<RateRule> {
        Some(self.rule())
    }
}
