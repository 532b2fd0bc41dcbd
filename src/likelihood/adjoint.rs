//! The fast path of [`SubjectLikelihood::evaluate`]: one forward pass on plain numbers, with each
//! component's partial derivatives in its own input and parameters (the `*_local` methods of
//! the component traits), then one backward (adjoint) pass through the learning recursion
//! (reverse-mode differentiation; Griewank & Walther 2008, ch. 3).
//!
//! Forward, per trial i with values Q⁽ⁱ⁾ before its outcome: SV_k = cost(Q_k, E_k), x_k =
//! weighted(SV_k), v = drift(x_a − x_b), with the partial derivatives on the way; then
//! Q⁽ⁱ⁺¹⁾ = learn(Q⁽ⁱ⁾) with its partial derivatives. The values do not depend on the choice
//! stage, so the stage then scores every trial in one loop: ln ℓᵢ = stage(vᵢ) with ∂ln ℓᵢ/∂vᵢ
//! and its own parameters' partial derivatives. Backward, with λ⁽ⁱ⁾ = ∂(Σ_{j≥i} ln ℓⱼ)/∂Q⁽ⁱ⁾
//! and λ⁽ⁿ⁾ = 0: λ⁽ⁱ⁾_o = ∂ln ℓᵢ/∂Q_o + Σ_o′ λ⁽ⁱ⁺¹⁾_o′ ∂Q⁽ⁱ⁺¹⁾_o′/∂Q⁽ⁱ⁾_o, and ∂ln L/∂p gains
//! Σ_o′ λ⁽ⁱ⁺¹⁾_o′ ∂Q⁽ⁱ⁺¹⁾_o′/∂p and ∂ln ℓᵢ/∂p through costs and mapping; finally the initial
//! value's slot gains Σ_o λ⁽⁰⁾_o. The cost is a few operations per trial whatever the number
//! of free parameters, where the dual-number path carries a gradient as wide as the free
//! parameters through every quantity.
//!
//! The values are computed by the same formulas in the same order as the dual path's real
//! parts, so ln L is the same number; the gradient is the same up to the order of its sums
//! (tests/suite/likelihood.rs compares both on every built-in model).
//!
//! Parameters that vary by condition or covariate are handled stretch by stretch (trials with
//! the same component parameters), their partial derivatives passed back to the level
//! intercepts and slopes they come from. It covers models with a two-bound choice stage (one
//! drift from the value difference) and components that give their plain-number form; the
//! others return `None` and the likelihood takes the dual path.

use super::SubjectLikelihood;
use super::design::{Origin, origin_linear};
use crate::model::components::{Observation, Signal};
use crate::model::dual::{Local, constant};

/// What the backward pass needs of one trial.
struct Taped {
    /// The offered options.
    options: [usize; 2],
    /// The drift with its partial derivatives in the weighted value difference and parameters.
    drift: Local,
    /// ∂ln ℓᵢ/∂drift, from the choice stage.
    d_drift: f64,
    /// ∂x_k/∂Q_k of each offered option's weighted value.
    d_value: [f64; 2],
    /// Where each option's (slot, ∂x_k/∂p) lie in [`Forward::partials`]: (start, end).
    partials: [(usize, usize); 2],
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
        // Zero partials (a component's unused entries) are left out: they add nothing.
        for &(slot, d) in &step.d_parameters {
            if d != 0.0 {
                *self.d_parameters.get_mut(self.len)? = (slot, d);
                self.len += 1;
            }
        }
        self.d_value *= step.d_input;
        self.value = step.value;
        Some(())
    }

    /// The (slot, ∂SV/∂p) carried.
    fn partials(&self) -> &[(usize, f64)] {
        &self.d_parameters[..self.len]
    }
}

/// ln L with its partial derivatives: `d_natural` by model slot with respect to natural values,
/// `d_theta` by model slot with respect to θ directly (level intercepts and slopes of
/// parameters that vary with a covariate).
pub(super) struct Adjoint {
    pub ln_likelihood: f64,
    pub d_natural: Vec<f64>,
    pub d_theta: Vec<f64>,
}

/// The forward pass's state: learned values and what the backward pass needs.
struct Forward {
    q: Vec<f64>,
    tape: Vec<Taped>,
    /// Per learned trial with forgetting: initial − Q of every option before the update.
    forgotten: Vec<f64>,
    appraised: [Appraised; 2],
    /// The options' parameter partial derivatives of every trial, one after another.
    partials: Vec<(usize, f64)>,
}

impl SubjectLikelihood<'_> {
    /// ln L and its partial derivatives at the natural values `natural` and unconstrained
    /// values `theta` of every model parameter by slot, or `None` when the model is outside the
    /// fast path.
    pub(super) fn run_adjoint(&self, natural: &[f64], theta: &[f64]) -> Option<Adjoint> {
        let model = self.model;
        if model.choice.signal() != Signal::DriftDifference {
            return None;
        }
        // Stretches of trials with the same component parameters (one without variation).
        let n = self.subject.trials.len();
        let mut stretches: Vec<(usize, usize, Vec<f64>)> = Vec::new();
        let mut from = 0;
        while from < n {
            let until = if model.varies() {
                self.design.same_parameters_until(from)
            } else {
                n
            };
            stretches.push((from, until, self.component_values(from, natural, theta)));
            from = until;
        }
        let initial = match (model.initial_slot, stretches.first()) {
            (Some(slot), Some((_, _, p))) => p[slot],
            _ => 0.0,
        };
        let n_options = self.subject.options.len().max(2);
        let mut state = Forward {
            q: vec![initial; n_options],
            tape: Vec::with_capacity(n),
            forgotten: Vec::new(),
            appraised: [Appraised::default(), Appraised::default()],
            partials: Vec::with_capacity(2 * n),
        };
        let mut out = Adjoint {
            ln_likelihood: 0.0,
            d_natural: vec![0.0; natural.len()],
            d_theta: vec![0.0; natural.len()],
        };
        // The learning recursion and every trial's drift: the values do not depend on the
        // choice stage, so the stage then scores all trials in one loop.
        for (from, until, p) in &stretches {
            for index in *from..*until {
                self.forward(index, p, initial, &mut state)?;
            }
        }
        let mut d_c = Vec::new();
        for (from, until, p) in &stretches {
            let p_dual: Vec<_> = p.iter().map(|&x| constant(x)).collect();
            let prepared = model.choice.prepare(&p_dual, self.context);
            d_c.clear();
            d_c.resize(p.len(), 0.0);
            let mut d_signal = [0.0];
            for (taped, trial) in state.tape[*from..*until]
                .iter_mut()
                .zip(&self.subject.trials[*from..*until])
            {
                let observation = Observation {
                    choice: trial.choice,
                    rt: trial.rt,
                };
                let scored = prepared
                    .ln_likelihood_local(
                        &[taped.drift.value],
                        &observation,
                        &mut d_signal,
                        &mut d_c,
                    )
                    .ok()?;
                if let Some(ln_trial) = scored {
                    out.ln_likelihood += ln_trial;
                    taped.d_drift = d_signal[0];
                }
            }
            self.flush(*from, &d_c, theta, &mut out);
        }
        // Backward through the recursion, stretch by stretch.
        let mut lambda = vec![0.0; n_options];
        let mut d_initial = 0.0;
        let mut forgotten = state.forgotten.chunks_exact(n_options).rev();
        for (from, until, p) in stretches.iter().rev() {
            d_c.clear();
            d_c.resize(p.len(), 0.0);
            for taped in state.tape[*from..*until].iter().rev() {
                if let Some((chosen, update)) = taped.learned {
                    if let Some(slot) = model.forget_slot {
                        let before = forgotten.next().expect("one row per learned trial");
                        let rate = p[slot];
                        for (k, l) in lambda.iter_mut().enumerate() {
                            if k != chosen {
                                d_c[slot] += *l * before[k];
                                d_initial += *l * rate;
                                *l *= 1.0 - rate;
                            }
                        }
                    }
                    add(&mut d_c, lambda[chosen], &update.d_parameters);
                    lambda[chosen] *= update.d_input;
                }
                if taped.d_drift != 0.0 {
                    add(&mut d_c, taped.d_drift, &taped.drift.d_parameters);
                    let d_difference = taped.d_drift * taped.drift.d_input;
                    for k in 0..2 {
                        let d_x = if k == 0 { d_difference } else { -d_difference };
                        let (start, end) = taped.partials[k];
                        add(&mut d_c, d_x, &state.partials[start..end]);
                        lambda[taped.options[k]] += d_x * taped.d_value[k];
                    }
                }
            }
            self.flush(*from, &d_c, theta, &mut out);
        }
        if let (Some(slot), true) = (model.initial_slot, model.learns()) {
            d_initial += lambda.iter().sum::<f64>();
            d_c.clear();
            d_c.resize(stretches[0].2.len(), 0.0);
            d_c[slot] = d_initial;
            self.flush(0, &d_c, theta, &mut out);
        }
        Some(out)
    }

    /// The component parameters on trial `t` (all model parameters by slot when nothing varies).
    fn component_values(&self, t: usize, natural: &[f64], theta: &[f64]) -> Vec<f64> {
        if !self.model.varies() {
            return natural.to_vec();
        }
        let mut values = Vec::with_capacity(self.model.sources.len());
        self.design.origins(self.model, t, |origin| {
            values.push(match origin {
                Origin::Natural(slot) => natural[slot],
                Origin::Linear {
                    level,
                    slopes,
                    covariates,
                } => self.slot_transforms[level].natural(origin_linear(
                    theta[level],
                    slopes,
                    covariates,
                    theta,
                )),
            })
        });
        values
    }

    /// Adds ∂ln L/∂(component parameters on trial `t`) to the model parameters they come from.
    fn flush(&self, t: usize, d_c: &[f64], theta: &[f64], out: &mut Adjoint) {
        if !self.model.varies() {
            for (d, c) in out.d_natural.iter_mut().zip(d_c) {
                *d += c;
            }
            return;
        }
        let mut k = 0;
        self.design.origins(self.model, t, |origin| {
            let d = d_c[k];
            k += 1;
            match origin {
                Origin::Natural(slot) => out.d_natural[slot] += d,
                Origin::Linear {
                    level,
                    slopes,
                    covariates,
                } => {
                    let linear = origin_linear(theta[level], slopes, covariates, theta);
                    let d_linear = d * self.slot_transforms[level].slope(linear);
                    out.d_theta[level] += d_linear;
                    for ((_, slope), x) in slopes.iter().zip(covariates) {
                        out.d_theta[*slope] += d_linear * x;
                    }
                }
            }
        });
    }

    /// Appraises trial `index` with component parameters `p` (its drift and the partial
    /// derivatives on the way) and learns from its outcome, onto the tape.
    fn forward(&self, index: usize, p: &[f64], initial: f64, state: &mut Forward) -> Option<()> {
        let model = self.model;
        let mapping = model.drift.as_ref()?;
        let trial = &self.subject.trials[index];
        let [a, b] = trial.offers.as_slice() else {
            return None;
        };
        let appraised = &mut state.appraised;
        let mut others = self.design.attribute_values(index).chunks_exact(2);
        for (k, offer) in [a, b].into_iter().enumerate() {
            appraised[k].start(if model.learns() {
                state.q[offer.option]
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
        let mut partials = [(0, 0); 2];
        for (range, one) in partials.iter_mut().zip(appraised.iter()) {
            let start = state.partials.len();
            state.partials.extend_from_slice(one.partials());
            *range = (start, state.partials.len());
        }
        let learned = match (trial.choice, trial.outcome) {
            (Some(choice), Some(r)) if model.learns() => {
                let chosen = trial.offers[choice.index()].option;
                let update = model.learning.update_local(state.q[chosen], r, p)?;
                state.q[chosen] = update.value;
                if let Some(slot) = model.forget_slot {
                    for (k, v) in state.q.iter_mut().enumerate() {
                        state.forgotten.push(initial - *v);
                        if k != chosen {
                            *v += p[slot] * (initial - *v);
                        }
                    }
                }
                Some((chosen, update))
            }
            _ => None,
        };
        state.tape.push(Taped {
            options: [a.option, b.option],
            drift,
            d_drift: 0.0,
            d_value: [state.appraised[0].d_value, state.appraised[1].d_value],
            partials,
            learned,
        });
        Some(())
    }
}

/// d_p[slot] += weight·∂/∂p[slot] for each (slot, ∂) of `partials` with ∂ ≠ 0 (a component's
/// unused entries add nothing, and skipping them spares a chain of updates of one slot).
#[inline]
fn add(d_p: &mut [f64], weight: f64, partials: &[(usize, f64)]) {
    for &(slot, d) in partials {
        if d != 0.0 {
            d_p[slot] += weight * d;
        }
    }
}
