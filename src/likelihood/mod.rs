//! The per-subject likelihood: the learning recursion run over a subject's trials, each trial's
//! choice (and response time) scored by the model's choice stage, with the exact gradient with
//! respect to the unconstrained free parameters. A response whose time was trimmed still counts
//! by its choice alone (and its outcome still updates the values).
//!
//! Per trial, with values before the trial's outcome (see [`SubjectLikelihood::trace`]):
//! SV_i = cost(Q(option_i), effort_i), signal = drift(SV_a − SV_b) for the two-bound diffusion,
//! drift(SV_i) per option for races, the SV_i themselves for stages without a drift mapping
//! (a gaze-weighted mapping first weighs each SV_i by its gaze share), ln L += ln P(choice, rt |
//! signal); then, after a response with
//! feedback r, Q(chosen) ← rule(Q(chosen), r) and, with forgetting, every other option
//! Q ← Q + forget_rate·(initial_value − Q).

mod adjoint;
mod design;
mod group_prior;
mod kernel;

pub use design::TrialColumns;
pub use group_prior::GroupPrior;

use crate::data::{Choice, Subject, Trial};
use crate::model::components::{Observation, Signal, SubjectContext};
use crate::model::dual::{D, MAX_FREE, constant, gradient};
use crate::model::{Model, Transform};

/// The data do not suit the model.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
#[error("subject {subject}: {message}")]
pub struct DataMismatch {
    /// Subject label.
    pub subject: String,
    /// What is missing.
    pub message: String,
}

/// Log-likelihood (plus log-prior) and its gradient at one point of the unconstrained scale.
#[derive(Clone, Debug, PartialEq)]
pub struct Evaluation {
    /// ln L: the sum of per-trial log-probabilities.
    pub ln_likelihood: f64,
    /// ln of the product of declared prior densities at the natural values (0 without priors).
    pub ln_prior: f64,
    /// ∂(ln L + ln prior)/∂θ for the free parameters θ (unconstrained scale).
    pub gradient: Vec<f64>,
}

/// Every model quantity of one trial, from [`SubjectLikelihood::trace`].
#[derive(Clone, Debug, PartialEq)]
pub struct TrialTrace {
    /// Learned (or offered) value of each offered option (a, b, …) before the trial's outcome.
    pub values: Vec<f64>,
    /// Subjective value of each offered option after its costs.
    pub subjective_values: Vec<f64>,
    /// What the choice stage sees: the drift rate (one value) for stages with a drift mapping,
    /// otherwise the subjective values.
    pub signal: Vec<f64>,
    /// Prediction error at the outcome (None without response or feedback, or without learning).
    pub prediction_error: Option<f64>,
    /// ln P(observation) of the trial, None when it carries no information.
    pub ln_likelihood: Option<f64>,
    /// Model probability of choosing each offered option.
    pub probabilities: Vec<f64>,
    /// Expected decision time and response time, where the model has time.
    pub expected_times: Option<(f64, f64)>,
    /// The components' parameters on this trial (in the order of
    /// [`Model::component_parameters`]) when some vary over trials; empty otherwise.
    pub parameters: Vec<f64>,
}

impl TrialTrace {
    /// The drift rate or other decision signal when it is one number (two-option stages with
    /// a drift mapping), else the difference of the first two subjective values.
    pub fn decision_signal(&self) -> f64 {
        match self.signal.as_slice() {
            [one] => *one,
            _ => self.subjective_values[0] - self.subjective_values[1],
        }
    }
}

/// One subject's data bound to one model.
#[derive(Clone)]
pub struct SubjectLikelihood<'a> {
    model: &'a Model,
    subject: &'a Subject,
    context: SubjectContext,
    /// Slot in the model's parameter list of each free parameter.
    free: Vec<usize>,
    /// Transform of each free parameter (subject-specific for ndt).
    transforms: Vec<Transform>,
    /// A Gaussian prior on θ that replaces the declared priors (empirical Bayes).
    group_prior: Option<GroupPrior>,
    /// Levels and covariates of the parameters that vary over trials.
    design: TrialColumns,
    /// Transform of every model parameter by slot (free ones as in `transforms`).
    slot_transforms: Vec<Transform>,
    /// The trial columns of the fast path, laid out once.
    fast_columns: adjoint::FastColumns,
    /// The fused kernel, when the model and the data are inside it.
    kernel: Option<kernel::Kernel>,
}

/// Upper limit of the earliest possible response, ndt − ndt_range/2, relative to the fastest
/// response: the density is zero below it.
const NDT_BELOW_FASTEST: f64 = 0.999;

impl<'a> SubjectLikelihood<'a> {
    /// Binds a subject to a model; `deadline` (seconds) makes trials without response count as
    /// "no bound reached by the deadline".
    pub fn new(
        model: &'a Model,
        subject: &'a Subject,
        deadline: Option<f64>,
    ) -> Result<Self, DataMismatch> {
        let mismatch = |message: String| DataMismatch {
            subject: subject.id.clone(),
            message,
        };
        if subject.n_responses() == 0 {
            return Err(mismatch("no trial with a response".into()));
        }
        let rts: Vec<f64> = subject.response_times().collect();
        // A response without a time (trimmed) is scored by its choice alone; the time range
        // (ndt's bound, the lapse density) comes from the responses that keep their time.
        if model.uses_response_times() && rts.is_empty() {
            return Err(mismatch(format!(
                "model {} uses response times, but none of the {} responses has one",
                model.name,
                subject.n_responses()
            )));
        }
        if !model.learns()
            && let Some(t) = subject
                .trials
                .iter()
                .find(|t| t.offers.iter().any(|o| o.reward.is_none()))
        {
            return Err(mismatch(format!(
                "model {} uses offered values, but trial {} lacks the reward of an option \
                 (reward_a, reward_b, …)",
                model.name, t.trial
            )));
        }
        if let Some(most) = model.choice.max_options()
            && let Some(t) = subject.trials.iter().find(|t| t.offers.len() > most)
        {
            return Err(mismatch(format!(
                "the {} choice stage of model {} chooses between {most} options, but trial {} \
                 offers {}; use a stage for more options (softmax)",
                model.component_names[3],
                model.name,
                t.trial,
                t.offers.len()
            )));
        }
        let rt_min = rts.iter().copied().fold(f64::INFINITY, f64::min);
        let rt_max = rts.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        let context = SubjectContext {
            rt_min: if rt_min.is_finite() { rt_min } else { 0.0 },
            rt_max: if rt_max.is_finite() { rt_max } else { 1.0 },
            deadline,
            lock: None,
        };
        let design = TrialColumns::bind(model, subject)?;
        let free = model.free_slots();
        let mut transforms = Vec::with_capacity(free.len());
        let mut slot_transforms: Vec<Transform> =
            model.parameters.iter().map(|p| p.transform()).collect();
        // The largest width of a uniform non-decision time (diffusion stage): responses can
        // come from ndt − ndt_range/2 on.
        let widest_ndt_range = (0..model.parameters.len())
            .filter(|&slot| model.component_parameter_of(slot) == "ndt_range")
            .map(|slot| model.parameters[slot].upper)
            .fold(0.0, f64::max);
        for &slot in &free {
            let spec = &model.parameters[slot];
            let mut upper = spec.upper;
            if model.component_parameter_of(slot) == "ndt" && model.uses_response_times() {
                // The earliest possible response, ndt − ndt_range/2, below the fastest response
                // of the trials that use this ndt (all trials, or those of its level when ndt
                // differs by condition). A box bound on ndt alone can only use the widest
                // allowed ndt_range: below it ndt keeps every value the data allow, and the
                // points between with a narrower ndt_range, whose density is zero at the fastest
                // response, have likelihood zero (the fitter treats them as invalid). Without an
                // ndt_range this is ndt < 0.999·fastest.
                let fastest = ndt_trials(model, subject, &design, slot)
                    .filter_map(|t| t.rt)
                    .fold(f64::INFINITY, f64::min);
                if fastest.is_finite() {
                    upper = upper.min(NDT_BELOW_FASTEST * fastest + 0.5 * widest_ndt_range);
                }
                if upper <= spec.lower {
                    return Err(mismatch(format!(
                        "the fastest response ({fastest} s) is not above the lower bound of {} ({})",
                        spec.name, spec.lower
                    )));
                }
            }
            let transform = Transform::from_bounds(spec.lower, upper);
            slot_transforms[slot] = transform;
            transforms.push(transform);
        }
        let fast_columns = adjoint::FastColumns::bind(model, subject, &design);
        let kernel = kernel::Kernel::bind(model, subject, deadline);
        Ok(SubjectLikelihood {
            model,
            subject,
            context,
            free,
            transforms,
            group_prior: None,
            design,
            slot_transforms,
            fast_columns,
            kernel,
        })
    }

    /// This likelihood's subject, deadline, lock and prior bound to `model` instead, which must
    /// have the same parameters (for example [`Model::on_coarser_grid`] of this one's model).
    pub fn with_model<'m>(&self, model: &'m Model) -> Result<SubjectLikelihood<'m>, DataMismatch>
    where
        'a: 'm,
    {
        let mut bound = SubjectLikelihood::new(model, self.subject, self.context.deadline)?;
        bound.context.lock = self.context.lock;
        bound.group_prior.clone_from(&self.group_prior);
        Ok(bound)
    }

    /// The same likelihood with a Gaussian prior on θ in place of the model's declared priors.
    pub fn with_group_prior(mut self, prior: GroupPrior) -> Self {
        assert_eq!(prior.dimension(), self.free.len());
        self.group_prior = Some(prior);
        self
    }

    /// The same likelihood with a response lock (seconds from offer onset) before which no
    /// response can be given: each trial then scores the process conditioned on no bound before
    /// the lock (see the diffusion choice stage).
    pub fn with_lock(mut self, lock: Option<f64>) -> Self {
        self.context.lock = lock;
        self
    }

    /// The Gaussian prior on θ, if one replaces the declared priors.
    pub fn group_prior(&self) -> Option<&GroupPrior> {
        self.group_prior.as_ref()
    }

    /// True when every free parameter has a proper prior (declared, or the group prior), so
    /// that a marginal likelihood exists.
    pub fn has_proper_prior(&self) -> bool {
        self.group_prior.is_some()
            || self
                .free
                .iter()
                .all(|&slot| self.model.parameters[slot].prior.is_some())
    }

    /// Number of free parameters.
    pub fn n_free(&self) -> usize {
        self.free.len()
    }

    /// The model.
    pub fn model(&self) -> &Model {
        self.model
    }

    /// The subject.
    pub fn subject(&self) -> &Subject {
        self.subject
    }

    /// Number of trials that enter the likelihood.
    pub fn n_observations(&self) -> usize {
        self.subject
            .trials
            .iter()
            .filter(|t| t.choice.is_some() || self.context.deadline.is_some())
            .count()
    }

    /// Transforms of the free parameters, in order.
    pub fn transforms(&self) -> &[Transform] {
        &self.transforms
    }

    /// Natural-scale values of all parameters (fixed ones included) for unconstrained θ.
    pub fn natural(&self, theta: &[f64]) -> Vec<f64> {
        self.natural_duals(theta).iter().map(|d| d.re).collect()
    }

    /// θ for natural values of the free parameters.
    pub fn unconstrained(&self, free_values: &[f64]) -> Vec<f64> {
        free_values
            .iter()
            .zip(&self.transforms)
            .map(|(&x, t)| t.unconstrained(x))
            .collect()
    }

    /// The subject-specific (lower, upper) bounds of each free parameter.
    pub fn free_bounds(&self) -> Vec<(f64, f64)> {
        self.transforms
            .iter()
            .map(|t| match *t {
                Transform::Logistic { lower, upper } => (lower, upper),
                Transform::Exp { lower } => (lower, f64::INFINITY),
                Transform::ExpBelow { upper } => (f64::NEG_INFINITY, upper),
                Transform::Identity => (f64::NEG_INFINITY, f64::INFINITY),
            })
            .collect()
    }

    fn natural_duals(&self, theta: &[f64]) -> Vec<D> {
        self.duals(theta).0
    }

    /// Natural values and unconstrained values (θ) of every model parameter by slot, as dual
    /// numbers carrying ∂/∂θ of the free parameters (fixed ones are constants; their θ is
    /// never used).
    fn duals(&self, theta: &[f64]) -> (Vec<D>, Vec<D>) {
        let mut values: Vec<D> = self
            .model
            .parameters
            .iter()
            .map(|p| constant(p.fixed.unwrap_or(f64::NAN)))
            .collect();
        let mut thetas = vec![constant(f64::NAN); values.len()];
        for (j, (&slot, transform)) in self.free.iter().zip(&self.transforms).enumerate() {
            thetas[slot] = D::from_re(theta[j]).derivative(j);
            values[slot] = transform.to_natural(thetas[slot]);
        }
        (values, thetas)
    }

    /// ln L + ln prior and its gradient at θ. The prior is the group prior on θ when one is
    /// set, else the product of the declared priors on the natural scale.
    ///
    /// Models with parameters that are the same on every trial, a two-bound choice stage and
    /// built-in components (or components that give their plain-number form) take the fast path
    /// of the `adjoint` module: the same ln L, and the gradient of
    /// [`SubjectLikelihood::evaluate_reference`] up to the order of its sums. The others take
    /// that dual-number path. Within the fast path, the commonest built-in combination (rate
    /// learning, linear effort cost, linear drift, diffusion stage; see the `kernel` module)
    /// takes a fused kernel that gives the same numbers to the last bit
    /// ([`SubjectLikelihood::evaluate_without_kernel`]). Where ln L is −∞ the dual-number path
    /// stops at the first trial with no chance and gives a gradient of NaN (undefined there).
    pub fn evaluate(&self, theta: &[f64]) -> Evaluation {
        self.evaluate_fast(theta, true)
    }

    /// ln L alone at θ, the same number as [`SubjectLikelihood::evaluate`]'s `ln_likelihood` to
    /// the last bit: the fused kernel without its derivatives where it applies, else
    /// [`SubjectLikelihood::evaluate`] itself (for draws where only the value is used, such as
    /// the integrated BIC's).
    pub fn ln_likelihood(&self, theta: &[f64]) -> f64 {
        assert!(theta.len() == self.free.len());
        let (natural, _) = self.plain_values(theta);
        self.kernel
            .as_ref()
            .and_then(|k| k.ln_likelihood(&natural, self.context.lock))
            .unwrap_or_else(|| self.evaluate(theta).ln_likelihood)
    }

    /// [`SubjectLikelihood::evaluate`] without the fused kernel: the generic fast path (or the
    /// dual-number path outside it), which the kernel must match to the last bit (for tests and
    /// benchmarks).
    pub fn evaluate_without_kernel(&self, theta: &[f64]) -> Evaluation {
        self.evaluate_fast(theta, false)
    }

    /// True when [`SubjectLikelihood::evaluate`] takes the fused kernel at θ.
    pub fn takes_kernel(&self, theta: &[f64]) -> bool {
        let (natural, _) = self.plain_values(theta);
        self.run_kernel(&natural).is_some()
    }

    /// The fused kernel's ln L and partial derivatives at the natural values of every
    /// parameter, when the model, the data and the point are inside it.
    fn run_kernel(&self, natural: &[f64]) -> Option<adjoint::Adjoint> {
        self.kernel.as_ref()?.run(natural, self.context.lock)
    }

    /// [`SubjectLikelihood::evaluate`], with the fused kernel where it applies when `kernel`.
    fn evaluate_fast(&self, theta: &[f64], kernel: bool) -> Evaluation {
        assert!(theta.len() == self.free.len());
        let (natural, thetas) = self.plain_values(theta);
        let fused = if kernel {
            self.run_kernel(&natural)
        } else {
            None
        };
        let Some(adjoint) = fused.or_else(|| self.run_adjoint(&natural, &thetas)) else {
            return self.evaluate_reference(theta);
        };
        let slopes: Vec<f64> = self
            .transforms
            .iter()
            .zip(theta)
            .map(|(transform, &t)| transform.slope(t))
            .collect();
        let gradient = self
            .free
            .iter()
            .zip(&slopes)
            .map(|(&slot, slope)| adjoint.d_natural[slot] * slope + adjoint.d_theta[slot])
            .collect();
        self.with_prior(theta, adjoint.ln_likelihood, gradient, &natural, &slopes)
    }

    /// True when [`SubjectLikelihood::evaluate`] takes the fast (adjoint) path for this model and
    /// subject at θ, false when it takes the dual-number path.
    pub fn takes_fast_path(&self, theta: &[f64]) -> bool {
        let (natural, thetas) = self.plain_values(theta);
        self.run_kernel(&natural).is_some() || self.run_adjoint(&natural, &thetas).is_some()
    }

    /// Natural values and θ of every parameter by slot on plain numbers (the real parts of
    /// [`SubjectLikelihood::duals`]).
    fn plain_values(&self, theta: &[f64]) -> (Vec<f64>, Vec<f64>) {
        let mut natural: Vec<f64> = self
            .model
            .parameters
            .iter()
            .map(|p| p.fixed.unwrap_or(f64::NAN))
            .collect();
        let mut thetas = vec![f64::NAN; natural.len()];
        for ((&slot, transform), &t) in self.free.iter().zip(&self.transforms).zip(theta) {
            natural[slot] = transform.natural(t);
            thetas[slot] = t;
        }
        (natural, thetas)
    }

    /// [`SubjectLikelihood::evaluate`] by the general path, which every model can take: dual
    /// numbers carrying ∂/∂θ through every quantity of every trial.
    pub fn evaluate_reference(&self, theta: &[f64]) -> Evaluation {
        assert!(theta.len() == self.free.len() && self.free.len() <= MAX_FREE);
        let (p, thetas) = self.duals(theta);
        let ln_l = self.run(&p, &thetas, None);
        let n = self.free.len();
        let natural: Vec<f64> = p.iter().map(|x| x.re).collect();
        let slopes: Vec<f64> = self
            .free
            .iter()
            .enumerate()
            .map(|(j, &slot)| gradient(&p[slot])[j])
            .collect();
        // ln L = −∞ returns before every trial is scored (see `run`): its gradient is undefined.
        let gradient = if ln_l.re == f64::NEG_INFINITY {
            vec![f64::NAN; n]
        } else {
            gradient(&ln_l).iter().take(n).copied().collect()
        };
        self.with_prior(theta, ln_l.re, gradient, &natural, &slopes)
    }

    /// The evaluation from ln L and its gradient in θ: adds the prior (the group prior on θ,
    /// else the declared priors at the natural values, chained by the slopes dx/dθ of the free
    /// parameters).
    fn with_prior(
        &self,
        theta: &[f64],
        ln_likelihood: f64,
        mut gradient: Vec<f64>,
        natural: &[f64],
        slopes: &[f64],
    ) -> Evaluation {
        let mut ln_prior = 0.0;
        if let Some(prior) = &self.group_prior {
            let (value, slope) = prior.ln_density_with_gradient(theta);
            ln_prior = value;
            for (g, s) in gradient.iter_mut().zip(&slope) {
                *g += s;
            }
        } else {
            for ((&slot, g), dx) in self.free.iter().zip(&mut gradient).zip(slopes) {
                if let Some(prior) = &self.model.parameters[slot].prior {
                    let (value, slope) = prior.ln_density_with_slope(natural[slot]);
                    ln_prior += value;
                    *g += dx * slope;
                }
            }
        }
        Evaluation {
            ln_likelihood,
            ln_prior,
            gradient,
        }
    }

    /// Every per-trial quantity at the natural-scale values `natural` (all parameters, as from
    /// [`SubjectLikelihood::natural`]).
    pub fn trace(&self, natural: &[f64]) -> Vec<TrialTrace> {
        let p: Vec<D> = natural.iter().map(|&x| constant(x)).collect();
        let thetas: Vec<D> = natural
            .iter()
            .zip(&self.slot_transforms)
            .map(|(&x, g)| constant(g.unconstrained(x)))
            .collect();
        let mut out = Vec::with_capacity(self.subject.trials.len());
        self.run(&p, &thetas, Some(&mut |trace, _| out.push(trace)));
        out
    }

    /// Runs the recursion; `visit`, when given, sees every trial's quantities (with its index).
    /// `p` and `thetas` hold every model parameter by slot, on the natural and the unconstrained
    /// scale. Without `visit` it returns as soon as the sum is −∞ (a trial the model gives no
    /// chance): ln L is then −∞ whatever the other trials add, and their scores would be
    /// wasted work (a line search's trial step far out, where the numerical engine's solves at
    /// a wide span of drifts cost seconds, gives such points). The gradient of a −∞ value is
    /// not used.
    fn run(
        &self,
        p: &[D],
        thetas: &[D],
        mut visit: Option<&mut dyn FnMut(TrialTrace, usize)>,
    ) -> D {
        let model = self.model;
        let mut total = constant(0.0);
        if !model.varies() {
            // Every parameter is the same on every trial: the components' parameters are the
            // model's, and the choice stage is prepared once.
            let mut values = Values::new(model, p, self.subject.options.len());
            let prepared = model.choice.prepare(p, self.context);
            for (index, trial) in self.subject.trials.iter().enumerate() {
                let step = Step {
                    index,
                    trial,
                    p,
                    record_parameters: false,
                };
                if let Some(l) = self.step(step, prepared.as_ref(), &mut values, &mut visit) {
                    total += l;
                    if total.re == f64::NEG_INFINITY && visit.is_none() {
                        return total;
                    }
                }
            }
            return total;
        }
        // Stretches of trials with the same parameters (a block, a condition) share one
        // prepared choice stage.
        let mut trial_p = Vec::with_capacity(model.sources.len());
        let mut values: Option<Values> = None;
        let trials = &self.subject.trials;
        let mut from = 0;
        while from < trials.len() {
            let until = self.design.same_parameters_until(from);
            self.design
                .values_into(model, from, p, thetas, &self.slot_transforms, &mut trial_p);
            let values = values
                .get_or_insert_with(|| Values::new(model, &trial_p, self.subject.options.len()));
            let prepared = model.choice.prepare(&trial_p, self.context);
            for (index, trial) in trials.iter().enumerate().take(until).skip(from) {
                let step = Step {
                    index,
                    trial,
                    p: &trial_p,
                    record_parameters: true,
                };
                if let Some(l) = self.step(step, prepared.as_ref(), values, &mut visit) {
                    total += l;
                    if total.re == f64::NEG_INFINITY && visit.is_none() {
                        return total;
                    }
                }
            }
            from = until;
        }
        total
    }

    /// Scores one trial with the components' parameters and learns from its outcome; when
    /// `visit` is given it sees the trial's quantities.
    fn step(
        &self,
        step: Step<'_>,
        prepared: &dyn crate::model::components::PreparedChoice,
        values: &mut Values,
        visit: &mut Option<&mut dyn FnMut(TrialTrace, usize)>,
    ) -> Option<D> {
        let model = self.model;
        let Step {
            index,
            trial,
            p,
            record_parameters,
        } = step;
        values.appraise(model, trial, p, self.design.attribute_values(index));
        let observation = Observation {
            choice: trial.choice,
            rt: trial.rt,
        };
        let ln_trial = prepared.ln_likelihood(&values.appraisal.signal, &observation);
        let trace = visit.as_ref().map(|_| {
            let re = |x: &[D]| -> Vec<f64> { x.iter().map(|d| d.re).collect() };
            let signal = re(&values.appraisal.signal);
            TrialTrace {
                values: re(&values.appraisal.values),
                subjective_values: re(&values.appraisal.subjective),
                probabilities: prepared.probabilities(&signal),
                expected_times: prepared.expected_times(&signal),
                signal,
                prediction_error: None,
                ln_likelihood: ln_trial.map(|l| l.re),
                parameters: if record_parameters {
                    p.iter().map(|x| x.re).collect()
                } else {
                    Vec::new()
                },
            }
        });
        let prediction_error = match (trial.choice, trial.outcome) {
            (Some(choice), Some(r)) => values.learn(model, trial, choice, r, p),
            _ => None,
        };
        if let (Some(visit), Some(trace)) = (visit.as_mut(), trace) {
            visit(
                TrialTrace {
                    prediction_error,
                    ..trace
                },
                index,
            );
        }
        ln_trial
    }
}

/// One trial to score: its index and data, and the components' parameters on it.
struct Step<'s> {
    index: usize,
    trial: &'s Trial,
    p: &'s [D],
    record_parameters: bool,
}

/// The trials whose ndt is the model parameter in `slot`: every trial, or those of its level.
fn ndt_trials<'s>(
    model: &Model,
    subject: &'s Subject,
    design: &TrialColumns,
    slot: usize,
) -> impl Iterator<Item = &'s Trial> {
    let k = model
        .component_parameters
        .iter()
        .position(|c| c == "ndt")
        .unwrap_or(0);
    // Index of ndt among the varying parameters, if it varies.
    let varying_index = model.sources[..k]
        .iter()
        .filter(|s| matches!(s, crate::model::varying::Source::Varying(_)))
        .count();
    let varies = matches!(model.sources[k], crate::model::varying::Source::Varying(_));
    subject
        .trials
        .iter()
        .enumerate()
        .filter(move |(t, _)| !varies || design.levels_of(*t)[varying_index] == slot)
        .map(|(_, trial)| trial)
}

/// What the model computes for one trial's offers, before its outcome (buffers reused from
/// trial to trial).
#[derive(Default)]
pub(crate) struct Appraisal {
    /// Learned (or offered) value of each offered option.
    pub values: Vec<D>,
    /// Subjective value of each offered option.
    pub subjective: Vec<D>,
    /// The choice stage's input: the drift (stages with a drift mapping) or the subjective
    /// values.
    pub signal: Vec<D>,
}

/// The learned values of a subject's options during the recursion (shared by the likelihood
/// and the simulator, so that both run the same model), with the current trial's appraisal.
pub(crate) struct Values {
    values: Vec<D>,
    initial: D,
    pub appraisal: Appraisal,
}

impl Values {
    pub(crate) fn new(model: &Model, p: &[D], n_options: usize) -> Values {
        let initial = model.initial_slot.map_or(constant(0.0), |s| p[s]);
        Values {
            values: vec![initial; n_options.max(2)],
            initial,
            appraisal: Appraisal::default(),
        }
    }

    /// Appraises a trial's offers into [`Values::appraisal`]: values, subjective values after
    /// the cost attributes in order (SV = f_n(…f_1(Q, E_1)…, E_n)) and the decision signal;
    /// `attributes` holds the trial's values of the cost attributes other than effort, one per
    /// offered option for each attribute in model order.
    pub(crate) fn appraise(&mut self, model: &Model, trial: &Trial, p: &[D], attributes: &[f64]) {
        let n = trial.offers.len();
        let a = &mut self.appraisal;
        a.values.clear();
        a.subjective.clear();
        a.signal.clear();
        for offer in &trial.offers {
            a.values.push(if model.learns() {
                self.values[offer.option]
            } else {
                constant(offer.reward.unwrap_or(f64::NAN))
            });
        }
        a.subjective.extend_from_slice(&a.values);
        let mut others = attributes.chunks_exact(n.max(1));
        for cost in &model.costs {
            let extra = if cost.is_effort() {
                None
            } else {
                Some(others.next().expect("bound with the model's attributes"))
            };
            for (k, sv) in a.subjective.iter_mut().enumerate() {
                let amount = extra.map_or(trial.offers[k].effort, |e| e[k]);
                *sv = cost.shape.subjective_value(*sv, amount, p);
            }
        }
        let Some(mapping) = &model.drift else {
            a.signal.extend_from_slice(&a.subjective);
            return;
        };
        // The mapping's own attribute (for example gaze shares) follows the cost attributes.
        let own = others.next();
        let weighted = |k: usize| mapping.weighted(a.subjective[k], own.map_or(0.0, |x| x[k]), p);
        match model.choice.signal() {
            // Two-bound stages choose between two options (checked when binding).
            Signal::DriftDifference => {
                let difference = weighted(0) - weighted(1);
                a.signal.push(mapping.drift(difference, p));
            }
            Signal::DriftPerOption => {
                for k in 0..n {
                    let x = weighted(k);
                    a.signal.push(mapping.drift(x, p));
                }
            }
            Signal::Values => a.signal.extend_from_slice(&a.subjective),
        }
    }

    /// Learns from outcome `r` of the chosen option; returns the prediction error (None for a
    /// model without learning).
    pub(crate) fn learn(
        &mut self,
        model: &Model,
        trial: &Trial,
        choice: Choice,
        r: f64,
        p: &[D],
    ) -> Option<f64> {
        if !model.learns() {
            return None;
        }
        let chosen = trial.offers[choice.index()].option;
        let prediction_error = r - self.values[chosen].re;
        self.values[chosen] = model.learning.update(self.values[chosen], r, p);
        if let Some(slot) = model.forget_slot {
            let initial = self.initial;
            for (k, v) in self.values.iter_mut().enumerate() {
                if k != chosen {
                    *v += p[slot] * (initial - *v);
                }
            }
        }
        Some(prediction_error)
    }
}
