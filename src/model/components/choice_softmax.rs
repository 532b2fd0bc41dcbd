//! Softmax choice stage for data without usable response times: P(a) = 1/(1 + exp(−β·(SV_a −
//! SV_b))) (Luce 1959; Sutton & Barto 1998, §2.3), with an optional lapse mixture
//! (1 − lapse)·P + lapse/2.

use super::{
    ChoiceStage, Entry, Observation, Options, PreparedChoice, Slots, SubjectContext, only_options,
};
use crate::data::Choice;
use crate::model::dual::D;
use crate::model::params::logistic;
use num_dual::DualNum;
use rand::{Rng, RngExt};

/// The table entry.
pub const ENTRY: Entry<dyn ChoiceStage> = Entry {
    name: "softmax",
    parameters: &["inverse_temperature", "lapse"],
    defaults: &[("lapse", 0.0)],
    equation: "P(a) = (1 − lapse)/(1 + exp(−inverse_temperature·(SV_a − SV_b))) + lapse/2  (Luce 1959)",
    build,
};

struct Softmax {
    beta: usize,
    lapse: usize,
}

fn build(options: &Options, slots: Slots<'_>) -> Result<Box<dyn ChoiceStage>, String> {
    only_options(options, &[])?;
    Ok(Box::new(Softmax {
        beta: slots("inverse_temperature"),
        lapse: slots("lapse"),
    }))
}

impl ChoiceStage for Softmax {
    fn uses_drift_mapping(&self) -> bool {
        false
    }

    fn uses_response_times(&self) -> bool {
        false
    }

    fn prepare<'a>(&'a self, p: &'a [D], _context: SubjectContext) -> Box<dyn PreparedChoice + 'a> {
        Box::new(Prepared {
            beta: p[self.beta],
            lapse: p[self.lapse],
        })
    }
}

struct Prepared {
    beta: D,
    lapse: D,
}

/// ln σ(x) = −ln(1 + e^−x), stable for any x.
fn ln_logistic(x: D) -> D {
    if x.re >= 0.0 {
        -(-x).exp().ln_1p()
    } else {
        x - x.exp().ln_1p()
    }
}

impl PreparedChoice for Prepared {
    fn ln_likelihood(&self, signal: D, observation: &Observation) -> Option<D> {
        let x = self.beta * signal;
        let x = match observation.choice? {
            Choice::A => x,
            Choice::B => -x,
        };
        if self.lapse.re > 0.0 {
            let p = ln_logistic(x).exp();
            Some((p * (-self.lapse + 1.0) + self.lapse * 0.5).ln())
        } else {
            Some(ln_logistic(x))
        }
    }

    fn probability_a(&self, signal: f64) -> f64 {
        let lapse = self.lapse.re;
        (1.0 - lapse) * logistic(self.beta.re * signal) + 0.5 * lapse
    }

    fn expected_times(&self, _signal: f64) -> Option<(f64, f64)> {
        None
    }

    fn simulate(&self, signal: f64, rng: &mut dyn Rng) -> (Choice, Option<f64>) {
        let choice = if rng.random::<f64>() < self.probability_a(signal) {
            Choice::A
        } else {
            Choice::B
        };
        (choice, None)
    }
}
