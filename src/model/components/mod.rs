//! Model components: learning rules, effort-cost shapes, drift mappings and choice stages.
//!
//! Each component lives in a file of its own and is listed once in the table of its kind below.
//! A model file (models/*.toml) names one component of each kind; the component says which
//! parameters it needs, and the model file declares them.
//!
//! To add a cost shape (likewise a learning rule, drift mapping or choice stage): write
//! `cost_<name>.rs` implementing [`CostShape`], add its line to [`COST_SHAPES`], and add a model
//! file to models/ that uses it.

mod choice_collapse;
mod choice_diffusion;
mod choice_race;
mod choice_softmax;
mod cost_exponential;
mod cost_hyperbolic;
mod cost_linear;
mod cost_none;
mod cost_quadratic;
mod drift_bounded;
mod drift_gaze;
mod drift_linear;
mod learning_delta;
mod learning_gain_loss;
mod learning_none;

pub use choice_diffusion::DiffusionSlots;
pub(crate) use choice_diffusion::{bound_of, local_partials};
pub(crate) use cost_linear::linear_cost;
pub(crate) use drift_linear::linear_drift;

use super::dual::{D, Local};
use crate::data::Choice;
use num_dual::{Dual64, DualNum};
use rand::Rng;
use std::marker::PhantomData;

/// Where a component finds its parameters: the slot of each name in the model's parameter list.
pub type Slots<'a> = &'a dyn Fn(&str) -> usize;

/// Component options from the model file (`[learning]`, `[cost]`, … tables without the `rule`,
/// `shape`, `mapping` or `stage` key).
pub type Options = toml::Table;

/// What a component kind's table lists: name, one-line description, constructor.
pub struct Entry<T: ?Sized> {
    /// Name used in model files.
    pub name: &'static str,
    /// Parameters the component needs.
    pub parameters: &'static [&'static str],
    /// Parameters that are optional, with the fixed value they take when a model file does not
    /// declare them.
    pub defaults: &'static [(&'static str, f64)],
    /// Equation and published source, for listings.
    pub equation: &'static str,
    /// Builds the component from its options and the model's parameter slots.
    pub build: fn(&Options, Slots<'_>) -> Result<Box<T>, String>,
}

/// Updates the learned value of the chosen option from its outcome.
pub trait LearningRule: Send + Sync {
    /// Value of the chosen option after outcome `r`, from its value `q` before; `p` holds the
    /// natural-scale parameters by slot.
    fn update(&self, q: D, outcome: f64, p: &[D]) -> D;
    /// [`LearningRule::update`] on plain numbers with its partial derivatives (in `q` and the
    /// rule's parameters), for the likelihood's fast path, written to `out` (where the
    /// likelihood keeps it for its backward pass, reading the new value at once); false (the
    /// default) sends the likelihood down the dual-number path.
    fn update_local(&self, _q: f64, _outcome: f64, _p: &[f64], _out: &mut Local) -> bool {
        false
    }
    /// False when values are the offered magnitudes (no learning).
    fn learns(&self) -> bool {
        true
    }
    /// The rule as a [`RateRule`], for the likelihood's fused kernel (which then runs the
    /// [`RateRule`] formula in place of the rule's methods); `None` (the default) for rules it
    /// does not run.
    fn rate_rule(&self) -> Option<RateRule> {
        None
    }
}

/// A learning rule of the form Q ← Q + α·(r − Q) with α = `gain` when the outcome counts as a
/// gain, `loss` otherwise (one rate: both slots the same): the gain-loss rule (Niv et al. 2012)
/// and the delta rule (Rescorla & Wagner 1972) as the likelihood's fused kernel runs them.
/// A rule that returns one from [`LearningRule::rate_rule`] is run by that formula in the
/// kernel, in place of its own methods.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct RateRule {
    /// Slot of the rate for gains.
    pub gain: usize,
    /// Slot of the rate for losses.
    pub loss: usize,
    /// True when a gain is a positive outcome, false when it is a positive prediction error.
    pub by_outcome: bool,
}

impl RateRule {
    /// (Q′, d, slot): the value after outcome `r` from value `q`, the prediction error
    /// d = r − Q and the slot of the rate used. The one formula of both rules' `update_local`
    /// and of the fused kernel.
    #[inline]
    pub(crate) fn update(&self, q: f64, outcome: f64, p: &[f64]) -> (f64, f64, usize) {
        let error = -q + outcome;
        let gain = if self.by_outcome {
            outcome > 0.0
        } else {
            error > 0.0
        };
        let slot = if gain { self.gain } else { self.loss };
        (q + p[slot] * error, error, slot)
    }

    /// [`RateRule::update`] with its partial derivatives, as [`LearningRule::update_local`]
    /// writes them.
    #[inline]
    pub(crate) fn update_local(&self, q: f64, outcome: f64, p: &[f64]) -> Local {
        let (value, error, slot) = self.update(q, outcome, p);
        Local::new(value, 1.0 - p[slot], [(slot, error), (0, 0.0)])
    }
}

/// Discounts a value by the effort it demands.
pub trait CostShape: Send + Sync {
    /// Subjective value of an option with value `q` demanding `effort`.
    fn subjective_value(&self, q: D, effort: f64, p: &[D]) -> D;
    /// [`CostShape::subjective_value`] on plain numbers with its partial derivatives (in `q` and
    /// the shape's parameters); `None` (the default) sends the likelihood down the dual path.
    fn subjective_value_local(&self, _q: f64, _effort: f64, _p: &[f64]) -> Option<Local> {
        None
    }
    /// [`CostShape::subjective_value_local`] of many values at once (`out[i]` for `q[i]` and
    /// `amounts[i]`; one call per stretch of trials, in which the per-value form is inlined);
    /// false when the shape has no plain-number form.
    fn subjective_values_local(
        &self,
        q: &[f64],
        amounts: &[f64],
        p: &[f64],
        out: &mut [Local],
    ) -> bool {
        each_local(q.iter().zip(amounts), out, |(&q, &amount)| {
            self.subjective_value_local(q, amount, p)
        })
    }
    /// The slot of k when the shape is linear, SV = Q − k·E (the fused kernel then runs that
    /// formula in place of the shape's methods); `None` (the default) for other shapes.
    fn linear_weight(&self) -> Option<usize> {
        None
    }
}

/// Maps subjective values to drift rates: the difference of the two options' values for the
/// two-bound diffusion, each option's own value for racing accumulators ([`Signal`]).
pub trait DriftMapping: Send + Sync {
    /// The per-option column prefix the mapping reads (for example `gaze`: columns `gaze_a`,
    /// `gaze_b`, …), if any.
    fn attribute(&self) -> Option<&str> {
        None
    }
    /// The closed range the attribute's values must lie in (for example [0, 1] for shares).
    fn attribute_range(&self) -> (f64, f64) {
        (f64::NEG_INFINITY, f64::INFINITY)
    }
    /// An option's value as it enters the drift, from its subjective value and its value of
    /// [`DriftMapping::attribute`] (the identity for mappings without one).
    fn weighted(&self, subjective_value: D, _attribute: f64, _p: &[D]) -> D {
        subjective_value
    }
    /// The drift rate at x: the weighted value difference (two-bound diffusion) or one option's
    /// weighted value (its accumulator in a race).
    fn drift(&self, x: D, p: &[D]) -> D;
    /// [`DriftMapping::weighted`] on plain numbers with its partial derivatives (in the
    /// subjective value and the mapping's parameters); `None` (the default) sends the likelihood
    /// down the dual path.
    fn weighted_local(&self, _subjective_value: f64, _attribute: f64, _p: &[f64]) -> Option<Local> {
        None
    }
    /// [`DriftMapping::drift`] on plain numbers with its partial derivatives (in x and the
    /// mapping's parameters); `None` (the default) sends the likelihood down the dual path.
    fn drift_local(&self, _x: f64, _p: &[f64]) -> Option<Local> {
        None
    }
    /// [`DriftMapping::weighted_local`] of many values at once (`out[i]` for `values[i]` and
    /// `attributes[i]`); false when the mapping has no plain-number form.
    fn weighted_values_local(
        &self,
        values: &[f64],
        attributes: &[f64],
        p: &[f64],
        out: &mut [Local],
    ) -> bool {
        each_local(values.iter().zip(attributes), out, |(&v, &a)| {
            self.weighted_local(v, a, p)
        })
    }
    /// [`DriftMapping::drift_local`] of many values at once (`out[i]` for `x[i]`); false when
    /// the mapping has no plain-number form.
    fn drifts_local(&self, x: &[f64], p: &[f64], out: &mut [Local]) -> bool {
        each_local(x.iter(), out, |&x| self.drift_local(x, p))
    }
    /// The slots (intercept, scale) when the mapping is the linear one without an attribute,
    /// drift = intercept + scale·x (the fused kernel then runs that formula in place of the
    /// mapping's methods); `None` (the default) otherwise.
    fn linear_slots(&self) -> Option<(usize, usize)> {
        None
    }
}

/// Fills `out` with `local` of each input in turn; false at the first input without an answer.
#[inline]
fn each_local<I>(
    inputs: impl Iterator<Item = I>,
    out: &mut [Local],
    local: impl Fn(I) -> Option<Local>,
) -> bool {
    for (slot, input) in out.iter_mut().zip(inputs) {
        match local(input) {
            Some(answer) => *slot = answer,
            None => return false,
        }
    }
    true
}

/// What a choice stage reads of a trial's subjective values.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Signal {
    /// One drift rate, from the weighted difference of the two options' values.
    DriftDifference,
    /// One drift rate per offered option, from its own weighted value.
    DriftPerOption,
    /// The subjective values themselves (no drift mapping).
    Values,
}

/// What the choice stage sees of one trial.
#[derive(Clone, Copy, Debug)]
pub struct Observation {
    /// The choice, if any.
    pub choice: Option<Choice>,
    /// The response time, if any.
    pub rt: Option<f64>,
}

/// Per-subject facts the choice stage needs.
#[derive(Clone, Copy, Debug)]
pub struct SubjectContext {
    /// Shortest observed response time (for the lapse's uniform time density).
    pub rt_min: f64,
    /// Longest observed response time.
    pub rt_max: f64,
    /// Response deadline in seconds: a trial without response then contributes the probability
    /// that no bound is reached by the deadline.
    pub deadline: Option<f64>,
    /// Response lock in seconds from offer onset: no response can be given earlier (buttons
    /// unlock then), so what is observed is the process conditioned on no bound before it.
    pub lock: Option<f64>,
}

/// Turns a decision signal into the probability of what was observed. The signal is what
/// [`ChoiceStage::signal`] declares: one drift rate (two-bound diffusion), a drift per option
/// (races) or the subjective value of every offered option (softmax).
pub trait ChoiceStage: Send + Sync {
    /// What the stage reads of a trial's subjective values.
    fn signal(&self) -> Signal;
    /// Prepares the stage for one likelihood evaluation (constant parameters computed once).
    fn prepare<'a>(&'a self, p: &'a [D], context: SubjectContext) -> Box<dyn PreparedChoice + 'a>;
    /// True when response times enter the likelihood.
    fn uses_response_times(&self) -> bool;
    /// The most options a trial may offer (`None`: any number).
    fn max_options(&self) -> Option<usize>;
    /// The stage's parameter slots when it is the two-bound diffusion stage of this module (the
    /// fused kernel then scores trials by that stage's formulas in place of the stage's
    /// methods); `None` (the default) for other stages.
    fn diffusion(&self) -> Option<DiffusionSlots> {
        None
    }
    /// The same stage on a coarser discretisation, for stages computed on a grid (the numerical
    /// first-passage engine): what the fitter searches with before it refines on the stage's own
    /// grid (see `crate::fit::search::search_refined`). `None` (the default) for stages in
    /// closed form.
    fn on_coarser_grid(&self) -> Option<Box<dyn ChoiceStage>> {
        None
    }
}

/// A choice stage with its parameters fixed for one likelihood evaluation.
pub trait PreparedChoice {
    /// ln P(observation | signal), with its gradient; `None` for an observation that carries no
    /// information (no response and no deadline).
    fn ln_likelihood(&self, signal: &[D], observation: &Observation) -> Option<D>;
    /// [`PreparedChoice::ln_likelihood`] on plain numbers for the likelihood's fast path: the
    /// value, with ∂/∂signal_k written to `d_signal[k]` and ∂/∂p[slot] added to
    /// `d_parameters[slot]` for the stage's parameters. `Err(NoLocalForm)` (the default) sends
    /// the likelihood down the dual-number path.
    fn ln_likelihood_local(
        &self,
        _signal: &[f64],
        _observation: &Observation,
        _d_signal: &mut [f64],
        _d_parameters: &mut [f64],
    ) -> Result<Option<f64>, NoLocalForm> {
        Err(NoLocalForm)
    }
    /// [`PreparedChoice::ln_likelihood_local`] over the trials of a stretch ([`LocalStretch`]),
    /// for stages read by one drift. The default scores trial by trial
    /// ([`local_trial_by_trial`]); a stage may override it to keep its own parameters' sums in
    /// registers.
    fn ln_likelihood_local_batch(&self, stretch: LocalStretch<'_>) -> Result<(), NoLocalForm> {
        local_trial_by_trial(self, stretch)
    }
    /// P(choose each offered option | signal).
    fn probabilities(&self, signal: &[f64]) -> Vec<f64>;
    /// Expected decision time and expected response time given the signal, where the stage
    /// models time.
    fn expected_times(&self, signal: &[f64]) -> Option<(f64, f64)>;
    /// Draws a choice and a response time (None where the stage models no time).
    fn simulate(&self, signal: &[f64], rng: &mut dyn Rng) -> (Choice, Option<f64>);
}

/// A component without the plain-number form of the likelihood's fast path (the likelihood then
/// takes the dual-number path, which every component has).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct NoLocalForm;

/// Learning rules by name.
pub const LEARNING_RULES: &[Entry<dyn LearningRule>] = &[
    learning_delta::ENTRY,
    learning_gain_loss::ENTRY,
    learning_none::ENTRY,
];

/// Effort-cost shapes by name.
pub const COST_SHAPES: &[Entry<dyn CostShape>] = &[
    cost_none::ENTRY,
    cost_linear::ENTRY,
    cost_quadratic::ENTRY,
    cost_hyperbolic::ENTRY,
    cost_exponential::ENTRY,
];

/// Drift mappings by name.
pub const DRIFT_MAPPINGS: &[Entry<dyn DriftMapping>] =
    &[drift_linear::ENTRY, drift_bounded::ENTRY, drift_gaze::ENTRY];

/// Choice stages by name.
pub const CHOICE_STAGES: &[Entry<dyn ChoiceStage>] = &[
    choice_diffusion::ENTRY,
    choice_softmax::ENTRY,
    choice_race::WALD_ENTRY,
    choice_race::BALLISTIC_ENTRY,
    choice_collapse::LINEAR_ENTRY,
    choice_collapse::HYPERBOLIC_ENTRY,
    choice_collapse::WEIBULL_ENTRY,
    choice_collapse::URGENCY_ENTRY,
    choice_collapse::LEAKY_ENTRY,
];

/// One stretch of trials for [`PreparedChoice::ln_likelihood_local_batch`]: trial i's drift
/// (`drifts[i].value`) and observation in; out, each scored trial's ln ℓᵢ added to `total` in
/// trial order, ∂ln ℓᵢ/∂driftᵢ written to `d_drifts[i]` (untouched for a trial not scored) and
/// the stage parameters' partial derivatives added to `d_parameters` by slot.
pub struct LocalStretch<'a> {
    /// Each trial's drift (its `value`).
    pub drifts: &'a [Local],
    /// Each trial's observation.
    pub observations: &'a [Observation],
    /// ∂ln ℓᵢ/∂driftᵢ.
    pub d_drifts: &'a mut [f64],
    /// ∂ln L/∂p by model slot, added to.
    pub d_parameters: &'a mut [f64],
    /// The running ln L, added to.
    pub total: &'a mut f64,
}

/// [`PreparedChoice::ln_likelihood_local_batch`] by one call of
/// [`PreparedChoice::ln_likelihood_local`] per trial.
pub fn local_trial_by_trial<P: PreparedChoice + ?Sized>(
    stage: &P,
    stretch: LocalStretch<'_>,
) -> Result<(), NoLocalForm> {
    let trials = stretch.drifts.iter().zip(stretch.observations);
    for ((drift, observation), d_drift) in trials.zip(stretch.d_drifts.iter_mut()) {
        let (d_parameters, total) = (&mut *stretch.d_parameters, &mut *stretch.total);
        local_trial(
            stage,
            drift.value,
            observation,
            d_drift,
            d_parameters,
            total,
        )?;
    }
    Ok(())
}

/// One trial of [`local_trial_by_trial`].
pub fn local_trial<P: PreparedChoice + ?Sized>(
    stage: &P,
    drift: f64,
    observation: &Observation,
    d_drift: &mut f64,
    d_parameters: &mut [f64],
    total: &mut f64,
) -> Result<(), NoLocalForm> {
    let mut d_signal = [0.0];
    if let Some(ln_trial) =
        stage.ln_likelihood_local(&[drift], observation, &mut d_signal, d_parameters)?
    {
        *total += ln_trial;
        *d_drift = d_signal[0];
    }
    Ok(())
}

/// True for the choice stages that use the numerical first-passage engine (collapsing bounds,
/// urgency, leak): slower to fit than the closed-form stages.
pub fn uses_numerical_engine(stage: &str) -> bool {
    choice_collapse::STAGE_NAMES.contains(&stage)
}

/// Looks a component up by name in its table.
pub fn find<'t, T: ?Sized>(table: &'t [Entry<T>], name: &str) -> Option<&'t Entry<T>> {
    table.iter().find(|e| e.name == name)
}

/// Rejects option keys a component does not know.
pub fn only_options(options: &Options, known: &[&str]) -> Result<(), String> {
    match options.keys().find(|k| !known.contains(&k.as_str())) {
        Some(key) => Err(format!(
            "unknown option '{key}' (known: {})",
            if known.is_empty() {
                "none".to_string()
            } else {
                known.join(", ")
            }
        )),
        None => Ok(()),
    }
}

/// A cost shape's formula SV = f(Q, E, k) in the single parameter `effort_weight` k, written
/// once on any dual number: the likelihood's (`D`) for the reference path, one-direction duals
/// for the fast path's partial derivatives.
pub(super) trait Formula: Send + Sync + 'static {
    /// True for the linear shape SV = Q − k·E.
    const LINEAR: bool = false;
    /// SV = f(Q, E, k).
    fn formula<N: DualNum<Primitive = f64> + Copy>(q: N, effort: f64, k: N) -> N;
}

/// A cost shape given by its [`Formula`].
struct WeightedCost<F> {
    weight: Option<usize>,
    formula: PhantomData<F>,
}

impl<F: Formula> CostShape for WeightedCost<F> {
    fn subjective_value(&self, q: D, effort: f64, p: &[D]) -> D {
        let k = self.weight.map_or(D::from_re(0.0), |slot| p[slot]);
        F::formula(q, effort, k)
    }

    #[inline]
    fn subjective_value_local(&self, q: f64, effort: f64, p: &[f64]) -> Option<Local> {
        let k = self.weight.map_or(0.0, |slot| p[slot]);
        // Two passes of one-direction duals: ∂/∂Q, then ∂/∂k (the value is the same in both).
        let by_q = F::formula(Dual64::from(q).derivative(), effort, Dual64::from(k));
        let d_k = self.weight.map_or((0, 0.0), |slot| {
            let by_k = F::formula(Dual64::from(q), effort, Dual64::from(k).derivative());
            (slot, by_k.eps)
        });
        Some(Local::new(by_q.re, by_q.eps, [d_k, (0, 0.0)]))
    }

    fn linear_weight(&self) -> Option<usize> {
        self.weight.filter(|_| F::LINEAR)
    }
}

/// Builds the cost shape of formula `F`; `uses_weight` is false for the shape without cost.
fn weighted_cost<F: Formula>(
    options: &Options,
    slots: Slots<'_>,
    uses_weight: bool,
) -> Result<Box<dyn CostShape>, String> {
    only_options(options, &[])?;
    Ok(Box::new(WeightedCost::<F> {
        weight: uses_weight.then(|| slots("effort_weight")),
        formula: PhantomData,
    }))
}
