//! Gaze-weighted linear drift mapping. Each option's subjective value is weighed by the share
//! of the trial's looking time spent on it: the value of an option counts fully while it is
//! looked at and discounted by θ (`gaze_discount`, from 0 to 1) while it is not,
//! A_k = SV_k·(g_k + θ·(1 − g_k)) (the fixation-share form of Thomas, Molter, Krajbich,
//! Heekeren & Mohr 2019, of the attentional drift of Krajbich, Armel & Rangel 2010). The drift
//! is linear in those weighted values: v = drift_intercept + value_scale·(A_a − A_b) for the
//! two-bound diffusion, v_k = drift_intercept + value_scale·A_k for each accumulator of a race.
//!
//! For two options with g_b = 1 − g_a this is the fixation-time average of the momentary drift
//! of Krajbich et al. (2010), value_scale·(SV_a − θ·SV_b) while a is looked at and
//! value_scale·(θ·SV_a − SV_b) while b is. With θ = 1 looking does not matter and the mapping
//! is the plain linear one. Gaze shares come from the columns `<column>_a`, `<column>_b`, …
//! (option `column`, default `gaze`), each from 0 to 1.

use super::{DriftMapping, Entry, Options, Slots, only_options};
use crate::model::dual::{D, Local};

/// The table entry.
pub const ENTRY: Entry<dyn DriftMapping> = Entry {
    name: "gaze-weighted",
    parameters: &["value_scale", "gaze_discount", "drift_intercept"],
    defaults: &[("drift_intercept", 0.0)],
    equation: "A_k = SV_k·(g_k + gaze_discount·(1 − g_k)); drift = drift_intercept + value_scale·(A_a − A_b) \
               (per accumulator: + value_scale·A_k)  (Krajbich et al. 2010; Thomas et al. 2019)",
    build,
};

struct GazeWeighted {
    scale: usize,
    discount: usize,
    intercept: usize,
    column: String,
}

fn build(options: &Options, slots: Slots<'_>) -> Result<Box<dyn DriftMapping>, String> {
    only_options(options, &["column"])?;
    let column = match options.get("column") {
        None => "gaze".to_string(),
        Some(toml::Value::String(s)) if !s.trim().is_empty() => s.trim().to_string(),
        Some(_) => {
            return Err(
                "option 'column' expects the prefix of the gaze-share columns, for \
                        example \"gaze\" for gaze_a, gaze_b, …"
                    .into(),
            );
        }
    };
    Ok(Box::new(GazeWeighted {
        scale: slots("value_scale"),
        discount: slots("gaze_discount"),
        intercept: slots("drift_intercept"),
        column,
    }))
}

impl DriftMapping for GazeWeighted {
    fn attribute(&self) -> Option<&str> {
        Some(&self.column)
    }

    fn attribute_range(&self) -> (f64, f64) {
        (0.0, 1.0)
    }

    fn weighted(&self, subjective_value: D, gaze_share: f64, p: &[D]) -> D {
        subjective_value * (p[self.discount] * (1.0 - gaze_share) + gaze_share)
    }

    fn drift(&self, x: D, p: &[D]) -> D {
        p[self.intercept] + p[self.scale] * x
    }

    fn weighted_local(&self, subjective_value: f64, gaze_share: f64, p: &[f64]) -> Option<Local> {
        let weight = p[self.discount] * (1.0 - gaze_share) + gaze_share;
        Some(Local::new(
            subjective_value * weight,
            weight,
            [
                (self.discount, subjective_value * (1.0 - gaze_share)),
                (0, 0.0),
            ],
        ))
    }

    fn drift_local(&self, x: f64, p: &[f64]) -> Option<Local> {
        super::drift_linear::linear_drift(self.intercept, self.scale, x, p)
    }
}
