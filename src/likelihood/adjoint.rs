//! The fast path of [`SubjectLikelihood::evaluate`]: passes on plain numbers, with each
//! component's partial derivatives in its own input and parameters (the `*_local` methods of
//! the component traits), then one backward (adjoint) pass through the learning recursion
//! (reverse-mode differentiation; Griewank & Walther 2008, ch. 3).
//!
//! Forward: the learning recursion alone gives the values Q⁽ⁱ⁾ of every trial before its
//! outcome, Q⁽ⁱ⁺¹⁾ = learn(Q⁽ⁱ⁾), with the update's partial derivatives. The rest does not feed
//! back into the values, so it runs component by component over all trials of a stretch (one
//! call of each component, which inlines its per-value form): SV = cost(Q, E) for each cost
//! attribute, x = weighted(SV), v = drift(x_a − x_b), each with its partial derivatives; then
//! the choice stage scores every trial, ln ℓᵢ = stage(vᵢ), with ∂ln ℓᵢ/∂vᵢ and its own
//! parameters' partial derivatives. Backward, with λ⁽ⁱ⁾ = ∂(Σ_{j≥i} ln ℓⱼ)/∂Q⁽ⁱ⁾ and λ⁽ⁿ⁾ = 0:
//! λ⁽ⁱ⁾_o = ∂ln ℓᵢ/∂Q_o + Σ_o′ λ⁽ⁱ⁺¹⁾_o′ ∂Q⁽ⁱ⁺¹⁾_o′/∂Q⁽ⁱ⁾_o, and ∂ln L/∂p gains
//! Σ_o′ λ⁽ⁱ⁺¹⁾_o′ ∂Q⁽ⁱ⁺¹⁾_o′/∂p and ∂ln ℓᵢ/∂p through costs and mapping; finally the initial
//! value's slot gains Σ_o λ⁽⁰⁾_o. The cost is a few operations per trial whatever the number
//! of free parameters, where the dual-number path carries a gradient as wide as the free
//! parameters through every quantity.
//!
//! The values are computed by the same formulas in the same order as the dual path's real
//! parts, so ln L is the same number; the gradient is the same up to the order of its sums
//! (tests/suite/likelihood_fast_path.rs compares both).
//!
//! Parameters that vary by condition or covariate are handled stretch by stretch (trials with
//! the same component parameters), their partial derivatives passed back to the level
//! intercepts and slopes they come from. It covers models with a two-bound choice stage (one
//! drift from the value difference) and components that give their plain-number form; the
//! others return `None` and the likelihood takes the dual path. The commonest built-in
//! combination takes the fused kernel of the `kernel` module instead, which computes this
//! path's numbers in this path's order in two loops; this path stays the reference for it.

use super::SubjectLikelihood;
use super::design::TrialColumns;
use super::design::{Origin, origin_linear};
use crate::data::Subject;
use crate::model::Model;
use crate::model::components::{LocalStretch, Observation, Signal};
use crate::model::dual::{Local, constant};

/// ln L with its partial derivatives: `d_natural` by model slot with respect to natural values,
/// `d_theta` by model slot with respect to θ directly (level intercepts and slopes of
/// parameters that vary with a covariate).
pub(super) struct Adjoint {
    pub ln_likelihood: f64,
    pub d_natural: Vec<f64>,
    pub d_theta: Vec<f64>,
}

/// The trial columns the fast path reads, laid out once per subject ([`FastColumns::bind`]):
/// per offered option (2·trial + k, a then b) the option's identity, its offered reward, each
/// cost attribute's amount and the drift mapping's own attribute; per trial the observation
/// and what learning reads of it.
#[derive(Clone)]
pub(super) struct FastColumns {
    /// False when some trial does not offer exactly two options (the fast path is not taken).
    two_options: bool,
    options: Vec<usize>,
    /// Offered rewards (NaN where missing), the values of models that do not learn.
    rewards: Vec<f64>,
    /// Per cost attribute in the model's order, its amounts, or `None` when the design lacks
    /// them (the fast path is not taken).
    amounts: Vec<Option<Vec<f64>>>,
    /// The mapping's own attribute (zero where the design has none).
    own: Vec<f64>,
    observations: Vec<Observation>,
    /// (option chosen, outcome) of each trial with both, the trials that learn.
    outcomes: Vec<Option<(usize, f64)>>,
}

impl FastColumns {
    /// The columns of `subject` for `model`, from its trials and the bound design.
    pub(super) fn bind(model: &Model, subject: &Subject, design: &TrialColumns) -> FastColumns {
        let trials = &subject.trials;
        let two_options = trials.iter().all(|t| t.offers.len() == 2);
        let per_option = |f: &dyn Fn(&crate::data::Offer) -> f64| -> Vec<f64> {
            trials.iter().flat_map(|t| t.offers.iter().map(f)).collect()
        };
        // The k-th pair of a trial's attribute values (cost attributes other than effort, then
        // the mapping's own).
        let attribute = |extra: usize| -> Option<Vec<f64>> {
            let mut out = Vec::with_capacity(2 * trials.len());
            for index in 0..trials.len() {
                out.extend_from_slice(design.attribute_values(index).chunks_exact(2).nth(extra)?);
            }
            Some(out)
        };
        let mut extra = 0;
        let amounts = model
            .costs
            .iter()
            .map(|cost| {
                if cost.is_effort() {
                    Some(per_option(&|o| o.effort))
                } else {
                    extra += 1;
                    attribute(extra - 1)
                }
            })
            .collect();
        let own = attribute(extra).unwrap_or_else(|| vec![0.0; 2 * trials.len()]);
        FastColumns {
            two_options,
            options: trials
                .iter()
                .flat_map(|t| t.offers.iter().map(|o| o.option))
                .collect(),
            rewards: per_option(&|o| o.reward.unwrap_or(f64::NAN)),
            amounts,
            own,
            observations: trials
                .iter()
                .map(|t| Observation {
                    choice: t.choice,
                    rt: t.rt,
                })
                .collect(),
            outcomes: trials
                .iter()
                .map(|t| match (t.choice, t.outcome) {
                    (Some(choice), Some(r)) => Some((t.offers.get(choice.index())?.option, r)),
                    _ => None,
                })
                .collect(),
        }
    }
}

/// What the forward passes leave for the backward pass, per trial (`drifts`, `d_drifts`,
/// `learned`) or per offered option of each trial (2·trial + k, a then b), with the working
/// buffers of one evaluation. One tape per thread is kept between evaluations ([`TAPE`]), so an
/// evaluation allocates nothing once the tape has grown to the subject's size; every entry read
/// is written earlier in the same evaluation (each component fills its whole row, the learning
/// step its trial's entry before `learned` marks it).
#[derive(Default)]
struct Tape {
    /// Per option, one row per appraisal step (each cost attribute, then the weighting):
    /// the step's output with its partial derivatives; step m of option e at m·2n + e.
    steps: Vec<Local>,
    /// The drift with its partial derivatives, per trial.
    drifts: Vec<Local>,
    /// ∂ln ℓᵢ/∂drift, from the choice stage (zero for a trial that carries no information).
    d_drifts: Vec<f64>,
    /// The option chosen on each trial that learned.
    learned: Vec<Option<usize>>,
    /// The learning step of each trial that learned: ∂Q′/∂Q and the update's parameter
    /// partial derivatives.
    updates: Vec<Local>,
    /// Per learned trial with forgetting: initial − Q of every option before the update.
    forgotten: Vec<f64>,
    /// The values before each trial's outcome, per offered option.
    values: Vec<f64>,
    /// Working buffers: an appraisal step's input, the value differences, a stretch's partial
    /// derivatives and the adjoint of the values.
    input: Vec<f64>,
    differences: Vec<f64>,
    d_c: Vec<f64>,
    lambda: Vec<f64>,
}

impl Tape {
    /// Sizes the tape for n trials with `n_steps` appraisal steps; entries that the evaluation
    /// writes before reading keep whatever they held.
    fn prepare(&mut self, n: usize, n_steps: usize) {
        let blank = Local::new(0.0, 0.0, [(0, 0.0); 2]);
        self.steps.resize(n_steps * 2 * n, blank);
        self.drifts.resize(n, blank);
        self.updates.resize(n, blank);
        self.d_drifts.clear();
        self.d_drifts.resize(n, 0.0);
        self.learned.clear();
        self.forgotten.clear();
        self.values.clear();
    }
}

thread_local! {
    /// This thread's tape, lent to one evaluation at a time (an evaluation that finds it lent
    /// starts a fresh one).
    static TAPE: std::cell::Cell<Option<Box<Tape>>> = const { std::cell::Cell::new(None) };
}

impl SubjectLikelihood<'_> {
    /// ln L and its partial derivatives at the natural values `natural` and unconstrained
    /// values `theta` of every model parameter by slot, or `None` when the model is outside the
    /// fast path.
    pub(super) fn run_adjoint(&self, natural: &[f64], theta: &[f64]) -> Option<Adjoint> {
        let mut tape = TAPE.with(|t| t.take()).unwrap_or_default();
        let result = self.run_adjoint_on(natural, theta, &mut tape);
        TAPE.with(|t| t.set(Some(tape)));
        result
    }

    /// [`SubjectLikelihood::run_adjoint`] on a lent tape.
    fn run_adjoint_on(&self, natural: &[f64], theta: &[f64], tape: &mut Tape) -> Option<Adjoint> {
        let model = self.model;
        let mapping = model.drift.as_ref()?;
        if model.choice.signal() != Signal::DriftDifference {
            return None;
        }
        let columns = &self.fast_columns;
        let n = self.subject.trials.len();
        if !columns.two_options {
            return None;
        }
        // Stretches of trials with the same component parameters (one without variation).
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
        let n_steps = model.costs.len() + 1;
        tape.prepare(n, n_steps);
        // The values before each trial's outcome: the learning recursion alone.
        let learns = model.learns();
        let mut q = vec![initial; n_options];
        for (from, until, p) in &stretches {
            for index in *from..*until {
                let (e0, e1) = (2 * index, 2 * index + 2);
                if learns {
                    tape.values
                        .extend(columns.options[e0..e1].iter().map(|&option| q[option]));
                } else {
                    tape.values.extend_from_slice(&columns.rewards[e0..e1]);
                }
                let learned = match columns.outcomes[index] {
                    Some((chosen, r)) if learns => {
                        let update = &mut tape.updates[index];
                        if !model.learning.update_local(q[chosen], r, p, update) {
                            return None;
                        }
                        q[chosen] = update.value;
                        if let Some(slot) = model.forget_slot {
                            for (k, v) in q.iter_mut().enumerate() {
                                tape.forgotten.push(initial - *v);
                                if k != chosen {
                                    *v += p[slot] * (initial - *v);
                                }
                            }
                        }
                        Some(chosen)
                    }
                    _ => None,
                };
                tape.learned.push(learned);
            }
        }
        let mut out = Adjoint {
            ln_likelihood: 0.0,
            d_natural: vec![0.0; natural.len()],
            d_theta: vec![0.0; natural.len()],
        };
        // Appraisal, drift and choice stage, component by component over each stretch.
        let Tape {
            steps,
            drifts,
            d_drifts,
            learned,
            updates,
            forgotten,
            values,
            input,
            differences,
            d_c,
            lambda,
        } = tape;
        for (from, until, p) in &stretches {
            let (e0, e1) = (2 * from, 2 * until);
            input.clear();
            input.extend_from_slice(&values[e0..e1]);
            for (m, amounts) in columns.amounts.iter().enumerate() {
                let amounts = &amounts.as_ref()?[e0..e1];
                let row = &mut steps[m * 2 * n + e0..m * 2 * n + e1];
                if !model.costs[m]
                    .shape
                    .subjective_values_local(input, amounts, p, row)
                {
                    return None;
                }
                input
                    .iter_mut()
                    .zip(row.iter())
                    .for_each(|(x, step)| *x = step.value);
            }
            // The mapping's own attribute follows the cost attributes.
            let m = n_steps - 1;
            let row = &mut steps[m * 2 * n + e0..m * 2 * n + e1];
            if !mapping.weighted_values_local(input, &columns.own[e0..e1], p, row) {
                return None;
            }
            differences.clear();
            differences.extend(row.chunks_exact(2).map(|x| x[0].value - x[1].value));
            if !mapping.drifts_local(differences, p, &mut drifts[*from..*until]) {
                return None;
            }
            let p_dual: Vec<_> = p.iter().map(|&x| constant(x)).collect();
            let prepared = model.choice.prepare(&p_dual, self.context);
            d_c.clear();
            d_c.resize(p.len(), 0.0);
            prepared
                .ln_likelihood_local_batch(LocalStretch {
                    drifts: &drifts[*from..*until],
                    observations: &columns.observations[*from..*until],
                    d_drifts: &mut d_drifts[*from..*until],
                    d_parameters: d_c,
                    total: &mut out.ln_likelihood,
                })
                .ok()?;
            self.flush(*from, d_c, theta, &mut out);
        }
        // Backward through the recursion, stretch by stretch.
        lambda.clear();
        lambda.resize(n_options, 0.0);
        let mut d_initial = 0.0;
        let mut forgotten = forgotten.chunks_exact(n_options).rev();
        for (from, until, p) in stretches.iter().rev() {
            d_c.clear();
            d_c.resize(p.len(), 0.0);
            for index in (*from..*until).rev() {
                if let Some(chosen) = learned[index] {
                    let update = &updates[index];
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
                    add(d_c, lambda[chosen], &update.d_parameters);
                    lambda[chosen] *= update.d_input;
                }
                let d_drift = d_drifts[index];
                if d_drift != 0.0 {
                    let drift = &drifts[index];
                    add(d_c, d_drift, &drift.d_parameters);
                    let d_difference = d_drift * drift.d_input;
                    for (k, sign) in [(0, 1.0), (1, -1.0)] {
                        let e = 2 * index + k;
                        let mut d_x = sign * d_difference;
                        for m in (0..n_steps).rev() {
                            let step = &steps[m * 2 * n + e];
                            add(d_c, d_x, &step.d_parameters);
                            d_x *= step.d_input;
                        }
                        lambda[columns.options[e]] += d_x;
                    }
                }
            }
            self.flush(*from, d_c, theta, &mut out);
        }
        if let (Some(slot), true) = (model.initial_slot, learns) {
            d_initial += lambda.iter().sum::<f64>();
            d_c.clear();
            d_c.resize(stretches[0].2.len(), 0.0);
            d_c[slot] = d_initial;
            self.flush(0, d_c, theta, &mut out);
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
