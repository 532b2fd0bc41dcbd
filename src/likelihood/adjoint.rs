//! The fast path of [`SubjectLikelihood::evaluate`]: one forward pass on plain numbers, with each
//! component's partial derivatives in its own input and parameters (the `*_local` methods of
//! the component traits), then one backward (adjoint) pass through the learning recursion
//! (reverse-mode differentiation; Griewank & Walther 2008, ch. 3).
//!
//! Forward, per trial i with values Q⁽ⁱ⁾ before its outcome: SV_k = cost(Q_k, E_k), x_k =
//! weighted(SV_k), v = drift(x_a − x_b), ln ℓᵢ = stage(v); the direct partial derivatives
//! ∂ln ℓᵢ/∂p (through costs, mapping and stage) are summed at once, and ∂ln ℓᵢ/∂Q_k of each
//! offered option is kept. Then Q⁽ⁱ⁺¹⁾ = learn(Q⁽ⁱ⁾), whose partial derivatives are kept.
//! Backward, with λ⁽ⁱ⁾ = ∂(Σ_{j≥i} ln ℓⱼ)/∂Q⁽ⁱ⁾ and λ⁽ⁿ⁾ = 0:
//! λ⁽ⁱ⁾_o = ∂ln ℓᵢ/∂Q_o + Σ_o′ λ⁽ⁱ⁺¹⁾_o′ ∂Q⁽ⁱ⁺¹⁾_o′/∂Q⁽ⁱ⁾_o, and ∂ln L/∂p gains
//! Σ_o′ λ⁽ⁱ⁺¹⁾_o′ ∂Q⁽ⁱ⁺¹⁾_o′/∂p; finally the initial value's slot gains Σ_o λ⁽⁰⁾_o. The cost is
//! a few operations per trial whatever the number of free parameters, where the dual-number
//! path carries a gradient as wide as the free parameters through every quantity.
//!
//! The values are computed by the same formulas in the same order as the dual path's real
//! parts, so ln L is the same number; the gradient is the same up to the order of its sums
//! (tests/suite/likelihood.rs compares both on every built-in model).
//!
//! It covers models whose parameters are the same on every trial, with a two-bound choice
//! stage (one drift from the value difference) and components that give their plain-number
//! form; the others return `None` and the likelihood takes the dual path.

use super::SubjectLikelihood;
use crate::model::components::{Observation, Signal};
use crate::model::dual::{Local, constant};

/// What the backward pass needs of one trial.
struct Taped {
    /// ∂ln ℓᵢ/∂Q of each offered option (option index, partial derivative).
    scored: [(usize, f64); 2],
    /// The chosen option's update: option, ∂Q′/∂Q and its parameters' partial derivatives.
    learned: Option<(usize, Local)>,
}

/// Most parameter partial derivatives an option's subjective value carries (two per cost
/// attribute and for the mapping's weighting); more send the likelihood down the dual path.
const APPRAISAL_PARTIALS: usize = 8;

/// ∂SV/∂Q and (slot, ∂SV/∂p) of one option's subjective value through its cost attributes.
#[derive(Default)]
struct Appraised {
    value: f64,
    d_value: f64,
    d_parameters: [(usize, f64); APPRAISAL_PARTIALS],
    len: usize,
}

impl Appraised {
    /// Starts at a value Q (∂/∂Q = 1).
    fn start(&mut self, q: f64) {
        self.value = q;
        self.d_value = 1.0;
        self.len = 0;
    }

    /// Passes the value through one more function of it; `None` when there are too many
    /// parameters to carry.
    fn then(&mut self, step: Local) -> Option<()> {
        for (_, d) in &mut self.d_parameters[..self.len] {
            *d *= step.d_input;
        }
        let end = self.len + step.d_parameters.len();
        self.d_parameters
            .get_mut(self.len..end)?
            .copy_from_slice(&step.d_parameters);
        self.len = end;
        self.d_value *= step.d_input;
        self.value = step.value;
        Some(())
    }

    /// The (slot, ∂SV/∂p) carried.
    fn partials(&self) -> &[(usize, f64)] {
        &self.d_parameters[..self.len]
    }
}

impl SubjectLikelihood<'_> {
    /// ln L and ∂ln L/∂p[slot] for every parameter slot at the natural values `p` (all
    /// parameters by slot), or `None` when the model is outside the fast path.
    pub(super) fn run_adjoint(&self, p: &[f64]) -> Option<(f64, Vec<f64>)> {
        let model = self.model;
        if model.varies() || model.choice.signal() != Signal::DriftDifference {
            return None;
        }
        let mapping = model.drift.as_ref()?;
        let p_dual: Vec<_> = p.iter().map(|&x| constant(x)).collect();
        let prepared = model.choice.prepare(&p_dual, self.context);
        let n_options = self.subject.options.len().max(2);
        let initial = model.initial_slot.map_or(0.0, |s| p[s]);
        let mut q = vec![initial; n_options];
        let mut d_p = vec![0.0; p.len()];
        let mut tape: Vec<Taped> = Vec::with_capacity(self.subject.trials.len());
        // Per learned trial with forgetting: initial − Q of every option before the update.
        let mut forgotten: Vec<f64> = Vec::new();
        let mut appraised = [Appraised::default(), Appraised::default()];
        let mut total = 0.0;
        let mut d_signal = [0.0];
        for (index, trial) in self.subject.trials.iter().enumerate() {
            let [a, b] = trial.offers.as_slice() else {
                return None;
            };
            let mut others = self.design.attribute_values(index).chunks_exact(2);
            for (k, offer) in [a, b].into_iter().enumerate() {
                appraised[k].start(if model.learns() {
                    q[offer.option]
                } else {
                    offer.reward.unwrap_or(f64::NAN)
                });
            }
            for cost in &model.costs {
                let extra = if cost.is_effort() {
                    None
                } else {
                    Some(others.next()?)
                };
                for (k, offer) in [a, b].into_iter().enumerate() {
                    let amount = extra.map_or(offer.effort, |e| e[k]);
                    let step = cost
                        .shape
                        .subjective_value_local(appraised[k].value, amount, p)?;
                    appraised[k].then(step)?;
                }
            }
            let own = others.next();
            for (k, one) in appraised.iter_mut().enumerate() {
                one.then(mapping.weighted_local(one.value, own.map_or(0.0, |x| x[k]), p)?)?;
            }
            let drift = mapping.drift_local(appraised[0].value - appraised[1].value, p)?;
            let observation = Observation {
                choice: trial.choice,
                rt: trial.rt,
            };
            let d_drift = match prepared
                .ln_likelihood_local(&[drift.value], &observation, &mut d_signal, &mut d_p)
                .ok()?
            {
                Some(ln_trial) => {
                    total += ln_trial;
                    d_signal[0]
                }
                None => 0.0,
            };
            let mut scored = [(a.option, 0.0), (b.option, 0.0)];
            if d_drift != 0.0 {
                add(&mut d_p, d_drift, &drift.d_parameters);
                let d_difference = d_drift * drift.d_input;
                for (k, one) in appraised.iter().enumerate() {
                    let d_x = if k == 0 { d_difference } else { -d_difference };
                    add(&mut d_p, d_x, one.partials());
                    scored[k].1 = d_x * one.d_value;
                }
            }
            let learned = match (trial.choice, trial.outcome) {
                (Some(choice), Some(r)) if model.learns() => {
                    let chosen = trial.offers[choice.index()].option;
                    let update = model.learning.update_local(q[chosen], r, p)?;
                    q[chosen] = update.value;
                    if let Some(slot) = model.forget_slot {
                        for (k, v) in q.iter_mut().enumerate() {
                            forgotten.push(initial - *v);
                            if k != chosen {
                                *v += p[slot] * (initial - *v);
                            }
                        }
                    }
                    Some((chosen, update))
                }
                _ => None,
            };
            tape.push(Taped { scored, learned });
        }
        // Backward through the recursion.
        let mut lambda = vec![0.0; n_options];
        let mut forgotten = forgotten.chunks_exact(n_options).rev();
        for taped in tape.iter().rev() {
            if let Some((chosen, update)) = taped.learned {
                if let Some(slot) = model.forget_slot {
                    let before = forgotten.next().expect("one row per learned trial");
                    let rate = p[slot];
                    for (k, l) in lambda.iter_mut().enumerate() {
                        if k != chosen {
                            d_p[slot] += *l * before[k];
                            if let Some(initial_slot) = model.initial_slot {
                                d_p[initial_slot] += *l * rate;
                            }
                            *l *= 1.0 - rate;
                        }
                    }
                }
                add(&mut d_p, lambda[chosen], &update.d_parameters);
                lambda[chosen] *= update.d_input;
            }
            for &(option, d) in &taped.scored {
                lambda[option] += d;
            }
        }
        if let (Some(slot), true) = (model.initial_slot, model.learns()) {
            d_p[slot] += lambda.iter().sum::<f64>();
        }
        Some((total, d_p))
    }
}

/// d_p[slot] += weight·∂/∂p[slot] for each (slot, ∂) of `partials`.
#[inline]
fn add(d_p: &mut [f64], weight: f64, partials: &[(usize, f64)]) {
    for &(slot, d) in partials {
        d_p[slot] += weight * d;
    }
}
