//! The fit folder written by `valuedrift fit`, and read by `compare`, `contrast`, `check` and
//! `export`: the names of its files, and the fit summary table's columns and its one reader. The
//! estimates table's columns and reader are in [`super::parameters_file`].
//!
//! The writers (`fit`, and [`super::summary_table`] for the summary's columns) take the names
//! from here, so a file is named once for the side that writes it and the side that reads it.

use crate::files::{InputError, csv_rows, finite_number};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// A table of a fit folder, written as `<stem>.csv` with a Parquet twin `<stem>.parquet`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct FolderTable {
    /// The file name without its extension.
    pub stem: &'static str,
}

impl FolderTable {
    /// The table written as `<stem>.csv` and `<stem>.parquet`.
    pub const fn new(stem: &'static str) -> FolderTable {
        FolderTable { stem }
    }

    /// The CSV file's name, `<stem>.csv`.
    pub fn csv(self) -> String {
        format!("{}.csv", self.stem)
    }

    /// The CSV file in folder `dir`.
    pub fn csv_in(self, dir: &Path) -> PathBuf {
        dir.join(self.csv())
    }
}

/// The data screen: one row per subject (`fit` writes it before fitting).
pub const DATA_SCREEN: FolderTable = FolderTable::new("data_screen");
/// Per-subject estimates, one row per subject, model and parameter
/// ([`super::parameters_file`]).
pub const PARAMETERS: FolderTable = FolderTable::new("parameters");
/// Per-subject estimates, one row per subject and model.
pub const ESTIMATES_WIDE: FolderTable = FolderTable::new("estimates_wide");
/// Fit statistics, one row per subject and model ([`SUMMARY_COLUMNS`], [`read_fit_summary`]).
pub const SUMMARY: FolderTable = FolderTable::new("fit_summary");
/// [`PARAMETERS`] of the empirical-Bayes estimates (`fit --hierarchical`).
pub const EB_PARAMETERS: FolderTable = FolderTable::new("eb_parameters");
/// [`ESTIMATES_WIDE`] of the empirical-Bayes estimates.
pub const EB_ESTIMATES_WIDE: FolderTable = FolderTable::new("eb_estimates_wide");
/// [`SUMMARY`] of the empirical-Bayes estimates.
pub const EB_SUMMARY: FolderTable = FolderTable::new("eb_fit_summary");
/// The group priors of the empirical-Bayes fits ([`super::group_prior_table`]).
pub const EB_GROUP_PRIORS: FolderTable = FolderTable::new("eb_group_priors");
/// Convergence and integrated BIC of the empirical-Bayes fits
/// ([`super::group_evidence_table`]).
pub const EB_MODEL_EVIDENCE: FolderTable = FolderTable::new("eb_model_evidence");
/// The prior mean's regression on participant scores ([`super::prior_regression_table`]).
pub const EB_PRIOR_REGRESSION: FolderTable = FolderTable::new("eb_prior_regression");
/// Covariances and correlations of full-covariance group priors
/// ([`super::group_correlation_table`]).
pub const EB_GROUP_CORRELATIONS: FolderTable = FolderTable::new("eb_group_correlations");

/// The run record's file name.
pub const RUN_RECORD: &str = "run.json";

/// Which per-subject estimates of a fit folder a later command reads.
#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum)]
pub enum EstimateSource {
    /// The per-subject fits (maximum likelihood, or MAP with declared priors).
    PerSubject,
    /// The shrunken estimates under the group prior of `fit --hierarchical`.
    EmpiricalBayes,
}

impl EstimateSource {
    /// The parameters table of this source.
    pub fn parameters(self) -> FolderTable {
        match self {
            EstimateSource::PerSubject => PARAMETERS,
            EstimateSource::EmpiricalBayes => EB_PARAMETERS,
        }
    }

    /// The one-row-per-subject-and-model estimates table of this source.
    pub fn estimates_wide(self) -> FolderTable {
        match self {
            EstimateSource::PerSubject => ESTIMATES_WIDE,
            EstimateSource::EmpiricalBayes => EB_ESTIMATES_WIDE,
        }
    }

    /// The fit summary table of this source.
    pub fn summary(self) -> FolderTable {
        match self {
            EstimateSource::PerSubject => SUMMARY,
            EstimateSource::EmpiricalBayes => EB_SUMMARY,
        }
    }

    /// The parameters table of this source in fit folder `dir`.
    pub fn parameters_file(self, dir: &Path) -> PathBuf {
        self.parameters().csv_in(dir)
    }
}

/// Columns of the fit summary table, in order.
pub const SUMMARY_COLUMNS: [&str; 18] = [
    "subject",
    "group",
    "model",
    "scored",
    "n_trials",
    "n_params",
    "log_likelihood",
    "log_prior",
    "aic",
    "bic",
    "log_evidence_laplace",
    "starts_at_best",
    "starts",
    "converged",
    "status",
    "hessian_ok",
    "gradient_norm",
    "termination",
];

/// What a fit's likelihood scored: column `scored` of the fit summary.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Scored {
    /// Choices and response times (`choices_and_times`).
    ChoicesAndTimes,
    /// Choices only (`choices`).
    Choices,
}

impl Scored {
    /// What a likelihood that does or does not score response times scored.
    pub fn of(scores_response_times: bool) -> Scored {
        if scores_response_times {
            Scored::ChoicesAndTimes
        } else {
            Scored::Choices
        }
    }

    /// The cell text.
    pub fn label(self) -> &'static str {
        match self {
            Scored::ChoicesAndTimes => "choices_and_times",
            Scored::Choices => "choices",
        }
    }

    /// The value whose cell text is `label`.
    pub fn from_label(label: &str) -> Option<Scored> {
        [Scored::ChoicesAndTimes, Scored::Choices]
            .into_iter()
            .find(|s| s.label() == label)
    }
}

/// One row of the fit summary table, as read back.
#[derive(Clone, Debug, PartialEq)]
pub struct FitRecord {
    /// Subject label.
    pub subject: String,
    /// Value of the `--by` column.
    pub group: String,
    /// Model name.
    pub model: String,
    /// Trials in the likelihood.
    pub n_trials: i64,
    /// Free parameters.
    pub n_params: i64,
    /// Akaike information criterion.
    pub aic: f64,
    /// Bayesian information criterion.
    pub bic: f64,
    /// Laplace log evidence, when the file has it for this row.
    pub log_evidence_laplace: Option<f64>,
    /// What the likelihood scored (column `scored`), when the file records it.
    pub scored: Option<Scored>,
    /// Line in the file (header = line 1).
    pub line: u64,
}

/// Reads a fit summary table (`fit_summary.csv` or `eb_fit_summary.csv` of `valuedrift fit`),
/// grouping by column `by`. The columns `log_evidence_laplace` and `scored` are optional and may
/// be empty. Errors name the file, line (header = line 1) and column.
pub fn read_fit_summary(path: &Path, by: &str) -> Result<Vec<FitRecord>, InputError> {
    let (mut reader, header) = crate::files::open_csv(path)?;
    let find = |name: &str| crate::files::column_index(path, &header, name);
    let [subject_c, model_c, trials_c, params_c, aic_c, bic_c] = [
        find("subject")?,
        find("model")?,
        find("n_trials")?,
        find("n_params")?,
        find("aic")?,
        find("bic")?,
    ];
    let by_c = find(by)?;
    let laplace_c = header.iter().position(|h| h == "log_evidence_laplace");
    let scored_c = header.iter().position(|h| h == "scored");
    let mut seen: BTreeMap<(String, String), u64> = BTreeMap::new();
    let mut out = Vec::new();
    for row in csv_rows(path, &mut reader) {
        let (line, record) = row?;
        let cell = |c: usize| record.get(c).unwrap_or("");
        let number = |c: usize, name: &str| finite_number(path, line, name, cell(c));
        let count = |c: usize, name: &str| -> Result<i64, InputError> {
            let text = cell(c);
            text.parse::<i64>().ok().filter(|&x| x >= 0).ok_or_else(|| {
                InputError::at(
                    path,
                    line,
                    name,
                    format!("'{text}' is not a whole number ≥ 0"),
                )
            })
        };
        let text = |c: usize, name: &str| -> Result<String, InputError> {
            match cell(c) {
                "" => Err(InputError::at(
                    path,
                    line,
                    name,
                    format!("empty {name} (expected a label)"),
                )),
                t => Ok(t.to_string()),
            }
        };
        let subject = text(subject_c, "subject")?;
        let model = text(model_c, "model")?;
        let group = text(by_c, by)?;
        let log_evidence_laplace = match laplace_c {
            Some(c) if !cell(c).is_empty() => Some(number(c, "log_evidence_laplace")?),
            _ => None,
        };
        let scored = match scored_c.map(cell) {
            None | Some("") => None,
            Some(label) => Some(Scored::from_label(label).ok_or_else(|| {
                InputError::at(
                    path,
                    line,
                    "scored",
                    format!(
                        "'{label}': expected {} or {}",
                        Scored::ChoicesAndTimes.label(),
                        Scored::Choices.label()
                    ),
                )
            })?),
        };
        let row = FitRecord {
            scored,
            n_trials: count(trials_c, "n_trials")?,
            n_params: count(params_c, "n_params")?,
            aic: number(aic_c, "aic")?,
            bic: number(bic_c, "bic")?,
            log_evidence_laplace,
            line,
            subject,
            group,
            model,
        };
        if let Some(first) = seen.insert((row.subject.clone(), row.model.clone()), line) {
            return Err(InputError::at(
                path,
                line,
                "model",
                format!(
                    "subject '{}' has model '{}' twice (first on line {first})",
                    row.subject, row.model
                ),
            ));
        }
        out.push(row);
    }
    if out.is_empty() {
        return Err(InputError::file(path, "has no data rows"));
    }
    Ok(out)
}
