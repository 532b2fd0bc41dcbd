//! Softmax choice stage for data without usable response times, over any number of options:
//! P(k) = exp(β·SV_k)/Σ_j exp(β·SV_j) (Luce 1959; Sutton & Barto 1998, §2.3), which for two
//! options is 1/(1 + exp(−β·(SV_a − SV_b))), with an optional lapse mixture
//! (1 − lapse)·P + lapse/N.

use super::{
    ChoiceStage, Entry, Observation, Options, PreparedChoice, Signal, Slots, SubjectContext,
    only_options,
};
use crate::data::Choice;
use crate::model::dual::D;
use num_dual::DualNum;
use rand::{Rng, RngExt};

/// The table entry.
pub const ENTRY: Entry<dyn ChoiceStage> = Entry {
    name: "softmax",
    parameters: &["inverse_temperature", "lapse"],
    defaults: &[("lapse", 0.0)],
    equation: "P(k) = (1 − lapse)·exp(inverse_temperature·SV_k)/Σ_j exp(inverse_temperature·SV_j) + lapse/N  (Luce 1959)",
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
    fn signal(&self) -> Signal {
        Signal::Values
    }

    fn uses_response_times(&self) -> bool {
        false
    }

    fn max_options(&self) -> Option<usize> {
        None
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

/// ln P(k) = x_k − ln Σ_j e^{x_j} for x = β·SV, stable for any x (the largest term factored
/// out of the sum).
fn ln_softmax(x: &[D], k: usize) -> D {
    let top = x.iter().map(|v| v.re).fold(f64::NEG_INFINITY, f64::max);
    let sum = x
        .iter()
        .fold(D::from_re(0.0), |acc, v| acc + (*v - top).exp());
    x[k] - top - sum.ln()
}

impl Prepared {
    fn scaled(&self, signal: &[D]) -> Vec<D> {
        signal.iter().map(|v| self.beta * *v).collect()
    }
}

impl PreparedChoice for Prepared {
    fn ln_likelihood(&self, signal: &[D], observation: &Observation) -> Option<D> {
        let k = observation.choice?.index();
        let ln_p = ln_softmax(&self.scaled(signal), k);
        if self.lapse.re > 0.0 {
            let n = signal.len() as f64;
            Some((ln_p.exp() * (-self.lapse + 1.0) + self.lapse / n).ln())
        } else {
            Some(ln_p)
        }
    }

    fn probabilities(&self, signal: &[f64]) -> Vec<f64> {
        let lapse = self.lapse.re;
        let n = signal.len() as f64;
        let x: Vec<D> = signal
            .iter()
            .map(|&v| D::from_re(self.beta.re * v))
            .collect();
        (0..x.len())
            .map(|k| (1.0 - lapse) * ln_softmax(&x, k).re.exp() + lapse / n)
            .collect()
    }

    fn expected_times(&self, _signal: &[f64]) -> Option<(f64, f64)> {
        None
    }

    fn simulate(&self, signal: &[f64], rng: &mut dyn Rng) -> (Choice, Option<f64>) {
        let p = self.probabilities(signal);
        let u = rng.random::<f64>();
        let mut cumulative = 0.0;
        for (k, pk) in p.iter().enumerate() {
            cumulative += pk;
            if u < cumulative {
                return (Choice(k), None);
            }
        }
        (Choice(p.len() - 1), None)
    }
}
