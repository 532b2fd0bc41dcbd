//! What a dataset is summarised by: trials classified by value difference, effort, condition and
//! the side chosen, bins, choice proportions and shares, response-time quantiles, predicted bands
//! and misfit.

use crate::data::{Choice, Subject};
use crate::likelihood::TrialTrace;

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
pub(super) const MAX_EFFORT_LEVELS: usize = 6;
/// Subjective values closer than this count as equal (no correct-by-value option).
pub(super) const TIE: f64 = 1e-12;

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
    /// The level of a column of the trial table ([`crate::check::CheckSettings::condition`]).
    Condition,
    /// The side chosen (a, b, c, …): one bin per option side of the subject's trials.
    Option,
}

impl Factor {
    /// Label in the tables.
    pub fn as_str(self) -> &'static str {
        match self {
            Factor::ValueDifference => "abs_value_difference",
            Factor::Effort => "effort_of_better_option",
            Factor::Condition => "condition",
            Factor::Option => "option",
        }
    }
}

/// Which responses a response-time quantile is of.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Response {
    /// Chose the option with the larger subjective value.
    CorrectByValue,
    /// Chose another option.
    Other,
    /// Every response in the bin (for [`Factor::Option`]: every response that chose that side).
    All,
}

impl Response {
    /// Label in the tables.
    pub fn as_str(self) -> &'static str {
        match self {
            Response::CorrectByValue => "correct_by_value",
            Response::Other => "other",
            Response::All => "all",
        }
    }
}

/// What a statistic measures.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Kind {
    /// Proportion of responses that were correct by value.
    ChoiceProportion,
    /// Share of all the dataset's responses that chose the bin's side ([`Factor::Option`]):
    /// k_s / n with k_s the responses choosing side s and n every response, so that the shares of
    /// a dataset sum to 1.
    ChoiceShare,
    /// Response-time quantile of one kind of response.
    RtQuantile {
        /// Correct-by-value or other responses.
        response: Response,
        /// The quantile's probability.
        quantile: f64,
    },
}

impl Kind {
    /// Label in the tables.
    pub fn as_str(self) -> &'static str {
        match self {
            Kind::ChoiceProportion => "proportion_correct_by_value",
            Kind::ChoiceShare => "choice_share",
            Kind::RtQuantile { .. } => "rt_quantile",
        }
    }
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
/// The choice share of the last side ([`Kind::ChoiceShare`] with the largest bin) is left out:
/// the shares of a dataset sum to 1, so it is fixed by the others (with two options it mirrors
/// the share of `a` exactly) and would count one discrepancy twice.
pub fn misfit(statistics: &[Statistic]) -> Misfit {
    let last_side = statistics
        .iter()
        .filter(|s| s.key.kind == Kind::ChoiceShare)
        .map(|s| s.key.bin)
        .max();
    let mut n = 0usize;
    let mut outside = 0usize;
    let mut z2 = Vec::new();
    for s in statistics {
        if s.key.kind == Kind::ChoiceShare && Some(s.key.bin) == last_side {
            continue;
        }
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

/// A column the trial table does not have, with the table's other columns (those beyond the
/// canonical ones).
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
#[error(
    "no column `{column}` in the trial table (its other columns: {})",
    others.join(", ")
)]
pub struct NoSuchColumn {
    /// The column asked for.
    pub column: String,
    /// The table's other columns.
    pub others: Vec<String>,
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
    pub fn of(column: &str, subjects: &[Subject]) -> Result<Condition, NoSuchColumn> {
        let mut condition = Condition {
            column: column.to_string(),
            levels: Vec::new(),
        };
        condition.add_levels(subjects)?;
        Ok(condition)
    }

    /// Adds the levels of `subjects` not seen before, in order of first appearance (a table read
    /// a part at a time gives the levels of [`Condition::of`] over the whole table).
    pub fn add_levels(&mut self, subjects: &[Subject]) -> Result<(), NoSuchColumn> {
        for subject in subjects {
            let Some(at) = subject.covariate_column(&self.column) else {
                return Err(NoSuchColumn {
                    column: self.column.clone(),
                    others: subject.covariates.to_vec(),
                });
            };
            for trial in &subject.trials {
                if let Some(level) = trial.covariate(at)
                    && !self.levels.iter().any(|l| l == level.as_ref())
                {
                    self.levels.push(level.into_owned());
                }
            }
        }
        Ok(())
    }

    /// Index of the trial's level (None when its cell is empty).
    pub(super) fn index_of(&self, subject: &Subject, trial: &crate::data::Trial) -> Option<usize> {
        subject
            .covariate_column(&self.column)
            .and_then(|at| trial.covariate(at))
            .and_then(|level| self.levels.iter().position(|l| *l == level.as_ref()))
    }
}

/// The option with the larger subjective value on a trial whose values do not tie.
#[derive(Clone, Copy, Debug)]
struct Better {
    /// Its margin over the next best option.
    abs_difference: f64,
    /// The effort it demands.
    effort_level: f64,
}

/// A response of a classified trial.
#[derive(Clone, Copy, Debug)]
struct Responded {
    /// Index of the side chosen.
    side: usize,
    /// Correct by value or other; None when the values tie.
    kind: Option<Response>,
    /// Its response time (None when trimmed or unknown).
    rt: Option<f64>,
}

/// One classified trial of a dataset.
#[derive(Clone, Copy, Debug)]
pub(super) struct Classified {
    /// None when the subjective values tie (no correct-by-value option).
    better: Option<Better>,
    /// Index of the trial's level of the condition column (None without one or when its cell
    /// is empty).
    condition: Option<usize>,
    /// None without a response.
    response: Option<Responded>,
}

/// Classifies every trial of a dataset by its own value trajectory.
pub(super) fn classify(
    subject: &Subject,
    traces: &[TrialTrace],
    condition: Option<&Condition>,
) -> Vec<Classified> {
    subject
        .trials
        .iter()
        .zip(traces)
        .map(|(t, tr)| {
            // The best option by subjective value and its margin over the next best.
            let sv = &tr.subjective_values;
            let better = (0..sv.len())
                .max_by(|&i, &j| sv[i].total_cmp(&sv[j]))
                .and_then(|best| {
                    let runner_up = (0..sv.len())
                        .filter(|&k| k != best)
                        .map(|k| sv[k])
                        .fold(f64::NEG_INFINITY, f64::max);
                    let difference = sv[best] - runner_up;
                    (difference > TIE).then(|| {
                        (
                            best,
                            Better {
                                abs_difference: difference,
                                effort_level: t.offers[best].effort,
                            },
                        )
                    })
                });
            let response = t.choice.map(|c| Responded {
                side: c.index(),
                kind: better.map(|(best, _)| {
                    if c == Choice(best) {
                        Response::CorrectByValue
                    } else {
                        Response::Other
                    }
                }),
                rt: t.rt,
            });
            Classified {
                better: better.map(|b| b.1),
                condition: condition.and_then(|c| c.index_of(subject, t)),
                response,
            }
        })
        .collect()
}

/// The trial's value of `factor`: None when it has none (values tie for the value factors and
/// the condition, whose statistics are of correct-by-value responses; an empty condition cell;
/// no response for the side chosen).
pub(super) fn factor_value(c: &Classified, factor: Factor) -> Option<f64> {
    match factor {
        Factor::ValueDifference => c.better.map(|b| b.abs_difference),
        Factor::Effort => c.better.map(|b| b.effort_level),
        Factor::Condition => c.better.and(c.condition).map(|i| i as f64),
        Factor::Option => c.response.map(|r| r.side as f64),
    }
}

/// Interior cut points: a value x falls in bin #{cuts c : x > c}.
pub(super) fn cuts(observed: &[Classified], factor: Factor) -> Vec<f64> {
    let mut x: Vec<f64> = observed
        .iter()
        .filter_map(|c| factor_value(c, factor))
        .collect();
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

/// Cut points that give one bin per index 0, 1, …, `n` − 1 (condition levels, option sides).
pub(super) fn index_cuts(n: usize) -> Vec<f64> {
    (1..n).map(|i| i as f64 - 0.5).collect()
}

pub(super) fn bin_of(x: f64, cuts: &[f64]) -> usize {
    cuts.iter().filter(|&&c| x > c).count()
}

/// Cut points of every factor, indexed by `Factor as usize`.
pub(super) type Cuts = [Vec<f64>; 4];

/// The statistics of one dataset for `keys`, with the cell sizes.
pub(super) fn statistics_of(
    classified: &[Classified],
    cuts: &Cuts,
    keys: &[Key],
) -> Vec<(Option<f64>, usize)> {
    keys.iter()
        .map(|key| {
            let edges = &cuts[key.factor as usize];
            let in_bin = classified.iter().filter(|c| {
                factor_value(c, key.factor).is_some_and(|x| bin_of(x, edges) == key.bin)
            });
            match key.kind {
                Kind::ChoiceProportion => {
                    let (n, correct) = in_bin
                        .filter_map(|c| c.response.and_then(|r| r.kind))
                        .fold((0usize, 0usize), |(n, k), r| {
                            (n + 1, k + usize::from(r == Response::CorrectByValue))
                        });
                    ((n > 0).then(|| correct as f64 / n as f64), n)
                }
                Kind::ChoiceShare => {
                    let n = classified.iter().filter(|c| c.response.is_some()).count();
                    let k = in_bin.count();
                    ((n > 0).then(|| k as f64 / n as f64), n)
                }
                Kind::RtQuantile { response, quantile } => {
                    let mut rts: Vec<f64> = in_bin
                        .filter_map(|c| {
                            let r = c.response?;
                            (response == Response::All || r.kind == Some(response))
                                .then_some(r.rt)
                                .flatten()
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

/// The keys of a subject: per factor and bin, the choice proportion (the choice share for
/// [`Factor::Option`]), then (for models of time) the quantiles of correct-by-value and of
/// other responses (of every response that chose the side for [`Factor::Option`]).
pub(super) fn keys_for(cuts: &Cuts, with_times: bool, by_condition: bool) -> Vec<Key> {
    let mut keys = Vec::new();
    let factors: &[Factor] = if by_condition {
        &[
            Factor::ValueDifference,
            Factor::Effort,
            Factor::Condition,
            Factor::Option,
        ]
    } else {
        &[Factor::ValueDifference, Factor::Effort, Factor::Option]
    };
    for &factor in factors {
        let (choice, responses): (Kind, &[Response]) = if factor == Factor::Option {
            (Kind::ChoiceShare, &[Response::All])
        } else {
            (
                Kind::ChoiceProportion,
                &[Response::CorrectByValue, Response::Other],
            )
        };
        for bin in 0..=cuts[factor as usize].len() {
            keys.push(Key {
                factor,
                bin,
                kind: choice,
            });
            if with_times {
                for &response in responses {
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
