//! Bounded (sigmoid) drift mapping, v = drift_max·(2/(1 + exp(−value_scale·ΔSV)) − 1)
//! (Fontanesi, Gluth, Spektor & Rieskamp 2019): linear for small differences, saturating at
//! ±drift_max for large ones.

use super::{DriftMapping, Entry, Options, Slots, only_options};
use crate::model::dual::D;
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
}
