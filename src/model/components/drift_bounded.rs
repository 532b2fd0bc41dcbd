//! Bounded (sigmoid) drift mapping, v = drift_max·(2/(1 + exp(−value_scale·ΔSV)) − 1)
//! (Fontanesi, Gluth, Spektor & Rieskamp 2019): linear for small differences, saturating at
//! ±drift_max for large ones.

use super::{DriftMapping, Entry, Options, Slots, only_options};
use crate::model::dual::{D, Local};
use num_dual::DualNum;

/// The table entry.
pub const ENTRY: Entry<dyn DriftMapping> = Entry {
    name: "bounded",
    parameters: &["drift_max", "value_scale"],
    defaults: &[],
    equation: "drift = drift_max·(2/(1 + exp(−value_scale·(SV_a − SV_b))) − 1); in a race, per accumulator \
               the same of SV_k  (Fontanesi et al. 2019)",
    build,
};

struct Bounded {
    max: usize,
    scale: usize,
}

fn build(options: &Options, slots: Slots<'_>) -> Result<Box<dyn DriftMapping>, String> {
    only_options(options, &[])?;
    Ok(Box::new(Bounded {
        max: slots("drift_max"),
        scale: slots("value_scale"),
    }))
}

impl DriftMapping for Bounded {
    fn drift(&self, value_difference: D, p: &[D]) -> D {
        // 2/(1 + e^−x) − 1 = tanh(x/2), which is stable for any x.
        p[self.max] * (p[self.scale] * value_difference * 0.5).tanh()
    }

    fn weighted_local(&self, subjective_value: f64, _attribute: f64, _p: &[f64]) -> Option<Local> {
        Some(Local::new(subjective_value, 1.0, [(0, 0.0), (0, 0.0)]))
    }

    fn drift_local(&self, x: f64, p: &[f64]) -> Option<Local> {
        let (max, scale) = (p[self.max], p[self.scale]);
        let t = (scale * x * 0.5).tanh();
        // d tanh(y)/dy = 1 − tanh²(y).
        let slope = max * (1.0 - t * t) * 0.5;
        Some(Local::new(
            max * t,
            slope * scale,
            [(self.max, t), (self.scale, slope * x)],
        ))
    }
}
