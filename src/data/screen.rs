//! The data screen before fitting: per subject, what the trial table holds (trials, responses,
//! response-time range, very fast responses, share of each option) and whether it meets what a
//! model needs; response times that look like milliseconds stop the run; optional trimming of
//! response times outside given limits.
//!
//! This module knows nothing of models: a model's needs come in as a [`ModelNeeds`] of plain
//! facts (the command line builds it from the model).

use super::{Choice, Subject, TrialTable};

/// Default floor (seconds) below which a response counts as very fast: 0.2 s, the usual lower
/// limit for a decision plus a motor response in two-choice tasks (common practice).
pub const DEFAULT_FAST_FLOOR: f64 = 0.2;

/// A subject's median response time above this many "seconds" means the times are almost
/// certainly milliseconds: no choice task of this kind has a median response near 2 minutes
/// (common practice).
pub const MILLISECOND_MEDIAN: f64 = 100.0;

/// By default a model is fitted to a subject only with at least this many responses per free
/// parameter ([`ScreenSettings::responses_per_parameter`]): the rule of about ten observations per estimated parameter, from the events-per-variable
/// studies of logistic regression (Peduzzi et al. 1996; from memory). Fewer make estimates
/// unstable and pile them up at bounds.
pub const TRIALS_PER_PARAMETER: usize = 10;

/// Settings of the screen.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ScreenSettings {
    /// Responses faster than this (seconds) are counted as very fast.
    pub fast_floor: f64,
    /// Response times below this (seconds) are set aside (the choice still counts).
    pub trim_below: Option<f64>,
    /// Response times above this (seconds) are set aside (the choice still counts).
    pub trim_above: Option<f64>,
    /// Fewest responses per free parameter for a model to be fitted to a subject.
    pub responses_per_parameter: usize,
}

impl Default for ScreenSettings {
    fn default() -> Self {
        ScreenSettings {
            fast_floor: DEFAULT_FAST_FLOOR,
            trim_below: None,
            trim_above: None,
            responses_per_parameter: TRIALS_PER_PARAMETER,
        }
    }
}

impl ScreenSettings {
    /// Checks the settings: a finite fast floor > 0, trimming limits finite and > 0, the lower
    /// limit below the upper one. The message names the option.
    pub fn validate(&self) -> Result<(), ScreenSettingsError> {
        if !(self.fast_floor.is_finite() && self.fast_floor > 0.0) {
            return Err(ScreenSettingsError::FastFloor(self.fast_floor));
        }
        for (option, limit) in [
            ("--trim-below", self.trim_below),
            ("--trim-above", self.trim_above),
        ] {
            if let Some(value) = limit
                && !(value.is_finite() && value > 0.0)
            {
                return Err(ScreenSettingsError::TrimLimit { option, value });
            }
        }
        if self.responses_per_parameter == 0 {
            return Err(ScreenSettingsError::NoResponsesPerParameter);
        }
        if let (Some(below), Some(above)) = (self.trim_below, self.trim_above)
            && below >= above
        {
            return Err(ScreenSettingsError::TrimLimitsCrossed { below, above });
        }
        Ok(())
    }
}

/// Settings of the screen that cannot be used, named by their command-line options.
#[derive(Clone, Copy, Debug, PartialEq, thiserror::Error)]
pub enum ScreenSettingsError {
    /// A fast floor that is not a number of seconds > 0.
    #[error("--fast-floor {0}: expected a number of seconds > 0 (default {DEFAULT_FAST_FLOOR})")]
    FastFloor(f64),
    /// A trimming limit that is not a response time > 0.
    #[error("{option} {value}: expected a response time in seconds > 0")]
    TrimLimit {
        /// The option (`--trim-below` or `--trim-above`).
        option: &'static str,
        /// Its value.
        value: f64,
    },
    /// No responses per free parameter.
    #[error(
        "--responses-per-parameter 0: expected at least 1 response per free parameter (default \
         {TRIALS_PER_PARAMETER})"
    )]
    NoResponsesPerParameter,
    /// A lower trimming limit that is not below the upper one.
    #[error(
        "--trim-below {below} is not below --trim-above {above}: expected the lower limit under \
         the upper one (every time would be trimmed)"
    )]
    TrimLimitsCrossed {
        /// The lower limit.
        below: f64,
        /// The upper limit.
        above: f64,
    },
}

/// Response times set aside for one subject.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct TrimCounts {
    /// Below the lower limit.
    pub below: usize,
    /// Above the upper limit.
    pub above: usize,
}

/// Sets aside the response times below `below` or above `above` (seconds): the trial keeps its
/// choice and outcome (the participant saw the outcome, so values are still learned from it,
/// and the likelihood scores the choice alone), only its time is dropped. Returns the counts
/// per subject, in table order.
pub fn trim_response_times(
    table: &mut TrialTable,
    below: Option<f64>,
    above: Option<f64>,
) -> Vec<TrimCounts> {
    table
        .subjects
        .iter_mut()
        .map(|subject| {
            let mut counts = TrimCounts::default();
            for trial in &mut subject.trials {
                let Some(rt) = trial.rt else { continue };
                if below.is_some_and(|lo| rt < lo) {
                    counts.below += 1;
                    trial.rt = None;
                } else if above.is_some_and(|hi| rt > hi) {
                    counts.above += 1;
                    trial.rt = None;
                }
            }
            counts
        })
        .collect()
}

/// What one subject's data hold.
#[derive(Clone, Debug, PartialEq)]
pub struct SubjectScreen {
    /// Participant label.
    pub subject: String,
    /// Group label.
    pub group: String,
    /// Trials.
    pub trials: usize,
    /// Trials with a response (a choice).
    pub responses: usize,
    /// Responses that keep their response time (after trimming).
    pub timed: usize,
    /// Shortest kept response time (seconds).
    pub rt_min: Option<f64>,
    /// Median kept response time.
    pub rt_median: Option<f64>,
    /// Longest kept response time.
    pub rt_max: Option<f64>,
    /// Share of kept response times below the fast floor.
    pub fast_share: Option<f64>,
    /// Share of responses choosing option a.
    pub share_a: Option<f64>,
    /// Response times set aside.
    pub trimmed: TrimCounts,
    /// The efforts offered change from trial to trial (on either side).
    pub effort_varies: bool,
    /// Trials that give both reward_a and reward_b.
    pub rewards_offered: usize,
}

impl SubjectScreen {
    /// Share of responses choosing option b.
    pub fn share_b(&self) -> Option<f64> {
        self.share_a.map(|a| 1.0 - a)
    }
}

/// The median of `xs` (sorted in place); `None` when empty.
fn median(xs: &mut [f64]) -> Option<f64> {
    xs.sort_by(f64::total_cmp);
    let n = xs.len();
    match n {
        0 => None,
        _ if n % 2 == 1 => Some(xs[n / 2]),
        _ => Some(0.5 * (xs[n / 2 - 1] + xs[n / 2])),
    }
}

/// Screens one subject's (already trimmed) trials.
pub fn screen(subject: &Subject, fast_floor: f64, trimmed: TrimCounts) -> SubjectScreen {
    let mut rts: Vec<f64> = subject.response_times().collect();
    let responses = subject.n_responses();
    let chose_a = subject
        .trials
        .iter()
        .filter(|t| t.choice == Some(Choice::A))
        .count();
    let fast = rts.iter().filter(|&&t| t < fast_floor).count();
    let varies = |effort: &dyn Fn(&super::Trial) -> f64| {
        let first = subject.trials.first().map(effort);
        subject.trials.iter().any(|t| Some(effort(t)) != first)
    };
    let timed = rts.len();
    let share = |count: usize, of: usize| (of > 0).then(|| count as f64 / of as f64);
    SubjectScreen {
        subject: subject.id.clone(),
        group: subject.group.clone(),
        trials: subject.trials.len(),
        responses,
        timed,
        rt_min: rts.iter().copied().reduce(f64::min),
        rt_max: rts.iter().copied().reduce(f64::max),
        rt_median: median(&mut rts),
        fast_share: share(fast, timed),
        share_a: share(chose_a, responses),
        trimmed,
        effort_varies: (0..subject.trials.first().map_or(0, |t| t.offers.len()))
            .any(|k| varies(&|t| t.offers.get(k).map_or(0.0, |o| o.effort))),
        rewards_offered: subject
            .trials
            .iter()
            .filter(|t| t.offers.iter().all(|o| o.reward.is_some()))
            .count(),
    }
}

/// What a model needs of a subject's data, as plain facts.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct ModelNeeds {
    /// Model name.
    pub name: String,
    /// The model weights effort (its cost shape is not `none`).
    pub weights_effort: bool,
    /// The model uses the offered magnitudes reward_a and reward_b (learning rule `none`).
    pub uses_offered_values: bool,
    /// Response times enter the model's likelihood.
    pub uses_response_times: bool,
    /// Free parameters.
    pub free_parameters: usize,
}

/// Why a subject's data do not meet a model's needs, asking for `per_parameter` responses per
/// free parameter; empty when they do.
pub fn unmet_needs(
    screen: &SubjectScreen,
    needs: &ModelNeeds,
    per_parameter: usize,
) -> Vec<String> {
    let mut unmet = Vec::new();
    if needs.weights_effort && !screen.effort_varies {
        unmet.push(format!(
            "model {} weights effort, but the efforts offered never change",
            needs.name
        ));
    }
    if needs.uses_offered_values && screen.rewards_offered < screen.trials {
        unmet.push(format!(
            "model {} uses offered values, but {} of {} trials lack reward_a/reward_b",
            needs.name,
            screen.trials - screen.rewards_offered,
            screen.trials
        ));
    }
    if needs.uses_response_times && screen.timed == 0 {
        unmet.push(format!(
            "model {} uses response times, but no response keeps one",
            needs.name
        ));
    }
    let wanted = per_parameter * needs.free_parameters;
    if screen.responses < wanted {
        unmet.push(format!(
            "{} responses for {} free parameters of model {}; expected at least {wanted} \
             ({per_parameter} per parameter)",
            screen.responses, needs.free_parameters, needs.name
        ));
    }
    unmet
}

/// Data that cannot be fitted at all.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum ScreenError {
    /// Response times whose median is above [`MILLISECOND_MEDIAN`].
    #[error(
        "response times look like milliseconds: {count} subject(s) have a median response time \
         above {limit} (e.g. subject {example:?}, median {median}); expected seconds: divide the \
         rt column by 1000",
        limit = MILLISECOND_MEDIAN
    )]
    Milliseconds {
        /// Subjects affected.
        count: usize,
        /// The first of them.
        example: String,
        /// Its median.
        median: f64,
    },
    /// Subjects with fewer responses than a model's free parameters.
    #[error(
        "subject(s) {subjects} have fewer responses than the {free_parameters} free parameters \
         of model {model}; expected at least {free_parameters} responses per subject (remove \
         these subjects or choose a smaller model)"
    )]
    TooFewResponses {
        /// Model name.
        model: String,
        /// Its free parameters.
        free_parameters: usize,
        /// The subjects, listed (the first ten, then a count).
        subjects: String,
    },
}

/// Screens a whole table: stops on response times that look like milliseconds (checked before
/// trimming), trims with the settings, screens every subject and refuses, by name, subjects with
/// fewer responses than a model's free parameters.
pub fn screen_table(
    table: &mut TrialTable,
    settings: &ScreenSettings,
    needs: &[ModelNeeds],
) -> Result<Vec<SubjectScreen>, ScreenError> {
    let milliseconds = millisecond_medians(table);
    let screens = screen_subjects(table, settings);
    judge_screens(&milliseconds, &screens, needs)?;
    Ok(screens)
}

/// The subjects of `table` whose median response time is above [`MILLISECOND_MEDIAN`] seconds,
/// with that median, in table order (a table may be screened a part at a time: gather these
/// over the parts, then [`judge_screens`]).
pub fn millisecond_medians(table: &TrialTable) -> Vec<(String, f64)> {
    table
        .subjects
        .iter()
        .filter_map(|s| {
            let mut rts: Vec<f64> = s.response_times().collect();
            median(&mut rts).map(|m| (s.id.clone(), m))
        })
        .filter(|(_, m)| *m > MILLISECOND_MEDIAN)
        .collect()
}

/// Trims the response times of `table` with the settings and screens every subject, in table
/// order.
pub fn screen_subjects(table: &mut TrialTable, settings: &ScreenSettings) -> Vec<SubjectScreen> {
    let trimmed = trim_response_times(table, settings.trim_below, settings.trim_above);
    table
        .subjects
        .iter()
        .zip(trimmed)
        .map(|(s, t)| screen(s, settings.fast_floor, t))
        .collect()
}

/// The refusals of the screen over every subject: response times that look like milliseconds
/// (`milliseconds`, from [`millisecond_medians`]), then, per model, subjects with fewer responses
/// than its free parameters.
pub fn judge_screens(
    milliseconds: &[(String, f64)],
    screens: &[SubjectScreen],
    needs: &[ModelNeeds],
) -> Result<(), ScreenError> {
    if let Some((example, median)) = milliseconds.first() {
        return Err(ScreenError::Milliseconds {
            count: milliseconds.len(),
            example: example.clone(),
            median: *median,
        });
    }
    for model in needs {
        let short: Vec<&str> = screens
            .iter()
            .filter(|s| s.responses < model.free_parameters)
            .map(|s| s.subject.as_str())
            .collect();
        if !short.is_empty() {
            let mut subjects = short
                .iter()
                .take(10)
                .map(|s| format!("{s:?}"))
                .collect::<Vec<_>>()
                .join(", ");
            if short.len() > 10 {
                subjects.push_str(&format!(" and {} more", short.len() - 10));
            }
            return Err(ScreenError::TooFewResponses {
                model: model.name.clone(),
                free_parameters: model.free_parameters,
                subjects,
            });
        }
    }
    Ok(())
}

/// Share of the table's response times slower than `deadline` (seconds); `None` without any.
pub fn share_slower_than(table: &TrialTable, deadline: f64) -> Option<f64> {
    let (slower, all) = table
        .subjects
        .iter()
        .flat_map(|s| s.response_times())
        .fold((0usize, 0usize), |(s, n), t| {
            (s + usize::from(t > deadline), n + 1)
        });
    (all > 0).then(|| slower as f64 / all as f64)
}
