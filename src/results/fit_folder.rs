//! The fit folder written by `valuedrift fit`, and read by `compare`, `contrast`, `check` and
//! `export`: the names of its files, the fit summary table's columns and its one reader, and the
//! run record (`run.json`) with the keys that later commands read back and a typed reader of
//! them. The estimates table's columns and reader are in [`super::parameters_file`].
//!
//! The writers (`fit`, and [`super::summary_table`] for the summary's columns) take the names
//! and keys from here, so a file or key is named once for the side that writes it and the side
//! that reads it.

use crate::files::{InputError, csv_rows, finite_number};
use std::collections::{BTreeMap, HashSet};
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

/// Keys of the run record that later commands read back (`fit` writes them with these names).
pub mod key {
    /// The trial table's column the groups were read from (text).
    pub const GROUP_COLUMN: &str = "group_column";
    /// The response lock of the fit in seconds (number, or null without one).
    pub const LOCK: &str = "lock";
    /// The pairs the fit did not fit: a list of objects with [`MODEL`] and [`SUBJECT`].
    pub const NOT_FITTED: &str = "not_fitted";
    /// Model name in an entry of [`NOT_FITTED`].
    pub const MODEL: &str = "model";
    /// Subject label in an entry of [`NOT_FITTED`].
    pub const SUBJECT: &str = "subject";
    /// The models fitted: a list of objects with [`NAME`] and [`DEFINITION`].
    pub const MODELS: &str = "models";
    /// Model name in an entry of [`MODELS`].
    pub const NAME: &str = "name";
    /// The model file's text in an entry of [`MODELS`].
    pub const DEFINITION: &str = "definition";
    /// The settings of `fit --hierarchical` (an object with [`PER_GROUP`]).
    pub const EMPIRICAL_BAYES: &str = "empirical_bayes";
    /// One group prior per group (`--by`) rather than one over all subjects (flag).
    pub const PER_GROUP: &str = "per_group";
    /// The shard of a `fit --shard I/N` run (an object; absent from single and merged runs).
    pub const SHARD: &str = "shard";
}

/// A model recorded in the run record: its name and, when recorded, its definition.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct RecordedModel {
    /// Model name.
    pub name: String,
    /// The model file's text as fitted.
    pub definition: Option<String>,
}

/// What later commands read back from a fit folder's run record. Each key is read on its own: a
/// key that is missing or of another type reads as absent (false for the flag), as in a record
/// of an older version.
#[derive(Clone, Debug, PartialEq)]
pub struct RunRecord {
    /// The file it was read from.
    pub path: PathBuf,
    /// The trial table's column the groups were read from ([`key::GROUP_COLUMN`]).
    pub group_column: Option<String>,
    /// The response lock of the fit in seconds ([`key::LOCK`]).
    pub lock: Option<f64>,
    /// (model, subject) of each pair the fit did not fit ([`key::NOT_FITTED`]); entries without
    /// both texts are left out.
    pub not_fitted: Vec<(String, String)>,
    /// The models fitted, in the record's order ([`key::MODELS`]); entries without a name are
    /// left out. None when the record has no such list.
    pub models: Option<Vec<RecordedModel>>,
    /// The empirical-Bayes priors were fitted one per group ([`key::PER_GROUP`] of
    /// [`key::EMPIRICAL_BAYES`]).
    pub per_group_priors: bool,
}

impl RunRecord {
    /// Reads the run record of fit folder `fits`. None when the folder has none (a parameters
    /// table put together by hand); an error naming the file when it cannot be read or is not
    /// JSON.
    pub fn read(fits: &Path) -> Result<Option<RunRecord>, InputError> {
        let path = fits.join(RUN_RECORD);
        let text = match std::fs::read_to_string(&path) {
            Ok(text) => text,
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(None),
            Err(e) => return Err(InputError::file(&path, format!("cannot be read: {e}"))),
        };
        let record: serde_json::Value = serde_json::from_str(&text).map_err(|e| {
            InputError::file(
                &path,
                format!("is not the JSON run record written by `valuedrift fit`: {e}"),
            )
        })?;
        let text_of = |v: &serde_json::Value, k: &str| v.get(k)?.as_str().map(str::to_string);
        let not_fitted = record
            .get(key::NOT_FITTED)
            .and_then(|v| v.as_array())
            .map_or(&[][..], Vec::as_slice)
            .iter()
            .filter_map(|entry| Some((text_of(entry, key::MODEL)?, text_of(entry, key::SUBJECT)?)))
            .collect();
        let models = record
            .get(key::MODELS)
            .and_then(|v| v.as_array())
            .map(|list| {
                list.iter()
                    .filter_map(|m| {
                        Some(RecordedModel {
                            name: text_of(m, key::NAME)?,
                            definition: text_of(m, key::DEFINITION),
                        })
                    })
                    .collect()
            });
        Ok(Some(RunRecord {
            group_column: text_of(&record, key::GROUP_COLUMN),
            lock: record.get(key::LOCK).and_then(|v| v.as_f64()),
            per_group_priors: record
                .get(key::EMPIRICAL_BAYES)
                .and_then(|eb| eb.get(key::PER_GROUP))
                .and_then(|v| v.as_bool())
                == Some(true),
            not_fitted,
            models,
            path,
        }))
    }

    /// The run record of `fits` when it has one that can be read, for what is only used when
    /// recorded (the group column, the lock, the subjects not fitted, the kind of priors).
    pub fn if_readable(fits: &Path) -> Option<RunRecord> {
        RunRecord::read(fits).ok().flatten()
    }

    /// The subjects the fit did not fit with `model`.
    pub fn not_fitted_with(&self, model: &str) -> HashSet<String> {
        self.not_fitted
            .iter()
            .filter(|(m, _)| m == model)
            .map(|(_, subject)| subject.clone())
            .collect()
    }

    /// The recorded definition of `model`; an error naming the record when it has no list of
    /// models, no model of that name (listing those it has) or no definition of it.
    pub fn definition_of(&self, model: &str) -> Result<&str, InputError> {
        let Some(models) = &self.models else {
            return Err(InputError::file(
                &self.path,
                format!(
                    "has no `{}` list (expected the run record written by `valuedrift fit`)",
                    key::MODELS
                ),
            ));
        };
        let Some(recorded) = models.iter().find(|m| m.name == model) else {
            let names: Vec<&str> = models.iter().map(|m| m.name.as_str()).collect();
            return Err(InputError::file(
                &self.path,
                format!(
                    "records no fit of model {model} (models fitted: {})",
                    names.join(", ")
                ),
            ));
        };
        recorded.definition.as_deref().ok_or_else(|| {
            InputError::file(&self.path, format!("has no definition of model {model}"))
        })
    }
}
