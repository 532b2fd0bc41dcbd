//! The fused kernel of [`SubjectLikelihood::evaluate`] for the commonest built-in combination:
//! a rate rule (gain-loss or delta learning), linear effort cost, linear drift mapping and the
//! two-bound diffusion stage, with parameters that are the same on every trial. Recognised once
//! per subject from the components' kinds ([`Kernel::bind`]), it runs the learning recursion,
//! costs, drift and the stage's log-density with its partial derivatives in one forward loop
//! over plain numbers, then the adjoint (reverse) pass of the `adjoint` module in one backward
//! loop (Griewank & Walther 2008, ch. 3), with no call through a component's trait per trial.
//!
//! Per trial, with values Q before its outcome: SV_k = Q_k − k·E_k, x = SV_a − SV_b,
//! v = drift_intercept + value_scale·x, ln ℓ = ln f(rt, bound | v, …) (or ln P(bound) for a
//! choice without its time); then Q_chosen ← Q_chosen + α·(r − Q_chosen). Backward, with λ the
//! adjoint of the values: ∂ln L/∂α += λ_chosen·d, λ_chosen ·= 1 − α; then with g = ∂ln ℓ/∂v:
//! ∂/∂intercept += g, ∂/∂scale += g·x, ∂/∂k −= g·scale·(E_a − E_b) term by term, and
//! λ_a += g·scale, λ_b −= g·scale.
//!
//! Every number is computed by the formulas of the components' plain forms (`RateRule`,
//! `linear_cost`, `linear_drift`, the first-passage engine) in the order in which the generic
//! fast path (`adjoint` module) computes and sums them, so ln L and the gradient are the same
//! numbers to the last bit (tests/suite/likelihood_fast_path.rs compares them on every point).
//!
//! What the kernel does not cover takes the generic fast path: forgetting, parameters that vary
//! over trials, other cost attributes, trials that do not offer exactly two options, a deadline
//! with missing responses (bound at [`Kernel::bind`]), and at evaluation a response lock, a
//! lapse rate above zero or invalid stage parameters.

use super::adjoint::Adjoint;
use crate::data::Subject;
use crate::first_passage::{
    Bound, ln_bound_probability_with_gradient, ln_density_at, ln_density_with_gradient_at,
};
use crate::model::Model;
use crate::model::components::{
    DiffusionSlots, RateRule, bound_of, linear_cost, linear_drift, local_partials,
};

/// What a trial's choice stage scores.
#[derive(Clone, Copy)]
enum Score {
    /// ln f(rt, bound): a response with its time.
    Density(Bound, f64),
    /// ln P(bound): a choice whose time was trimmed.
    Absorption(Bound),
    /// Nothing: no response (without a deadline it carries no information).
    Nothing,
}

/// One trial as the kernel reads it.
#[derive(Clone, Copy)]
struct Trial {
    /// The offered options a and b.
    options: [usize; 2],
    /// Their effort.
    effort: [f64; 2],
    score: Score,
    /// (option chosen, outcome) when the trial learns.
    learns: Option<(usize, f64)>,
}

/// What the forward loop leaves for the backward loop, per trial.
#[derive(Clone, Copy)]
struct Step {
    /// ∂ln ℓ/∂v (zero for a trial that carries no information).
    d_drift: f64,
    /// The value difference x = SV_a − SV_b.
    x: f64,
    /// The prediction error d of a trial that learns.
    error: f64,
    /// The slot of the rate that learned.
    rate: usize,
}

/// The kernel bound to one model and subject.
#[derive(Clone)]
pub(super) struct Kernel {
    rule: RateRule,
    /// Slot of the effort weight k.
    weight: usize,
    /// Slots of drift_intercept and value_scale.
    intercept: usize,
    scale: usize,
    stage: DiffusionSlots,
    initial: Option<usize>,
    n_options: usize,
    n_parameters: usize,
    trials: Vec<Trial>,
}

impl Kernel {
    /// The kernel of `model` on `subject`, or `None` when the model or the data are outside it
    /// (see the module's documentation).
    pub(super) fn bind(model: &Model, subject: &Subject, deadline: Option<f64>) -> Option<Kernel> {
        if model.varies() || model.forget_slot.is_some() || !model.learns() {
            return None;
        }
        let rule = model.learning.rate_rule()?;
        let [cost] = model.costs.as_slice() else {
            return None;
        };
        let weight = cost.shape.linear_weight().filter(|_| cost.is_effort())?;
        let (intercept, scale) = model.drift.as_ref()?.linear_slots()?;
        let stage = model.choice.diffusion()?;
        let mut trials = Vec::with_capacity(subject.trials.len());
        for t in &subject.trials {
            let [a, b] = t.offers.as_slice() else {
                return None;
            };
            let score = match (t.choice, t.rt) {
                (Some(choice), Some(rt)) => Score::Density(bound_of(choice), rt),
                (Some(choice), None) => Score::Absorption(bound_of(choice)),
                (None, _) if deadline.is_some() => return None,
                (None, _) => Score::Nothing,
            };
            let learns = match (t.choice, t.outcome) {
                (Some(choice), Some(r)) => Some((t.offers.get(choice.index())?.option, r)),
                _ => None,
            };
            trials.push(Trial {
                options: [a.option, b.option],
                effort: [a.effort, b.effort],
                score,
                learns,
            });
        }
        Some(Kernel {
            rule,
            weight,
            intercept,
            scale,
            stage,
            initial: model.initial_slot,
            n_options: subject.options.len().max(2),
            n_parameters: model.parameters.len(),
            trials,
        })
    }

    /// ln L and its partial derivatives at the natural values `p` of every model parameter by
    /// slot, or `None` when this point or the lock is outside the kernel.
    pub(super) fn run(&self, p: &[f64], lock: Option<f64>) -> Option<Adjoint> {
        self.pass::<true>(p, lock)
    }

    /// ln L alone, the same number as [`Kernel::run`]'s to the last bit (the same terms summed
    /// in the same order; only the partial derivatives and the backward loop are skipped).
    pub(super) fn ln_likelihood(&self, p: &[f64], lock: Option<f64>) -> Option<f64> {
        self.pass::<false>(p, lock).map(|a| a.ln_likelihood)
    }

    /// [`Kernel::run`]; with `GRAD` false ln L alone (empty derivative vectors, no backward
    /// loop).
    fn pass<const GRAD: bool>(&self, p: &[f64], lock: Option<f64>) -> Option<Adjoint> {
        if lock.is_some() || p[self.stage.lapse()] > 0.0 {
            return None;
        }
        let base = self.stage.base(|slot| p[slot])?;
        let (k, scale) = (p[self.weight], p[self.scale]);
        let initial = self.initial.map_or(0.0, |slot| p[slot]);
        let mut q = vec![initial; self.n_options];
        // The backward loop's record, kept only when there is a backward loop.
        let mut steps = Vec::with_capacity(if GRAD { self.trials.len() } else { 0 });
        let mut ln_likelihood = 0.0;
        // The stage parameters' partial derivatives: summed over the trials scored by their
        // density, added one trial at a time for the others (as the stage's batch call does).
        let mut stage = [0.0; 7];
        let mut d_forward = vec![0.0; self.n_parameters];
        for trial in &self.trials {
            let [a, b] = trial.options;
            let x = linear_cost(q[a], trial.effort[0], k) - linear_cost(q[b], trial.effort[1], k);
            let drift = linear_drift(self.intercept, self.scale, x, p)?.value;
            let d_drift = match trial.score {
                Score::Density(bound, rt) if !GRAD => {
                    ln_likelihood += ln_density_at(rt, bound, drift, &base);
                    0.0
                }
                Score::Density(bound, rt) => {
                    let (ln_f, g) = ln_density_with_gradient_at(rt, bound, drift, &base);
                    let partials = local_partials(g);
                    ln_likelihood += ln_f;
                    stage
                        .iter_mut()
                        .zip(&partials[1..])
                        .for_each(|(sum, d)| *sum += d);
                    partials[0]
                }
                Score::Absorption(bound) => {
                    let (ln_p, g) =
                        ln_bound_probability_with_gradient(bound, &base.with_drift(drift));
                    let partials = local_partials(g);
                    ln_likelihood += ln_p;
                    for (&slot, d) in self.stage.0.iter().zip(&partials[1..]) {
                        d_forward[slot] += d;
                    }
                    partials[0]
                }
                Score::Nothing => 0.0,
            };
            let (error, rate) = match trial.learns {
                Some((chosen, r)) => {
                    let (value, error, rate) = self.rule.update(q[chosen], r, p);
                    q[chosen] = value;
                    (error, rate)
                }
                None => (0.0, 0),
            };
            if GRAD {
                steps.push(Step {
                    d_drift,
                    x,
                    error,
                    rate,
                });
            }
        }
        if !GRAD {
            return Some(Adjoint {
                ln_likelihood,
                d_natural: Vec::new(),
                d_theta: Vec::new(),
            });
        }
        for (&slot, d) in self.stage.0.iter().zip(stage) {
            d_forward[slot] += d;
        }
        // Backward: λ the adjoint of the values.
        let mut lambda = vec![0.0; self.n_options];
        let mut d_backward = vec![0.0; self.n_parameters];
        let (mut d_intercept, mut d_scale, mut d_weight) = (0.0, 0.0, 0.0);
        for (trial, step) in self.trials.iter().zip(&steps).rev() {
            if let Some((chosen, _)) = trial.learns {
                if step.error != 0.0 {
                    d_backward[step.rate] += lambda[chosen] * step.error;
                }
                lambda[chosen] *= 1.0 - p[step.rate];
            }
            let d_drift = step.d_drift;
            if d_drift != 0.0 {
                d_intercept += d_drift;
                if step.x != 0.0 {
                    d_scale += d_drift * step.x;
                }
                let d_difference = d_drift * scale;
                for (k, d_x) in [d_difference, -d_difference].into_iter().enumerate() {
                    // ∂SV/∂k = −E, skipped where zero as the generic pass skips it.
                    let d_k = -trial.effort[k];
                    if d_k != 0.0 {
                        d_weight += d_x * d_k;
                    }
                    lambda[trial.options[k]] += d_x;
                }
            }
        }
        d_backward[self.intercept] = d_intercept;
        d_backward[self.scale] = d_scale;
        d_backward[self.weight] = d_weight;
        let mut d_natural = vec![0.0; self.n_parameters];
        let mut flush = |d_c: &[f64]| {
            for (d, c) in d_natural.iter_mut().zip(d_c) {
                *d += c;
            }
        };
        flush(&d_forward);
        flush(&d_backward);
        if let Some(slot) = self.initial {
            let mut d_initial = vec![0.0; self.n_parameters];
            d_initial[slot] = 0.0 + lambda.iter().sum::<f64>();
            flush(&d_initial);
        }
        Some(Adjoint {
            ln_likelihood,
            d_natural,
            d_theta: vec![0.0; self.n_parameters],
        })
    }
}
