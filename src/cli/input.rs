//! What the user gives, checked before any work: how a trial table is read (choice codes,
//! missing-value tokens), numeric options that would otherwise be accepted as nonsense, and the
//! data screen before fitting (summary, trimming, models a subject's data cannot support).

use crate::data::{
    ColumnMap, ColumnMapError, DEFAULT_FAST_FLOOR, ModelNeeds, ScreenSettings, ScreenSettingsError,
    SubjectParts, SubjectScreen, TRIALS_PER_PARAMETER, TrialTable, judge_screens,
    millisecond_medians, read_trials_noted, screen_subjects, trim_response_times, unmet_needs,
};
use crate::fit::{FitOptions, Outcome, Skipped, SubjectFit, fit_table_each};
use crate::likelihood::DataMismatch;
use crate::model::Model;
use crate::results::{Column, Table};
use std::path::{Path, PathBuf};

/// Options of every command that reads a trial table: the file's choice codes and its
/// missing-value tokens.
#[derive(Clone, Debug, Default, clap::Args)]
pub struct ReadingArgs {
    /// Choice codes of your file, as code=a / code=b pairs, e.g. 1=a,2=b or accept=a,reject=b
    /// (default: the file writes a and b).
    #[arg(long, default_value = "")]
    pub choice_codes: String,
    /// Cell texts that mean "missing" in your file besides an empty cell, comma-separated,
    /// e.g. NA,NaN,N/A,.
    #[arg(long, default_value = "")]
    pub missing: String,
}

/// A command-line option whose value cannot be used: the option, the value given (empty when
/// the message quotes it itself) and what was expected.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
#[error("{option}{}: {expected}", if value.is_empty() { String::new() } else { format!(" {value}") })]
pub struct OptionError {
    /// The option, as typed (`--deadline`).
    pub option: &'static str,
    /// The value given.
    pub value: String,
    /// What is wrong and what was expected.
    pub expected: String,
}

impl OptionError {
    pub(super) fn new(
        option: &'static str,
        value: impl ToString,
        expected: impl Into<String>,
    ) -> Self {
        OptionError {
            option,
            value: value.to_string(),
            expected: expected.into(),
        }
    }
}

/// A column mapping of `--columns` that cannot be used, alone or with `--by`.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
pub enum ColumnsError {
    /// The mapping itself.
    #[error("--columns: {0}")]
    Mapping(ColumnMapError),
    /// `--by` and a `group=` mapping both name the group column.
    #[error("--by {by} and a group mapping in --columns both name the group column; give one")]
    GroupNamedTwice {
        /// The column of `--by`.
        by: String,
    },
}

impl ReadingArgs {
    /// `columns` with the choice codes and missing-value tokens added.
    pub fn apply(&self, columns: ColumnMap) -> Result<ColumnMap, OptionError> {
        columns
            .with_missing(&self.missing)
            .map_err(|e| OptionError::new("--missing", "", e.to_string()))?
            .with_choice_codes(&self.choice_codes)
            .map_err(|e| OptionError::new("--choice-codes", "", e.to_string()))
    }
}

/// Reads a trial table and prints the reader's notes (once per file) to standard error.
pub fn read_table(
    path: &Path,
    columns: &ColumnMap,
) -> Result<TrialTable, crate::files::InputError> {
    let (table, notes) = read_trials_noted(path, columns)?;
    for line in notes.lines(path) {
        eprintln!("{line}");
    }
    Ok(table)
}

/// Options of the data screen (`fit`).
#[derive(Clone, Debug, clap::Args)]
pub struct ScreenArgs {
    /// Responses faster than this many seconds are counted as very fast in the data screen
    /// (default 0.2 s, common practice).
    #[arg(long, default_value_t = DEFAULT_FAST_FLOOR)]
    pub fast_floor: f64,
    /// Set aside response times below this many seconds: the choice still counts (scored
    /// without its time) and its outcome is still learned from.
    #[arg(long)]
    pub trim_below: Option<f64>,
    /// Set aside response times above this many seconds (as --trim-below).
    #[arg(long)]
    pub trim_above: Option<f64>,
    /// A model is fitted to a subject only with at least this many responses per free
    /// parameter (default 10, the rule of about ten observations per estimated parameter).
    #[arg(long, default_value_t = TRIALS_PER_PARAMETER)]
    pub responses_per_parameter: usize,
}

impl ScreenArgs {
    /// The checked settings.
    pub fn settings(&self) -> Result<ScreenSettings, ScreenSettingsError> {
        let settings = ScreenSettings {
            fast_floor: self.fast_floor,
            trim_below: self.trim_below,
            trim_above: self.trim_above,
            responses_per_parameter: self.responses_per_parameter,
        };
        settings.validate()?;
        Ok(settings)
    }
}

/// Most threads accepted, as a multiple of the machine's cores: more only add switching.
const THREADS_PER_CORE: usize = 4;

/// Refuses a thread count far above the machine's cores (0, all cores, is always accepted).
pub fn check_threads(threads: usize) -> Result<usize, OptionError> {
    let cores = cores();
    if threads > THREADS_PER_CORE * cores {
        return Err(OptionError::new(
            "--threads",
            threads,
            format!(
                "this machine has {cores} cores; expected at most {} threads ({THREADS_PER_CORE} \
                 per core), or 0 for all cores",
                THREADS_PER_CORE * cores
            ),
        ));
    }
    Ok(threads)
}

/// [`check_threads`] for a command given on this machine; for a command that `merge` runs again
/// from a shard's recorded command line (`from_shards`), the recorded count capped at what this
/// machine allows, since the shards may have run on nodes with more cores and results do not
/// depend on the number of threads.
pub fn threads_here(threads: usize, from_shards: bool) -> Result<usize, OptionError> {
    if from_shards {
        Ok(threads.min(THREADS_PER_CORE * cores()))
    } else {
        check_threads(threads)
    }
}

/// The cores this machine offers the process (1 where that cannot be told).
fn cores() -> usize {
    std::thread::available_parallelism().map_or(1, |n| n.get())
}

/// Refuses a count below `least` for the option `name`, saying what it counts.
pub fn check_at_least(
    name: &'static str,
    value: usize,
    least: usize,
    what: &str,
) -> Result<usize, OptionError> {
    if value < least {
        return Err(OptionError::new(
            name,
            value,
            format!("expected at least {least} {what}"),
        ));
    }
    Ok(value)
}

/// Refuses a deadline that is not a finite number of seconds > 0.
pub fn check_deadline(deadline: Option<f64>) -> Result<Option<f64>, OptionError> {
    match deadline {
        Some(d) if !(d.is_finite() && d > 0.0) => Err(OptionError::new(
            "--deadline",
            d,
            "expected a number of seconds > 0 (the time at which a trial ends without a response)",
        )),
        other => Ok(other),
    }
}

/// Refuses a response lock that is not a finite number of seconds ≥ 0 before the deadline.
pub fn check_lock(lock: Option<f64>, deadline: Option<f64>) -> Result<Option<f64>, OptionError> {
    match (lock, deadline) {
        (Some(l), _) if !(l.is_finite() && l >= 0.0) => Err(OptionError::new(
            "--lock",
            l,
            "expected a number of seconds ≥ 0 (the time from offer onset before which no \
             response can be given)",
        )),
        (Some(l), Some(d)) if l >= d => Err(OptionError::new(
            "--lock",
            l,
            format!("expected a lock before the deadline ({d} s)"),
        )),
        (other, _) => Ok(other),
    }
}

/// What a model needs of the data, from the model.
pub fn model_needs(model: &Model) -> ModelNeeds {
    ModelNeeds {
        name: model.name.clone(),
        weights_effort: model
            .costs
            .iter()
            .any(|c| c.is_effort() && c.shape_name != "none"),
        uses_offered_values: !model.learns(),
        uses_response_times: model.uses_response_times(),
        free_parameters: model.free_slots().len(),
    }
}

/// The data screen of a fit: per-subject summaries and, per model, the subjects it is not fitted
/// to with the reasons.
pub struct Screened {
    /// Settings used.
    pub settings: ScreenSettings,
    /// One per subject, in table order.
    pub subjects: Vec<SubjectScreen>,
    /// Per model (in the order given), per subject: the unmet needs (empty: fitted).
    pub unmet: Vec<(String, Vec<Vec<String>>)>,
}

/// Share of a deadline's responses that may be slower than it before the deadline is refused.
const DEADLINE_SLOWER_LIMIT: f64 = 0.5;

/// Screens `table` (trimming it with the settings) for `models`: refuses response times that
/// look like milliseconds, a deadline below most response times and subjects with fewer
/// responses than a model's free parameters, naming the file; prints the summary.
pub fn screen_before_fit(
    path: &Path,
    table: &mut TrialTable,
    settings: &ScreenSettings,
    models: &[Model],
    window: (Option<f64>, Option<f64>),
) -> Result<Screened, ScreenRefusal> {
    let mut tally = ScreenTally::new(*settings, window);
    tally.add(table);
    tally.judge(path, models)
}

/// The data screen of the trial table at `path`, read a part at a time (memory does not grow
/// with the number of subjects); prints what the reader noted. [`ScreenTally::judge`] then
/// refuses or passes it exactly as [`screen_before_fit`] would the whole table.
///
/// A table that came in a single part (at most [`SUBJECTS_PER_PART`] subjects) is returned
/// too, trimmed as the screen trimmed it: it is what [`fit_streamed`] would read again, and
/// holding it costs no more memory than the part did.
pub fn screen_streamed(
    path: &Path,
    columns: &ColumnMap,
    settings: &ScreenSettings,
    window: (Option<f64>, Option<f64>),
) -> Result<(ScreenTally, Option<TrialTable>), Box<dyn std::error::Error>> {
    let mut parts = SubjectParts::open(path, columns)?;
    let mut tally = ScreenTally::new(*settings, window);
    let mut single = None;
    let mut count = 0;
    while let Some(mut part) = parts.next_part(SUBJECTS_PER_PART)? {
        tally.add(&mut part);
        count += 1;
        single = (count == 1).then_some(part);
    }
    for line in parts.notes().lines(path) {
        eprintln!("{line}");
    }
    Ok((tally, single))
}

/// Subjects read at a time when a table is streamed: enough to keep every thread busy, few
/// enough that memory stays small (about 0.1 MB per subject of 200 trials).
pub const SUBJECTS_PER_PART: usize = 256;

/// The data screen gathered over a table, a part at a time.
pub struct ScreenTally {
    settings: ScreenSettings,
    lock: Option<f64>,
    deadline: Option<f64>,
    /// Response times seen, and those faster than the lock and slower than the deadline (before
    /// trimming).
    responses: usize,
    faster_than_lock: usize,
    slower_than_deadline: usize,
    milliseconds: Vec<(String, f64)>,
    subjects: Vec<SubjectScreen>,
}

impl ScreenTally {
    fn new(settings: ScreenSettings, (lock, deadline): (Option<f64>, Option<f64>)) -> Self {
        ScreenTally {
            settings,
            lock,
            deadline,
            responses: 0,
            faster_than_lock: 0,
            slower_than_deadline: 0,
            milliseconds: Vec::new(),
            subjects: Vec::new(),
        }
    }

    /// Counts the response times of `part`, then trims and screens its subjects.
    fn add(&mut self, part: &mut TrialTable) {
        for t in part.subjects.iter().flat_map(|s| s.response_times()) {
            self.responses += 1;
            self.faster_than_lock += usize::from(self.lock.is_some_and(|l| t < l));
            self.slower_than_deadline += usize::from(self.deadline.is_some_and(|d| t > d));
        }
        self.milliseconds.extend(millisecond_medians(part));
        self.subjects.extend(screen_subjects(part, &self.settings));
    }

    /// The refusals and warnings over the whole table, in the order a whole table is judged;
    /// prints the summary.
    pub fn judge(self, path: &Path, models: &[Model]) -> Result<Screened, ScreenRefusal> {
        let file = path.display();
        let (faster, responses) = (self.faster_than_lock, self.responses);
        if let Some(l) = self.lock {
            if responses > 0 && faster as f64 > DEADLINE_SLOWER_LIMIT * responses as f64 {
                return Err(ScreenRefusal::LockAfterResponses {
                    lock: l,
                    faster,
                    responses,
                    file: path.to_path_buf(),
                });
            }
            if faster > 0 {
                eprintln!(
                    "warning: {faster} of the {responses} response times in {file} are faster \
                     than --lock {l}; the likelihood conditions on no response before the lock, \
                     so these are scored as if the lock were their time's jitter (check the \
                     lock's value)"
                );
            }
        }
        if let Some(d) = self.deadline
            && responses > 0
        {
            let share = self.slower_than_deadline as f64 / responses as f64;
            if share > DEADLINE_SLOWER_LIMIT {
                return Err(ScreenRefusal::DeadlineBeforeResponses {
                    deadline: d,
                    share,
                    file: path.to_path_buf(),
                });
            }
            if share > 0.0 {
                eprintln!(
                    "warning: {:.1} % of the response times in {file} are slower than \
                     --deadline {d}",
                    100.0 * share
                );
            }
        }
        let needs: Vec<ModelNeeds> = models.iter().map(model_needs).collect();
        judge_screens(&self.milliseconds, &self.subjects, &needs).map_err(|error| {
            ScreenRefusal::Data {
                file: path.to_path_buf(),
                error,
            }
        })?;
        let unmet = needs
            .iter()
            .map(|n| {
                let per_subject = self
                    .subjects
                    .iter()
                    .map(|s| unmet_needs(s, n, self.settings.responses_per_parameter))
                    .collect();
                (n.name.clone(), per_subject)
            })
            .collect();
        let screened = Screened {
            settings: self.settings,
            subjects: self.subjects,
            unmet,
        };
        print_screen(&screened);
        Ok(screened)
    }
}

/// Why the data screen stops a fit before it starts.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum ScreenRefusal {
    /// A response lock after most response times.
    #[error(
        "--lock {lock}: {faster} of the {responses} response times in {} are faster than it; \
         expected a lock before most responses (the time from offer onset at which responses \
         became possible). Are the times in seconds?",
        file.display()
    )]
    LockAfterResponses {
        /// The lock in seconds.
        lock: f64,
        /// Response times faster than it.
        faster: usize,
        /// All response times.
        responses: usize,
        /// The trial table.
        file: PathBuf,
    },
    /// A deadline before most response times.
    #[error(
        "--deadline {deadline}: {:.1} % of the response times in {} are slower than it; expected \
         a deadline after most responses (the time at which a trial ended without a response). \
         Are the times in seconds?",
        100.0 * share,
        file.display()
    )]
    DeadlineBeforeResponses {
        /// The deadline in seconds.
        deadline: f64,
        /// Share of the response times slower than it.
        share: f64,
        /// The trial table.
        file: PathBuf,
    },
    /// Data that cannot be fitted at all.
    #[error("{}: column {}: {error}", file.display(), screen_column(error))]
    Data {
        /// The trial table.
        file: PathBuf,
        /// What is wrong with its data.
        error: crate::data::ScreenError,
    },
}

/// The column a screen error is about.
fn screen_column(error: &crate::data::ScreenError) -> &'static str {
    match error {
        crate::data::ScreenError::Milliseconds { .. } => "rt",
        crate::data::ScreenError::TooFewResponses { .. } => "subject",
    }
}

/// The median of `xs`, NaN when empty.
fn median_of(mut xs: Vec<f64>) -> f64 {
    xs.sort_by(f64::total_cmp);
    match xs.len() {
        0 => f64::NAN,
        n if n % 2 == 1 => xs[n / 2],
        n => 0.5 * (xs[n / 2 - 1] + xs[n / 2]),
    }
}

/// Prints the short summary of the screen.
fn print_screen(screened: &Screened) {
    let subjects = &screened.subjects;
    let n = subjects.len();
    let trials: usize = subjects.iter().map(|s| s.trials).sum();
    let responses: usize = subjects.iter().map(|s| s.responses).sum();
    let timed: usize = subjects.iter().map(|s| s.timed).sum();
    let medians = median_of(subjects.iter().filter_map(|s| s.rt_median).collect());
    let lo = subjects
        .iter()
        .filter_map(|s| s.rt_min)
        .fold(f64::INFINITY, f64::min);
    let hi = subjects
        .iter()
        .filter_map(|s| s.rt_max)
        .fold(f64::NEG_INFINITY, f64::max);
    let fast: f64 = subjects
        .iter()
        .map(|s| s.fast_share.unwrap_or(0.0) * s.timed as f64)
        .sum();
    println!(
        "data screen: {n} subjects, {trials} trials, {responses} responses ({timed} with a time)"
    );
    if timed > 0 {
        println!(
            "  response times {lo:.3}-{hi:.3} s, median of subject medians {medians:.3} s; \
             {:.1} % faster than {} s ({} subjects above 10 %)",
            100.0 * fast / timed as f64,
            screened.settings.fast_floor,
            subjects
                .iter()
                .filter(|s| s.fast_share.is_some_and(|f| f > 0.1))
                .count()
        );
    }
    let below: usize = subjects.iter().map(|s| s.trimmed.below).sum();
    let above: usize = subjects.iter().map(|s| s.trimmed.above).sum();
    if screened.settings.trim_below.is_some() || screened.settings.trim_above.is_some() {
        println!(
            "  trimmed: {below} times below {}, {above} above {} (their choices still count, \
             without the time); per subject in {}",
            limit_text(screened.settings.trim_below),
            limit_text(screened.settings.trim_above),
            crate::results::fit_folder::DATA_SCREEN.csv()
        );
        let trimmed: Vec<String> = subjects
            .iter()
            .filter(|s| s.trimmed.below + s.trimmed.above > 0)
            .map(|s| format!("{} {}/{}", s.subject, s.trimmed.below, s.trimmed.above))
            .collect();
        if !trimmed.is_empty() && trimmed.len() <= PER_SUBJECT_LINES {
            println!(
                "  trimmed per subject (below/above): {}",
                trimmed.join(", ")
            );
        }
    }
    let one_sided = subjects
        .iter()
        .filter(|s| s.share_a.is_some_and(|a| a == 0.0 || a == 1.0))
        .count();
    if one_sided > 0 {
        println!(
            "  {one_sided} subjects chose the same option on every response (choices carry \
             no information on value there)"
        );
    }
    for (model, per_subject) in &screened.unmet {
        let refused: Vec<&Vec<String>> = per_subject.iter().filter(|u| !u.is_empty()).collect();
        if let Some(first) = refused.first() {
            println!(
                "  {model}: not fitted to {} of {n} subjects (e.g. {})",
                refused.len(),
                first.join("; ")
            );
        }
    }
}

/// Most subjects whose trimming counts are listed in the console (all are in the table).
const PER_SUBJECT_LINES: usize = 20;

fn limit_text(limit: Option<f64>) -> String {
    limit.map_or_else(|| "-".to_string(), |x| format!("{x} s"))
}

/// Fits each model to the subjects whose data meet its needs; the others are returned as
/// skipped with the reason. Pairs with an outcome in `earlier` (from the journal of an
/// interrupted run) are not fitted again: their outcomes take their places (outcomes of pairs
/// this run does not fit are ignored). `finished` sees each new outcome as soon as it is done.
/// Fits and skipped pairs are in (model, subject) order, subjects in table order, whichever
/// pairs came from `earlier`.
pub fn fit_screened(
    models: &[Model],
    table: &TrialTable,
    screened: &Screened,
    options: &FitOptions,
    threads: usize,
    earlier: Vec<Outcome>,
    finished: &(dyn Fn(&Outcome) + Sync),
) -> Result<(Vec<SubjectFit>, Vec<Skipped>), rayon::ThreadPoolBuildError> {
    let mut fitted = FitsByModel::new(models.len(), earlier);
    fitted.add(models, table, screened, 0, options, threads, finished)?;
    Ok(fitted.finish(models, screened))
}

/// [`fit_screened`] of the trial table at `path`, read again a part at a time, each part trimmed
/// as the screen trimmed it and kept to the subjects `keep` accepts (a shard's; `screened` must
/// hold exactly those subjects, in table order). Memory holds one part and the fits.
#[allow(clippy::too_many_arguments)]
pub fn fit_streamed(
    path: &Path,
    columns: &ColumnMap,
    models: &[Model],
    screened: &Screened,
    keep: &dyn Fn(&str) -> bool,
    options: &FitOptions,
    threads: usize,
    earlier: Vec<Outcome>,
    finished: &(dyn Fn(&Outcome) + Sync),
) -> Result<(Vec<SubjectFit>, Vec<Skipped>), Box<dyn std::error::Error>> {
    let mut parts = SubjectParts::open(path, columns)?;
    let mut fitted = FitsByModel::new(models.len(), earlier);
    let mut first = 0;
    while let Some(mut part) = parts.next_part(SUBJECTS_PER_PART)? {
        part.subjects.retain(|s| keep(&s.id));
        trim_response_times(
            &mut part,
            screened.settings.trim_below,
            screened.settings.trim_above,
        );
        fitted.add(models, &part, screened, first, options, threads, finished)?;
        first += part.subjects.len();
    }
    if first != screened.subjects.len() {
        return Err(format!(
            "{}: changed while it was being fitted ({} subjects when screened, {first} when \
             fitted); run the fit again",
            path.display(),
            screened.subjects.len()
        )
        .into());
    }
    Ok(fitted.finish(models, screened))
}

/// Outcomes gathered over the parts of a table: pairs journalled by an earlier run are taken
/// from it, the others fitted.
struct FitsByModel {
    earlier: std::collections::HashMap<(String, String), Outcome>,
    outcomes: Vec<Outcome>,
    skipped: Vec<Skipped>,
}

impl FitsByModel {
    fn new(models: usize, earlier: Vec<Outcome>) -> Self {
        FitsByModel {
            earlier: earlier.into_iter().map(|o| (outcome_pair(&o), o)).collect(),
            outcomes: Vec::with_capacity(models),
            skipped: Vec::new(),
        }
    }

    /// Fits every model to the subjects of `part` whose data meet its needs and that no earlier
    /// run has fitted; the part's subjects are `screened.subjects[first..]`.
    #[allow(clippy::too_many_arguments)]
    fn add(
        &mut self,
        models: &[Model],
        part: &TrialTable,
        screened: &Screened,
        first: usize,
        options: &FitOptions,
        threads: usize,
        finished: &(dyn Fn(&Outcome) + Sync),
    ) -> Result<(), rayon::ThreadPoolBuildError> {
        for (model, (_, per_subject)) in models.iter().zip(&screened.unmet) {
            let mut kept = TrialTable {
                subjects: Vec::new(),
                present: part.present.clone(),
            };
            for (subject, unmet) in part.subjects.iter().zip(&per_subject[first..]) {
                if !unmet.is_empty() {
                    self.skipped.push(Skipped {
                        model: model.name.clone(),
                        reason: DataMismatch {
                            subject: subject.id.clone(),
                            message: unmet.join("; "),
                        },
                    });
                } else if let Some(outcome) = self
                    .earlier
                    .remove(&(model.name.clone(), subject.id.clone()))
                {
                    self.outcomes.push(outcome);
                } else {
                    kept.subjects.push(subject.clone());
                }
            }
            if kept.subjects.is_empty() {
                continue;
            }
            self.outcomes.extend(fit_table_each(
                std::slice::from_ref(model),
                &kept,
                options,
                threads,
                finished,
            )?);
        }
        Ok(())
    }

    /// Fits and skipped pairs in (model, subject) order, subjects in table order.
    fn finish(self, models: &[Model], screened: &Screened) -> (Vec<SubjectFit>, Vec<Skipped>) {
        let mut fits = Vec::new();
        let mut skipped = self.skipped;
        for outcome in self.outcomes {
            match outcome {
                Ok(f) => fits.push(f),
                Err(s) => skipped.push(s),
            }
        }
        // The pairs the screen set aside come first within each model, and journalled pairs
        // before the new ones; put every model's pairs in table order, the order of an
        // uninterrupted run and the order `merge` restores from shards.
        let position: std::collections::HashMap<&str, usize> = screened
            .subjects
            .iter()
            .enumerate()
            .map(|(k, s)| (s.subject.as_str(), k))
            .collect();
        let model_index = |name: &str| models.iter().position(|m| m.name == name);
        let order =
            |model: &str, subject: &str| (model_index(model), position.get(subject).copied());
        fits.sort_by_key(|f| order(&f.model, &f.subject));
        skipped.sort_by_key(|s| order(&s.model, &s.reason.subject));
        (fits, skipped)
    }
}

/// The (model, subject) pair of an outcome.
pub fn outcome_pair(outcome: &Outcome) -> (String, String) {
    match outcome {
        Ok(f) => (f.model.clone(), f.subject.clone()),
        Err(s) => (s.model.clone(), s.reason.subject.clone()),
    }
}

/// Number of (model, subject) fits the screen lets through.
pub fn screened_jobs(screened: &Screened) -> usize {
    screened
        .unmet
        .iter()
        .flat_map(|(_, per_subject)| per_subject)
        .filter(|u| u.is_empty())
        .count()
}

/// The per-subject screen as a tidy table (data_screen.csv): the counts, the response-time
/// summary, shares, trimming, and one `needs_<model>` column per model (`met`, or the reasons).
pub fn screen_table_output(screened: &Screened) -> Table {
    let s = &screened.subjects;
    let number =
        |f: &dyn Fn(&SubjectScreen) -> Option<f64>| Column::Number(s.iter().map(f).collect());
    let count = |f: &dyn Fn(&SubjectScreen) -> usize| {
        Column::Integer(s.iter().map(|x| f(x) as i64).collect())
    };
    let mut table = Table::default()
        .with(
            "subject",
            Column::Text(s.iter().map(|x| x.subject.clone()).collect()),
        )
        .with(
            "group",
            Column::Text(s.iter().map(|x| x.group.clone()).collect()),
        )
        .with("trials", count(&|x| x.trials))
        .with("responses", count(&|x| x.responses))
        .with("timed_responses", count(&|x| x.timed))
        .with("rt_min", number(&|x| x.rt_min))
        .with("rt_median", number(&|x| x.rt_median))
        .with("rt_max", number(&|x| x.rt_max))
        .with(
            "fast_floor",
            number(&|_| Some(screened.settings.fast_floor)),
        )
        .with("fast_share", number(&|x| x.fast_share))
        .with("share_a", number(&|x| x.share_a))
        .with("share_b", number(&|x| x.share_b()))
        .with("trimmed_below", count(&|x| x.trimmed.below))
        .with("trimmed_above", count(&|x| x.trimmed.above))
        .with(
            "effort_varies",
            Column::Flag(s.iter().map(|x| x.effort_varies).collect()),
        )
        .with("rewards_offered", count(&|x| x.rewards_offered));
    for (model, per_subject) in &screened.unmet {
        let column = per_subject
            .iter()
            .map(|u| {
                if u.is_empty() {
                    "met".to_string()
                } else {
                    u.join("; ")
                }
            })
            .collect();
        table = table.with(&format!("needs_{model}"), Column::Text(column));
    }
    table
}

/// The screen's part of run.json: settings, the per-parameter rule and per-subject trimming.
pub fn screen_record(screened: &Screened) -> serde_json::Value {
    let trimmed: Vec<serde_json::Value> = screened
        .subjects
        .iter()
        .filter(|s| s.trimmed.below + s.trimmed.above > 0)
        .map(|s| {
            serde_json::json!({
                "subject": s.subject,
                "below": s.trimmed.below,
                "above": s.trimmed.above,
            })
        })
        .collect();
    serde_json::json!({
        "fast_floor": screened.settings.fast_floor,
        "trim_below": screened.settings.trim_below,
        "trim_above": screened.settings.trim_above,
        "trimmed_total": {
            "below": screened.subjects.iter().map(|s| s.trimmed.below).sum::<usize>(),
            "above": screened.subjects.iter().map(|s| s.trimmed.above).sum::<usize>(),
        },
        "trimmed_per_subject": trimmed,
        "responses_per_free_parameter": screened.settings.responses_per_parameter,
        "table": crate::results::fit_folder::DATA_SCREEN.csv(),
    })
}
