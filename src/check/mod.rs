//! Predictive checks of a fitted model: does the model, run forward with a subject's fitted
//! parameters, reproduce that subject's choices and response times?
//!
//! Each subject is simulated `sims` times with its fitted (natural-scale) parameters, on a
//! ChaCha8 generator seeded with the run's seed and set to the subject's own stream (its index in
//! the trial table), so results do not depend on the thread count. Two modes:
//! - **free** ([`Mode::Free`]) where every trial gives what each option would have delivered
//!   (`outcome_if_a`, `outcome_if_b`): the whole task is simulated, learning from the simulated
//!   choices ([`crate::simulate::simulate_subject`]);
//! - **one step ahead** ([`Mode::OneStepAhead`]) otherwise: the learning recursion follows the
//!   observed choices and outcomes ([`SubjectLikelihood::trace`]) and each trial's choice and
//!   response time is drawn from the choice stage at that trial's decision signal
//!   ([`crate::simulate::draw_trial`], the simulator's own code path).
//!
//! Statistics of a dataset (observed or simulated), per bin: the proportion of responses that
//! chose the option with the larger subjective value under the fitted model ("correct by value"),
//! and the response-time quantiles .1 .3 .5 .7 .9 (Ratcliff & Tuerlinckx 2002) of correct-by-value
//! and of other responses (at least [`MIN_RTS`] response times in the cell). Trials whose two
//! subjective values are equal have no correct-by-value option and are left out. Bins:
//! - [`Factor::ValueDifference`]: quintiles of the subject's own observed |SV_a − SV_b|;
//! - [`Factor::Effort`]: the effort demanded by the correct-by-value option (the better option's
//!   effort), one bin per distinct observed level when there are at most six levels, else
//!   quintiles. A dataset's trials are classified by its own value trajectory (in free mode each
//!   replicate learns differently), and binned with the observed bin edges;
//! - [`Factor::Condition`], with [`CheckSettings::condition`]: one bin per level of a column of
//!   the trial table (a condition, block or session), levels in order of first appearance in the
//!   table, so that the bins of every subject line up for pooling.
//!
//! Predicted: the mean, standard deviation and the 2.5 % and 97.5 % quantiles across replicate
//! datasets of each statistic. Pooled statistics average the per-subject statistics of the same
//! bin index (quantile averaging, "Vincentizing": Ratcliff 1979), the observed ones and those of
//! each replicate alike, so the pooled band is the spread of the pooled replicate datasets.
//! Quantiles are of type 7 of Hyndman & Fan (1996) ([`quantile_sorted`]).

pub mod plots;

use crate::data::{Choice, Subject};
use crate::likelihood::{DataMismatch, SubjectLikelihood, TrialTrace};
use crate::model::Model;
use crate::model::components::SubjectContext;
use crate::model::dual::{D, constant};
use crate::results::{Column, Table};
use crate::simulate::{SimulationSettings, draw_trial, simulate_subject};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

/// Response-time quantiles reported (Ratcliff & Tuerlinckx 2002).
pub const RT_QUANTILES: [f64; 5] = [0.1, 0.3, 0.5, 0.7, 0.9];
/// Fewest response times in a cell for its quantiles to be computed.
pub const MIN_RTS: usize = 5;
/// Fewest replicate datasets with a value for a statistic to have a predicted band.
pub const MIN_REPLICATES: usize = 10;
/// A subject is flagged when more than this fraction of its observed statistics fall outside
/// their 95 % bands (three times the nominal 5 %; our own rule of thumb).
pub const FLAG_FRACTION: f64 = 0.15;
/// Most distinct effort levels that get one bin each.
const MAX_EFFORT_LEVELS: usize = 6;
/// Subjective values closer than this count as equal (no correct-by-value option).
const TIE: f64 = 1e-12;

/// Sample quantile of type 7 of Hyndman & Fan (1996), the default of R and numpy: with the
/// values sorted ascending x₁ ≤ … ≤ xₙ and h = (n − 1)·p, Q(p) = x_{⌊h⌋+1} + (h − ⌊h⌋)·(x_{⌊h⌋+2} −
/// x_{⌊h⌋+1}). `sorted` must be ascending and non-empty, `p` in [0, 1]; returns None otherwise.
pub fn quantile_sorted(sorted: &[f64], p: f64) -> Option<f64> {
    if sorted.is_empty() || !(0.0..=1.0).contains(&p) {
        return None;
    }
    let h = (sorted.len() - 1) as f64 * p;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(sorted.len() - 1);
    Some(sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo]))
}

/// How a subject was simulated.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Mode {
    /// The whole task, learning from simulated choices (potential outcomes known).
    Free,
    /// Each trial drawn from the choice stage given the observed history.
    OneStepAhead,
}

impl Mode {
    /// Label in the tables.
    pub fn as_str(self) -> &'static str {
        match self {
            Mode::Free => "free",
            Mode::OneStepAhead => "one_step_ahead",
        }
    }

    /// Free when every offer of every trial has its outcome_if (`outcome_if_a`, `outcome_if_b`,
    /// …), else one step ahead.
    pub fn for_subject(subject: &Subject) -> Mode {
        if subject
            .trials
            .iter()
            .all(|t| t.offers.iter().all(|o| o.outcome_if.is_some()))
        {
            Mode::Free
        } else {
            Mode::OneStepAhead
        }
    }
}

/// What the trials are binned by.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Factor {
    /// |SV_a − SV_b| under the fitted model (quintiles).
    ValueDifference,
    /// Effort demanded by the correct-by-value option.
    Effort,
    /// The level of a column of the trial table ([`CheckSettings::condition`]).
    Condition,
}

impl Factor {
    /// Label in the tables.
    pub fn as_str(self) -> &'static str {
        match self {
            Factor::ValueDifference => "abs_value_difference",
            Factor::Effort => "effort_of_better_option",
            Factor::Condition => "condition",
        }
    }
}

/// Which responses a response-time quantile is of.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Response {
    /// Chose the option with the larger subjective value.
    CorrectByValue,
    /// Chose the other option.
    Other,
}

impl Response {
    /// Label in the tables.
    pub fn as_str(self) -> &'static str {
        match self {
            Response::CorrectByValue => "correct_by_value",
            Response::Other => "other",
        }
    }
}

/// What a statistic measures.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Kind {
    /// Proportion of responses that were correct by value.
    ChoiceProportion,
    /// Response-time quantile of one kind of response.
    RtQuantile {
        /// Correct-by-value or other responses.
        response: Response,
        /// The quantile's probability.
        quantile: f64,
    },
}

/// Identifies a statistic: factor, bin (0-based) and kind.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Key {
    /// What the bins are of.
    pub factor: Factor,
    /// Bin index, 0 = smallest.
    pub bin: usize,
    /// What is measured.
    pub kind: Kind,
}

/// Mean, standard deviation and 95 % band of a statistic across replicate datasets.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Band {
    /// Mean across replicates.
    pub mean: f64,
    /// Standard deviation across replicates (n − 1).
    pub sd: f64,
    /// 2.5 % quantile (type 7).
    pub low: f64,
    /// 97.5 % quantile (type 7).
    pub high: f64,
    /// Replicates that had a value.
    pub n: usize,
}

/// One statistic: observed value and its value in each replicate dataset.
#[derive(Clone, Debug, PartialEq)]
pub struct Statistic {
    /// What it is.
    pub key: Key,
    /// Smallest and largest observed value of the factor in the bin.
    pub bin_range: Option<(f64, f64)>,
    /// Observed responses (choice proportion) or response times (quantile) in the cell.
    pub n_observed: usize,
    /// Observed value (None: empty cell).
    pub observed: Option<f64>,
    /// Value in each replicate dataset (None: empty cell in that replicate).
    pub replicates: Vec<Option<f64>>,
}

impl Statistic {
    /// The predicted band over the replicate values y₁…y_m that exist (at least
    /// [`MIN_REPLICATES`]): mean ȳ, sd = √(Σ(y − ȳ)²/(m − 1)), and the 2.5 % and 97.5 % sample
    /// quantiles of type 7 (Hyndman & Fan 1996).
    pub fn band(&self) -> Option<Band> {
        let mut values: Vec<f64> = self.replicates.iter().flatten().copied().collect();
        if values.len() < MIN_REPLICATES {
            return None;
        }
        values.sort_by(f64::total_cmp);
        let n = values.len() as f64;
        let mean = values.iter().sum::<f64>() / n;
        let sd = (values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
        Some(Band {
            mean,
            sd,
            low: quantile_sorted(&values, 0.025)?,
            high: quantile_sorted(&values, 0.975)?,
            n: values.len(),
        })
    }

    /// True when the observed value lies outside the band (None without either).
    pub fn outside(&self) -> Option<bool> {
        let band = self.band()?;
        let x = self.observed?;
        Some(x < band.low || x > band.high)
    }
}

/// The check of one subject.
#[derive(Clone, Debug, PartialEq)]
pub struct SubjectCheck {
    /// Subject label.
    pub subject: String,
    /// Group label.
    pub group: String,
    /// How it was simulated.
    pub mode: Mode,
    /// Every statistic, in a fixed order (factor, bin, kind).
    pub statistics: Vec<Statistic>,
}

/// Misfit of one subject's (or the pooled) statistics.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Misfit {
    /// Statistics with an observed value and a band.
    pub n_statistics: usize,
    /// Fraction of them outside their 95 % band (nominally about 0.05 for a model that fits).
    pub fraction_outside: Option<f64>,
    /// Root mean square of z = (observed − predicted mean)/predicted sd over statistics with
    /// sd > 0 (about 1 for a model that fits).
    pub rms_z: Option<f64>,
}

/// Misfit summary of a set of statistics: the fraction of observed values outside their 95 %
/// replicate bands, and rms z = √(mean of ((x_obs − mean_rep)/sd_rep)²) over statistics with
/// sd_rep > 0 (common practice for posterior-predictive summaries; no single published source).
pub fn misfit(statistics: &[Statistic]) -> Misfit {
    let mut n = 0usize;
    let mut outside = 0usize;
    let mut z2 = Vec::new();
    for s in statistics {
        let (Some(x), Some(band)) = (s.observed, s.band()) else {
            continue;
        };
        n += 1;
        outside += usize::from(x < band.low || x > band.high);
        if band.sd > 0.0 {
            z2.push(((x - band.mean) / band.sd).powi(2));
        }
    }
    Misfit {
        n_statistics: n,
        fraction_outside: (n > 0).then(|| outside as f64 / n as f64),
        rms_z: (!z2.is_empty()).then(|| (z2.iter().sum::<f64>() / z2.len() as f64).sqrt()),
    }
}

/// A column whose levels get statistics of their own: its name and levels, in order.
#[derive(Clone, Debug, PartialEq)]
pub struct Condition {
    /// Column of the trial table (or `run`).
    pub column: String,
    /// Its levels, in order of first appearance in the table.
    pub levels: Vec<String>,
}

impl Condition {
    /// The levels of `column` over `subjects`, in order of first appearance; an error names a
    /// column the table does not have.
    pub fn of(column: &str, subjects: &[Subject]) -> Result<Condition, String> {
        let mut levels: Vec<String> = Vec::new();
        for subject in subjects {
            let Some(at) = subject.covariate_column(column) else {
                return Err(format!(
                    "no column `{column}` in the trial table (its other columns: {})",
                    subject.covariates.join(", ")
                ));
            };
            for trial in &subject.trials {
                if let Some(level) = trial.covariate(at)
                    && !levels.iter().any(|l| l == level.as_ref())
                {
                    levels.push(level.into_owned());
                }
            }
        }
        Ok(Condition {
            column: column.to_string(),
            levels,
        })
    }

    /// Index of the trial's level (NaN when its cell is empty).
    fn index_of(&self, subject: &Subject, trial: &crate::data::Trial) -> f64 {
        subject
            .covariate_column(&self.column)
            .and_then(|at| trial.covariate(at))
            .and_then(|level| self.levels.iter().position(|l| *l == level.as_ref()))
            .map_or(f64::NAN, |i| i as f64)
    }
}

/// Settings of a check.
#[derive(Clone, Debug, PartialEq)]
pub struct CheckSettings {
    /// Replicate datasets per subject.
    pub sims: usize,
    /// Seed of the generator (each subject has its own stream).
    pub seed: u64,
    /// Responses later than this (s) become no response, as in the fit.
    pub deadline: Option<f64>,
    /// Response lock (s), as in the fit.
    pub lock: Option<f64>,
    /// A column whose levels get statistics of their own ([`Factor::Condition`]).
    pub condition: Option<Condition>,
}

/// One classified trial of a dataset.
#[derive(Clone, Copy, Debug)]
struct Classified {
    abs_difference: f64,
    effort_level: f64,
    /// Index of the trial's level of the condition column (NaN without one).
    condition: f64,
    /// (kind of response, response time) when there was a response.
    response: Option<(Response, Option<f64>)>,
}

/// Classifies the trials of a dataset by its own value trajectory; ties are left out.
fn classify(
    subject: &Subject,
    traces: &[TrialTrace],
    condition: Option<&Condition>,
) -> Vec<Classified> {
    subject
        .trials
        .iter()
        .zip(traces)
        .filter_map(|(t, tr)| {
            // The best option by subjective value and its margin over the next best.
            let sv = &tr.subjective_values;
            let best = (0..sv.len()).max_by(|&i, &j| sv[i].total_cmp(&sv[j]))?;
            let runner_up = (0..sv.len())
                .filter(|&k| k != best)
                .map(|k| sv[k])
                .fold(f64::NEG_INFINITY, f64::max);
            let difference = sv[best] - runner_up;
            if difference.is_nan() || difference <= TIE {
                return None;
            }
            let better = Choice(best);
            let effort_level = t.offers[best].effort;
            let response = t.choice.map(|c| {
                let kind = if c == better {
                    Response::CorrectByValue
                } else {
                    Response::Other
                };
                (kind, t.rt)
            });
            Some(Classified {
                abs_difference: difference.abs(),
                effort_level,
                condition: condition.map_or(f64::NAN, |c| c.index_of(subject, t)),
                response,
            })
        })
        .collect()
}

fn factor_value(c: &Classified, factor: Factor) -> f64 {
    match factor {
        Factor::ValueDifference => c.abs_difference,
        Factor::Effort => c.effort_level,
        Factor::Condition => c.condition,
    }
}

/// Interior cut points: a value x falls in bin #{cuts c : x > c}.
fn cuts(observed: &[Classified], factor: Factor) -> Vec<f64> {
    let mut x: Vec<f64> = observed.iter().map(|c| factor_value(c, factor)).collect();
    x.sort_by(f64::total_cmp);
    if factor == Factor::Effort {
        let mut levels = x.clone();
        levels.dedup_by(|a, b| (*a - *b).abs() < 1e-9);
        if levels.len() <= MAX_EFFORT_LEVELS {
            return levels.windows(2).map(|w| 0.5 * (w[0] + w[1])).collect();
        }
    }
    [0.2, 0.4, 0.6, 0.8]
        .iter()
        .filter_map(|&p| quantile_sorted(&x, p))
        .collect()
}

fn bin_of(x: f64, cuts: &[f64]) -> usize {
    cuts.iter().filter(|&&c| x > c).count()
}

/// The statistics of one dataset for `keys`, with the cell sizes.
fn statistics_of(
    classified: &[Classified],
    cuts: &[Vec<f64>; 3],
    keys: &[Key],
) -> Vec<(Option<f64>, usize)> {
    keys.iter()
        .map(|key| {
            let edges = &cuts[key.factor as usize];
            let in_bin = classified
                .iter()
                .filter(|c| bin_of(factor_value(c, key.factor), edges) == key.bin);
            match key.kind {
                Kind::ChoiceProportion => {
                    let (n, correct) =
                        in_bin.fold((0usize, 0usize), |(n, k), c| match c.response {
                            Some((r, _)) => (n + 1, k + usize::from(r == Response::CorrectByValue)),
                            None => (n, k),
                        });
                    ((n > 0).then(|| correct as f64 / n as f64), n)
                }
                Kind::RtQuantile { response, quantile } => {
                    let mut rts: Vec<f64> = in_bin
                        .filter_map(|c| match c.response {
                            Some((r, Some(rt))) if r == response => Some(rt),
                            _ => None,
                        })
                        .collect();
                    rts.sort_by(f64::total_cmp);
                    let value = if rts.len() >= MIN_RTS {
                        quantile_sorted(&rts, quantile)
                    } else {
                        None
                    };
                    (value, rts.len())
                }
            }
        })
        .collect()
}

/// The keys of a subject: per factor and bin, the choice proportion, then (for models of time)
/// the quantiles of correct-by-value and of other responses.
fn keys_for(cuts: &[Vec<f64>; 3], with_times: bool, by_condition: bool) -> Vec<Key> {
    let mut keys = Vec::new();
    let factors: &[Factor] = if by_condition {
        &[Factor::ValueDifference, Factor::Effort, Factor::Condition]
    } else {
        &[Factor::ValueDifference, Factor::Effort]
    };
    for &factor in factors {
        for bin in 0..=cuts[factor as usize].len() {
            keys.push(Key {
                factor,
                bin,
                kind: Kind::ChoiceProportion,
            });
            if with_times {
                for response in [Response::CorrectByValue, Response::Other] {
                    for quantile in RT_QUANTILES {
                        keys.push(Key {
                            factor,
                            bin,
                            kind: Kind::RtQuantile { response, quantile },
                        });
                    }
                }
            }
        }
    }
    keys
}

/// The choice-stage context the likelihood uses: the observed response-time range (for lapse
/// guesses), the deadline and the lock.
fn context_of(subject: &Subject, deadline: Option<f64>, lock: Option<f64>) -> SubjectContext {
    let rts: Vec<f64> = subject.response_times().collect();
    let lo = rts.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = rts.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    SubjectContext {
        rt_min: if lo.is_finite() { lo } else { 0.0 },
        rt_max: if hi.is_finite() { hi } else { 1.0 },
        deadline,
        lock,
    }
}

/// One replicate of `subject` simulated one step ahead: the learning recursion follows the
/// observed history (`traces`, from [`SubjectLikelihood::trace`] at `natural`) and each trial's
/// choice and response time is drawn from the choice stage at that trial's decision signal
/// ([`draw_trial`]; for the diffusion stage an exact first-passage draw), with the lapse guesses
/// over the subject's observed response-time range as in the likelihood, and the response
/// window (`lock`, `deadline`) of the fit. Outcomes stay as observed.
pub fn simulate_one_step_ahead(
    model: &Model,
    natural: &[f64],
    subject: &Subject,
    traces: &[TrialTrace],
    (lock, deadline): (Option<f64>, Option<f64>),
    rng: &mut dyn Rng,
) -> Subject {
    let p: Vec<D> = natural.iter().map(|&x| constant(x)).collect();
    let context = context_of(subject, deadline, lock);
    let prepared = model.choice.prepare(&p, context);
    let mut simulated = subject.clone();
    for (trial, trace) in simulated.trials.iter_mut().zip(traces) {
        (trial.choice, trial.rt) = if trace.parameters.is_empty() {
            draw_trial(prepared.as_ref(), &trace.signal, deadline, rng)
        } else {
            // Parameters that vary over trials: the stage with this trial's values.
            let trial_p: Vec<D> = trace.parameters.iter().map(|&x| constant(x)).collect();
            let prepared = model.choice.prepare(&trial_p, context);
            draw_trial(prepared.as_ref(), &trace.signal, deadline, rng)
        };
    }
    simulated
}

/// Checks one subject: `natural` holds every model parameter (model order, natural scale);
/// `stream` selects the subject's generator stream (its index in the table).
pub fn check_subject(
    model: &Model,
    natural: &[f64],
    subject: &Subject,
    settings: &CheckSettings,
    stream: u64,
) -> Result<SubjectCheck, DataMismatch> {
    let mode = Mode::for_subject(subject);
    let observed_traces = SubjectLikelihood::new(model, subject, settings.deadline)?
        .with_lock(settings.lock)
        .trace(natural);
    let condition = settings.condition.as_ref();
    let observed = classify(subject, &observed_traces, condition);
    // Condition bins are the levels themselves, the same for every subject.
    let level_cuts = condition.map_or(Vec::new(), |c| {
        (1..c.levels.len()).map(|i| i as f64 - 0.5).collect()
    });
    let cuts = [
        cuts(&observed, Factor::ValueDifference),
        cuts(&observed, Factor::Effort),
        level_cuts,
    ];
    let keys = keys_for(&cuts, model.uses_response_times(), condition.is_some());
    let observed_stats = statistics_of(&observed, &cuts, &keys);
    let mut rng = ChaCha8Rng::seed_from_u64(settings.seed);
    rng.set_stream(stream);
    let context = context_of(subject, settings.deadline, settings.lock);
    let simulation = SimulationSettings {
        lock: settings.lock,
        deadline: settings.deadline,
        guess_rt_range: (context.rt_min, context.rt_max),
    };
    let mut replicates: Vec<Vec<(Option<f64>, usize)>> = Vec::with_capacity(settings.sims);
    for _ in 0..settings.sims {
        let classified = match mode {
            Mode::Free => {
                let simulated = simulate_subject(model, natural, subject, simulation, &mut rng)?;
                if simulated.n_responses() == 0 {
                    // Every simulated response missed the deadline: every cell is empty.
                    Vec::new()
                } else {
                    let traces = SubjectLikelihood::new(model, &simulated, settings.deadline)?
                        .with_lock(settings.lock)
                        .trace(natural);
                    classify(&simulated, &traces, condition)
                }
            }
            Mode::OneStepAhead => {
                let simulated = simulate_one_step_ahead(
                    model,
                    natural,
                    subject,
                    &observed_traces,
                    (settings.lock, settings.deadline),
                    &mut rng,
                );
                classify(&simulated, &observed_traces, condition)
            }
        };
        replicates.push(statistics_of(&classified, &cuts, &keys));
    }
    let statistics = keys
        .iter()
        .enumerate()
        .map(|(k, &key)| {
            let in_bin: Vec<f64> = observed
                .iter()
                .map(|c| factor_value(c, key.factor))
                .filter(|&x| bin_of(x, &cuts[key.factor as usize]) == key.bin)
                .collect();
            let bin_range = (!in_bin.is_empty()).then(|| {
                let lo = in_bin.iter().copied().fold(f64::INFINITY, f64::min);
                let hi = in_bin.iter().copied().fold(f64::NEG_INFINITY, f64::max);
                (lo, hi)
            });
            Statistic {
                key,
                bin_range,
                n_observed: observed_stats[k].1,
                observed: observed_stats[k].0,
                replicates: replicates.iter().map(|r| r[k].0).collect(),
            }
        })
        .collect();
    Ok(SubjectCheck {
        subject: subject.id.clone(),
        group: subject.group.clone(),
        mode,
        statistics,
    })
}

/// Checks every subject in parallel (`estimates[i]` belongs to `subjects[i]`; subject i uses
/// generator stream i); `progress` is called once per finished subject. Results do not depend
/// on the thread count.
pub fn check_subjects(
    model: &Model,
    estimates: &[Vec<f64>],
    subjects: &[Subject],
    settings: &CheckSettings,
    progress: &(dyn Fn() + Sync),
) -> Result<Vec<SubjectCheck>, DataMismatch> {
    subjects
        .par_iter()
        .zip(estimates.par_iter())
        .enumerate()
        .map(|(i, (subject, natural))| {
            let result = check_subject(model, natural, subject, settings, i as u64);
            progress();
            result
        })
        .collect()
}

/// Pooled statistics: for each (factor, bin, kind) present in any subject, the mean over the
/// subjects with an observed value of their observed values, and for replicate r the mean over
/// those subjects of their replicate-r values (those that exist).
pub fn pooled(checks: &[SubjectCheck]) -> Vec<Statistic> {
    let mut keys: Vec<Key> = Vec::new();
    for check in checks {
        for s in &check.statistics {
            if !keys.contains(&s.key) {
                keys.push(s.key);
            }
        }
    }
    let sims = checks
        .iter()
        .flat_map(|c| c.statistics.first())
        .map(|s| s.replicates.len())
        .max()
        .unwrap_or(0);
    let mean = |v: &[f64]| (!v.is_empty()).then(|| v.iter().sum::<f64>() / v.len() as f64);
    keys.into_iter()
        .map(|key| {
            let members: Vec<&Statistic> = checks
                .iter()
                .flat_map(|c| c.statistics.iter().find(|s| s.key == key))
                .filter(|s| s.observed.is_some())
                .collect();
            let observed: Vec<f64> = members.iter().flat_map(|s| s.observed).collect();
            let replicates = (0..sims)
                .map(|r| {
                    let values: Vec<f64> = members
                        .iter()
                        .flat_map(|s| s.replicates.get(r).copied().flatten())
                        .collect();
                    mean(&values)
                })
                .collect();
            Statistic {
                key,
                bin_range: None,
                n_observed: members.iter().map(|s| s.n_observed).sum(),
                observed: mean(&observed),
                replicates,
            }
        })
        .collect()
}

/// Label of the pooled rows.
pub const POOLED: &str = "pooled";

/// One table row: (subject or "pooled", group, mode, statistic).
type Row<'a> = (&'a str, &'a str, &'a str, &'a Statistic);

/// Rows of (scope, group, mode, statistic) for the tables: every subject, then the pooled ones.
fn rows<'a>(
    checks: &'a [SubjectCheck],
    pooled: &'a [Statistic],
    keep: impl Fn(&Kind) -> bool,
) -> Vec<Row<'a>> {
    let mut rows = Vec::new();
    for c in checks {
        for s in &c.statistics {
            if keep(&s.key.kind) {
                rows.push((c.subject.as_str(), c.group.as_str(), c.mode.as_str(), s));
            }
        }
    }
    for s in pooled {
        if keep(&s.key.kind) {
            rows.push((POOLED, "", "", s));
        }
    }
    rows
}

/// Columns common to both statistic tables; with a condition, `level` names the level of its
/// bins.
fn statistic_table(
    rows: &[Row<'_>],
    condition: Option<&Condition>,
    extra: Vec<(&str, Column)>,
) -> Table {
    let text = |f: &dyn Fn(&Row<'_>) -> String| Column::Text(rows.iter().map(f).collect());
    let number = |f: &dyn Fn(&Statistic) -> Option<f64>| {
        Column::Number(rows.iter().map(|r| f(r.3)).collect())
    };
    let bands: Vec<Option<Band>> = rows.iter().map(|r| r.3.band()).collect();
    let band =
        |f: fn(&Band) -> f64| Column::Number(bands.iter().map(|b| b.as_ref().map(f)).collect());
    let mut table = Table::default()
        .with("subject", text(&|r| r.0.to_string()))
        .with("group", text(&|r| r.1.to_string()))
        .with("mode", text(&|r| r.2.to_string()))
        .with("factor", text(&|r| r.3.key.factor.as_str().to_string()))
        .with(
            "bin",
            Column::Integer(rows.iter().map(|r| r.3.key.bin as i64 + 1).collect()),
        )
        .with("bin_low", number(&|s| s.bin_range.map(|b| b.0)))
        .with("bin_high", number(&|s| s.bin_range.map(|b| b.1)));
    if let Some(c) = condition {
        table = table.with(
            "level",
            Column::OptionalText(
                rows.iter()
                    .map(|r| {
                        (r.3.key.factor == Factor::Condition)
                            .then(|| c.levels.get(r.3.key.bin).cloned())
                            .flatten()
                    })
                    .collect(),
            ),
        );
    }
    for (name, column) in extra {
        table = table.with(name, column);
    }
    table
        .with(
            "n_observed",
            Column::Integer(rows.iter().map(|r| r.3.n_observed as i64).collect()),
        )
        .with("observed", number(&|s| s.observed))
        .with("predicted_mean", band(|b| b.mean))
        .with("predicted_sd", band(|b| b.sd))
        .with("predicted_low", band(|b| b.low))
        .with("predicted_high", band(|b| b.high))
        .with(
            "n_replicates",
            Column::Integer(bands.iter().map(|b| b.map_or(0, |b| b.n as i64)).collect()),
        )
        .with(
            "outside_band",
            Column::OptionalFlag(rows.iter().map(|r| r.3.outside()).collect()),
        )
}

/// Observed against predicted proportions of correct-by-value responses, per subject and pooled.
pub fn choices_table(
    checks: &[SubjectCheck],
    pooled: &[Statistic],
    condition: Option<&Condition>,
) -> Table {
    let rows = rows(checks, pooled, |k| matches!(k, Kind::ChoiceProportion));
    statistic_table(&rows, condition, Vec::new())
}

/// Observed against predicted response-time quantiles, per subject and pooled.
pub fn quantiles_table(
    checks: &[SubjectCheck],
    pooled: &[Statistic],
    condition: Option<&Condition>,
) -> Table {
    let rows = rows(checks, pooled, |k| matches!(k, Kind::RtQuantile { .. }));
    let quantile = Column::Number(
        rows.iter()
            .map(|r| match r.3.key.kind {
                Kind::RtQuantile { quantile, .. } => Some(quantile),
                Kind::ChoiceProportion => None,
            })
            .collect(),
    );
    let response = Column::Text(
        rows.iter()
            .map(|r| match r.3.key.kind {
                Kind::RtQuantile { response, .. } => response.as_str().to_string(),
                Kind::ChoiceProportion => String::new(),
            })
            .collect(),
    );
    statistic_table(
        &rows,
        condition,
        vec![("response", response), ("quantile", quantile)],
    )
}

/// Subjects ordered worst first by rms_z (missing last), with their misfit.
pub fn ranked_misfits(checks: &[SubjectCheck]) -> Vec<(&SubjectCheck, Misfit)> {
    let mut ranked: Vec<(&SubjectCheck, Misfit)> =
        checks.iter().map(|c| (c, misfit(&c.statistics))).collect();
    ranked.sort_by(|a, b| {
        let key = |m: &Misfit| m.rms_z.unwrap_or(f64::NEG_INFINITY);
        key(&b.1).total_cmp(&key(&a.1))
    });
    ranked
}

/// One row per subject, worst first: misfit, rank and the flag (fraction outside above
/// [`FLAG_FRACTION`]).
pub fn misfit_table(checks: &[SubjectCheck]) -> Table {
    let ranked = ranked_misfits(checks);
    let number =
        |f: fn(&Misfit) -> Option<f64>| Column::Number(ranked.iter().map(|r| f(&r.1)).collect());
    Table::default()
        .with(
            "subject",
            Column::Text(ranked.iter().map(|r| r.0.subject.clone()).collect()),
        )
        .with(
            "group",
            Column::Text(ranked.iter().map(|r| r.0.group.clone()).collect()),
        )
        .with(
            "mode",
            Column::Text(ranked.iter().map(|r| r.0.mode.as_str().into()).collect()),
        )
        .with(
            "n_statistics",
            Column::Integer(ranked.iter().map(|r| r.1.n_statistics as i64).collect()),
        )
        .with("fraction_outside", number(|m| m.fraction_outside))
        .with("rms_z", number(|m| m.rms_z))
        .with("rank", Column::Integer((1..=ranked.len() as i64).collect()))
        .with(
            "flagged",
            Column::Flag(
                ranked
                    .iter()
                    .map(|r| r.1.fraction_outside.is_some_and(|f| f > FLAG_FRACTION))
                    .collect(),
            ),
        )
}
