//! Trial data: one row per trial, read from CSV, TSV or Parquet and checked row by row.
//!
//! Rows are ordered by subject, then run, then trial: all rows of a subject together, within a
//! subject all rows of a run together, trial numbers increasing within a run (they may start
//! again in each run). Columns (names can be remapped with [`ColumnMap`] without editing the
//! file):
//!
//! | column | type | required | meaning |
//! |---|---|---|---|
//! | `subject` | text | yes | participant label (de-identified) |
//! | `group` | text | no | cohort or condition label |
//! | `run` | text | no | scanner run or block label; each run's rows together |
//! | `trial` | integer | yes | trial number, increasing within subject and run |
//! | `option_a`, `option_b` | text | no | identity of the option offered on each side, whose value is learned; default: fixed identities `a` and `b` |
//! | `effort_a`, `effort_b` | number ≥ 0 | yes | effort demanded by each option |
//! | `reward_a`, `reward_b` | number | no | offered magnitudes, for tasks where value is shown |
//! | `choice` | `a`, `b` (`c`, …) or empty | yes | the side chosen; empty for no response; other codes (1/2, accept/reject…) through [`ColumnMap::with_choice_codes`] |
//! | `rt` | seconds > 0 or empty | yes | response time; empty for no response |
//! | `outcome` | number or empty | no | what the chosen option delivered; empty when no feedback; on a trial without response it is accepted with a note and nothing is learned from it |
//! | `onset`, `outcome_onset` | seconds ≥ 0 | no | from run start, for imaging exports |
//! | `outcome_if_a`, `outcome_if_b` | number | no | what each option would deliver (designs for simulation) |
//! | `effort_c`, `option_c`, `reward_c`, `outcome_if_c`, then `_d`, … | as for a and b | no | a third (fourth, …) option: each further side whose `effort_<side>` column exists, in the order c, d, e, …; its other columns as for a and b; the choice may then name it |
//! | any other column | text or number | no | kept as a per-trial covariate ([`Trial::covariates`]): a condition, block or session label, a per-trial signal (pupil size, EEG amplitude), a participant's score |
//!
//! A spreadsheet with one row per trial and one column per option attribute is thus read as it
//! is: a three-option task writes `effort_a, effort_b, effort_c` (and `reward_…`, `option_…`) and
//! a choice of `a`, `b` or `c`. Cost attributes besides effort (delay, pain, risk) are further
//! columns `<attribute>_a`, `<attribute>_b`, … read by models that weigh them. An accept/reject
//! offer against a fixed default is two options, the default's columns constant (as in the
//! shared effort-offer data: `option_b` = `rest`, `effort_b` = 0, `reward_b` = 1).
//!
//! An empty cell is a missing value; other tokens (NA, NaN, N/A, ., …) are read as missing
//! through [`ColumnMap::with_missing`]. Before a fit, [`screen`] summarises each subject's data
//! and [`trim_response_times`] can set aside response times outside given limits: a trimmed
//! trial keeps its choice and outcome (the participant saw it, so values are still learned) and
//! only its time is dropped.

mod read;
mod screen;

pub use read::{
    ColumnMap, ColumnMapError, ReadNotes, SubjectParts, read_trials, read_trials_noted,
};
pub use screen::{
    DEFAULT_FAST_FLOOR, MILLISECOND_MEDIAN, ModelNeeds, ScreenError, ScreenSettings,
    ScreenSettingsError, SubjectScreen, TRIALS_PER_PARAMETER, TrimCounts, judge_screens,
    millisecond_medians, screen, screen_subjects, screen_table, share_slower_than,
    trim_response_times, unmet_needs,
};

/// Labels of the options offered on a trial, in column order: the per-option columns of a trial
/// table end in these (effort_a, effort_b, effort_c, …), and the choice column names one.
pub const SIDES: [&str; 26] = [
    "a", "b", "c", "d", "e", "f", "g", "h", "i", "j", "k", "l", "m", "n", "o", "p", "q", "r", "s",
    "t", "u", "v", "w", "x", "y", "z",
];

/// The option chosen on a trial: the index of its side (0 for `a`, 1 for `b`, …). With two
/// options, choosing `a` is the upper bound of the diffusion.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct Choice(pub usize);

impl Choice {
    /// The option shown as `a`.
    pub const A: Choice = Choice(0);
    /// The option shown as `b`.
    pub const B: Choice = Choice(1);

    /// The side's label: `"a"`, `"b"`, `"c"`, ….
    pub fn as_str(self) -> &'static str {
        SIDES.get(self.0).copied().unwrap_or("?")
    }

    /// The choice of the side labelled `label` (ASCII case ignored).
    pub fn from_label(label: &str) -> Option<Choice> {
        SIDES
            .iter()
            .position(|s| s.eq_ignore_ascii_case(label))
            .map(Choice)
    }

    /// Index of the chosen side among the trial's offers.
    pub fn index(self) -> usize {
        self.0
    }
}

/// One option as offered on a trial.
#[derive(Clone, Debug, PartialEq)]
pub struct Offer {
    /// Index into [`Subject::options`] of the option's identity, whose value is learned.
    pub option: usize,
    /// Effort it demands (≥ 0).
    pub effort: f64,
    /// Offered magnitude, where the task shows it.
    pub reward: Option<f64>,
    /// What it would deliver if chosen (simulation designs).
    pub outcome_if: Option<f64>,
}

/// One trial of one subject.
#[derive(Clone, Debug, PartialEq)]
pub struct Trial {
    /// Trial number from the file.
    pub trial: i64,
    /// Run label (empty string when the file has no `run` column).
    pub run: String,
    /// The options offered, by side (a, b, c, …); at least two.
    pub offers: Vec<Offer>,
    /// The choice, or `None` for no response.
    pub choice: Option<Choice>,
    /// Response time in seconds: `None` without a response; also `None` with a choice when the
    /// time was trimmed ([`trim_response_times`]), so that the choice counts without its time.
    pub rt: Option<f64>,
    /// Outcome delivered by the chosen option, or `None` without feedback.
    pub outcome: Option<f64>,
    /// Trial onset in seconds from run start.
    pub onset: Option<f64>,
    /// Outcome onset in seconds from run start.
    pub outcome_onset: Option<f64>,
    /// Cells of the table's other columns, in the order of [`Subject::covariates`], as written
    /// (`None` when missing); a model reads them as condition levels or as numbers.
    pub covariates: Vec<Option<String>>,
}

impl Trial {
    /// The offer on the chosen side, when there was a response.
    pub fn chosen(&self) -> Option<&Offer> {
        self.choice.and_then(|c| self.offers.get(c.0))
    }

    /// The cell of covariate column `index`, or of the canonical columns `run` and `trial`, as
    /// text; `None` when missing.
    pub fn covariate(&self, index: CovariateColumn) -> Option<std::borrow::Cow<'_, str>> {
        use std::borrow::Cow;
        match index {
            CovariateColumn::Run => Some(Cow::Borrowed(self.run.as_str())),
            CovariateColumn::Trial => Some(Cow::Owned(self.trial.to_string())),
            CovariateColumn::Extra(k) => self.covariates.get(k)?.as_deref().map(Cow::Borrowed),
        }
    }
}

/// Where a covariate's values are: the canonical `run` or `trial` column, or one of the
/// table's other columns (by index into [`Subject::covariates`]).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum CovariateColumn {
    /// The run (block, session) label.
    Run,
    /// The trial number.
    Trial,
    /// Another column of the table.
    Extra(usize),
}

/// All trials of one subject, in file order.
#[derive(Clone, Debug, PartialEq)]
pub struct Subject {
    /// Participant label.
    pub id: String,
    /// Group label (empty string when the file has no `group` column).
    pub group: String,
    /// Option identities in order of first appearance; trials refer to them by index.
    pub options: Vec<String>,
    /// The trials.
    pub trials: Vec<Trial>,
    /// Names of the table's other columns, kept as per-trial covariates (shared by all
    /// subjects of a table).
    pub covariates: std::sync::Arc<[String]>,
}

impl Subject {
    /// Where the column called `name` is, for covariates: `run`, `trial` or another column of
    /// the table; `None` when the table has no such column.
    pub fn covariate_column(&self, name: &str) -> Option<CovariateColumn> {
        match name {
            "run" => Some(CovariateColumn::Run),
            "trial" => Some(CovariateColumn::Trial),
            _ => self
                .covariates
                .iter()
                .position(|c| c == name)
                .map(CovariateColumn::Extra),
        }
    }

    /// Response times of the trials with a response.
    pub fn response_times(&self) -> impl Iterator<Item = f64> + '_ {
        self.trials.iter().filter_map(|t| t.rt)
    }

    /// Number of trials with a response.
    pub fn n_responses(&self) -> usize {
        self.trials.iter().filter(|t| t.choice.is_some()).count()
    }
}

/// A whole trial table.
#[derive(Clone, Debug, PartialEq)]
pub struct TrialTable {
    /// Subjects in file order.
    pub subjects: Vec<Subject>,
    /// Which optional columns were present (by canonical name).
    pub present: Vec<String>,
}

impl TrialTable {
    /// True when the canonical column `name` was present in the file.
    pub fn has_column(&self, name: &str) -> bool {
        self.present.iter().any(|c| c == name)
    }
}
