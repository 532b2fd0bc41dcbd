//! Linear drift mapping, v = value_scale·(SV_a − SV_b): the drift rate grows with the value
//! difference (Fontanesi, Gluth, Spektor & Rieskamp 2019).

use super::{DriftMapping, Entry, Options, Slots, only_options};
use crate::model::dual::D;

/// The table entry.
pub const ENTRY: Entry<dyn DriftMapping> = Entry {
    name: "linear",
    parameters: &["value_scale"],
    defaults: &[],
    equation: "drift = value_scale·(SV_a − SV_b)  (Fontanesi et al. 2019)",
    build,
};

struct Linear {
    scale: usize,
}

fn build(options: &Options, slots: Slots<'_>) -> Result<Box<dyn DriftMapping>, String> {
    only_options(options, &[])?;
    Ok(Box::new(Linear {
        scale: slots("value_scale"),
    }))
}

impl DriftMapping for Linear {
    fn drift(&self, value_difference: D, p: &[D]) -> D {
        p[self.scale] * value_difference
    }
}
