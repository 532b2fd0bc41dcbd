//! Linear drift mapping, v = drift_intercept + value_scale·(SV_a − SV_b): the drift rate grows
//! with the value difference (Fontanesi, Gluth, Spektor & Rieskamp 2019); the intercept (default
//! 0) is a drift towards option a whatever the values, as in the drift bias of the diffusion
//! model (Ratcliff & McKoon 2008). In a race each accumulator's drift is
//! drift_intercept + value_scale·SV_k (the intercept then acts as an urgency common to all).

use super::{DriftMapping, Entry, Options, Slots, only_options};
use crate::model::dual::{D, Local};

/// The table entry.
pub const ENTRY: Entry<dyn DriftMapping> = Entry {
    name: "linear",
    parameters: &["value_scale", "drift_intercept"],
    defaults: &[("drift_intercept", 0.0)],
    equation: "drift = drift_intercept + value_scale·(SV_a − SV_b); in a race, per accumulator \
               drift_k = drift_intercept + value_scale·SV_k  (Fontanesi et al. 2019)",
    build,
};

struct Linear {
    scale: usize,
    intercept: usize,
}

fn build(options: &Options, slots: Slots<'_>) -> Result<Box<dyn DriftMapping>, String> {
    only_options(options, &[])?;
    Ok(Box::new(Linear {
        scale: slots("value_scale"),
        intercept: slots("drift_intercept"),
    }))
}

/// drift_intercept + value_scale·x with its partial derivatives (shared with the gaze mapping
/// and the likelihood's fused kernel).
#[inline]
pub(crate) fn linear_drift(intercept: usize, scale: usize, x: f64, p: &[f64]) -> Option<Local> {
    Some(Local::new(
        p[intercept] + p[scale] * x,
        p[scale],
        [(intercept, 1.0), (scale, x)],
    ))
}

impl DriftMapping for Linear {
    fn drift(&self, value_difference: D, p: &[D]) -> D {
        p[self.intercept] + p[self.scale] * value_difference
    }

    fn weighted_local(&self, subjective_value: f64, _attribute: f64, _p: &[f64]) -> Option<Local> {
        Some(Local::new(subjective_value, 1.0, [(0, 0.0), (0, 0.0)]))
    }

    fn drift_local(&self, x: f64, p: &[f64]) -> Option<Local> {
        linear_drift(self.intercept, self.scale, x, p)
    }

    fn linear_slots(&self) -> Option<(usize, usize)> {
        Some((self.intercept, self.scale))
    }
}
