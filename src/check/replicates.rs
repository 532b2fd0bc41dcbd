//! Replicate datasets: each subject simulated freely or one step ahead of its observed history,
//! its statistics observed and predicted, and the pooled statistics of a cohort.

use super::statistics::*;
use crate::data::Subject;
use crate::fit::starts::subject_stream;
use crate::likelihood::{DataMismatch, SubjectLikelihood, TrialTrace};
use crate::model::Model;
use crate::model::components::SubjectContext;
use crate::model::dual::{D, constant};
use crate::simulate::{SimulationSettings, draw_trial, simulate_subject};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

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

/// The choice-stage context the likelihood uses: the observed response-time range (for lapse
/// guesses), the deadline and the lock.
pub(super) fn context_of(
    subject: &Subject,
    deadline: Option<f64>,
    lock: Option<f64>,
) -> SubjectContext {
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
/// `stream` selects the subject's generator stream ([`check_subjects`] uses its label's).
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
    // Condition bins are the levels themselves, option bins the sides, the same for every
    // subject.
    let sides = subject
        .trials
        .iter()
        .map(|t| t.offers.len())
        .max()
        .unwrap_or(0);
    let cuts: Cuts = [
        cuts(&observed, Factor::ValueDifference),
        cuts(&observed, Factor::Effort),
        condition.map_or(Vec::new(), |c| index_cuts(c.levels.len())),
        index_cuts(sides),
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
            // The side of an option bin is its label; other bins span the values in them.
            let in_bin: Vec<f64> = observed
                .iter()
                .filter_map(|c| factor_value(c, key.factor))
                .filter(|&x| bin_of(x, &cuts[key.factor as usize]) == key.bin)
                .collect();
            let bin_range = (key.factor != Factor::Option && !in_bin.is_empty()).then(|| {
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

/// Checks every subject in parallel (`estimates[i]` belongs to `subjects[i]`); `progress` is
/// called once per finished subject. Each subject's generator stream comes from its label
/// ([`subject_stream`], as for the fit's start points), so its replicates depend on the seed
/// and its label only: not on the thread count, the other subjects or the shard it is in.
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
        .map(|(subject, natural)| {
            let stream = subject_stream(&subject.id);
            let result = check_subject(model, natural, subject, settings, stream);
            progress();
            result
        })
        .collect()
}

/// Pooled statistics: for each (factor, bin, kind) present in any subject, the mean over the
/// subjects with an observed value of their observed values, and for replicate r the mean over
/// those subjects of their replicate-r values (those that exist); the bin's range is the
/// smallest and largest value any subject had in that bin.
pub fn pooled(checks: &[SubjectCheck]) -> Vec<Statistic> {
    let mut pool = Pool::default();
    pool.add(checks);
    pool.finish()
}

/// [`pooled`] gathered a part of the subjects at a time: sums in subject order, so the result
/// equals [`pooled`] of all the parts' checks to the last bit, while only one sum per
/// statistic and replicate is kept.
#[derive(Debug, Default)]
pub struct Pool {
    /// Keys in order of first appearance, each with its sums.
    cells: Vec<(Key, PoolCell)>,
    /// Replicates per statistic (the largest seen).
    sims: usize,
}

/// The running sums of one pooled statistic.
#[derive(Debug)]
struct PoolCell {
    observed_sum: f64,
    observed_count: usize,
    n_observed: usize,
    replicate_sums: Vec<f64>,
    replicate_counts: Vec<usize>,
    bin_range: Option<(f64, f64)>,
}

impl PoolCell {
    fn new() -> Self {
        // −0.0, the start of Rust's sum of f64, so that running sums equal those of `sum`.
        PoolCell {
            observed_sum: -0.0,
            observed_count: 0,
            n_observed: 0,
            replicate_sums: Vec::new(),
            replicate_counts: Vec::new(),
            bin_range: None,
        }
    }
}

impl Pool {
    /// Adds the statistics of `checks` (subjects in table order, after those added before).
    pub fn add(&mut self, checks: &[SubjectCheck]) {
        for check in checks {
            if let Some(first) = check.statistics.first() {
                self.sims = self.sims.max(first.replicates.len());
            }
            for (k, s) in check.statistics.iter().enumerate() {
                // The first statistic of its key in this subject counts (as `find` would).
                if check.statistics[..k].iter().any(|t| t.key == s.key) {
                    continue;
                }
                let at = match self.cells.iter().position(|(key, _)| *key == s.key) {
                    Some(at) => at,
                    None => {
                        self.cells.push((s.key, PoolCell::new()));
                        self.cells.len() - 1
                    }
                };
                let cell = &mut self.cells[at].1;
                if let Some((a, b)) = s.bin_range {
                    let (lo, hi) = cell.bin_range.unwrap_or((f64::INFINITY, f64::NEG_INFINITY));
                    cell.bin_range = Some((lo.min(a), hi.max(b)));
                }
                let Some(observed) = s.observed else { continue };
                cell.observed_sum += observed;
                cell.observed_count += 1;
                cell.n_observed += s.n_observed;
                if cell.replicate_sums.len() < s.replicates.len() {
                    cell.replicate_sums.resize(s.replicates.len(), -0.0);
                    cell.replicate_counts.resize(s.replicates.len(), 0);
                }
                for (r, value) in s.replicates.iter().enumerate() {
                    if let Some(v) = value {
                        cell.replicate_sums[r] += v;
                        cell.replicate_counts[r] += 1;
                    }
                }
            }
        }
    }

    /// The pooled statistics, in order of first appearance of their keys.
    pub fn finish(self) -> Vec<Statistic> {
        let mean = |sum: f64, count: usize| (count > 0).then(|| sum / count as f64);
        self.cells
            .into_iter()
            .map(|(key, cell)| Statistic {
                key,
                bin_range: cell.bin_range,
                n_observed: cell.n_observed,
                observed: mean(cell.observed_sum, cell.observed_count),
                replicates: (0..self.sims)
                    .map(|r| {
                        mean(
                            cell.replicate_sums.get(r).copied().unwrap_or(-0.0),
                            cell.replicate_counts.get(r).copied().unwrap_or(0),
                        )
                    })
                    .collect(),
            })
            .collect()
    }
}
