//! Per-subject evidence from the rows of a fit summary table
//! ([`crate::results::fit_folder::read_fit_summary`]): what each likelihood scored, the
//! comparison set of models and subjects, log-sum-exp and information-criterion weights.

use crate::files::InputError;
use crate::results::fit_folder::{self, FitRecord, Scored};
use std::collections::BTreeMap;
use std::path::Path;

/// The per-subject log evidence that enters selection.
#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum)]
pub enum Evidence {
    /// ln p(y | m) ≈ −BIC/2 (Schwarz 1978).
    Bic,
    /// −AIC/2 (Akaike 1974), as in Penny (2012, NeuroImage 59:319) for a less conservative
    /// complexity penalty.
    Aic,
    /// The Laplace approximation at the MAP estimate, column `log_evidence_laplace` of
    /// `fit_summary.csv` (MacKay 2003, ch. 27).
    Laplace,
}

impl Evidence {
    /// How the evidence is written in outputs.
    pub fn label(self) -> &'static str {
        match self {
            Evidence::Bic => "-BIC/2",
            Evidence::Aic => "-AIC/2",
            Evidence::Laplace => "laplace",
        }
    }
}

/// What a model's likelihood is a likelihood of.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum DataKind {
    /// Choices and response times (diffusion choice stage).
    ChoicesAndTimes,
    /// Choices only (softmax choice stage).
    ChoicesOnly,
    /// Not recorded in the file and not a built-in model.
    Unknown,
}

impl From<Scored> for DataKind {
    fn from(scored: Scored) -> DataKind {
        match scored {
            Scored::ChoicesAndTimes => DataKind::ChoicesAndTimes,
            Scored::Choices => DataKind::ChoicesOnly,
        }
    }
}

/// The data kind of `model` in `rows`: as recorded in the `scored` column of fit_summary.csv
/// (written by every fit since it exists), else by name for built-in models, else unknown.
pub fn recorded_data_kind(model: &str, rows: &[FitRecord]) -> DataKind {
    rows.iter()
        .find(|r| r.model == model)
        .and_then(|r| r.scored)
        .map_or_else(|| data_kind(model), DataKind::from)
}

/// The data kind of a model by name: known for built-in models
/// (`crate::model::Model::uses_response_times`), [`DataKind::Unknown`] otherwise.
pub fn data_kind(model: &str) -> DataKind {
    crate::model::built_in_models()
        .iter()
        .find(|m| m.name == model)
        .map_or(DataKind::Unknown, |m| {
            if m.uses_response_times() {
                DataKind::ChoicesAndTimes
            } else {
                DataKind::ChoicesOnly
            }
        })
}

/// The comparison set: subjects that have every compared model, and their log evidence.
#[derive(Clone, Debug, PartialEq)]
pub struct Comparison {
    /// Compared models, in order of first appearance in the file.
    pub models: Vec<String>,
    /// Kept subjects, in order of first appearance.
    pub subjects: Vec<String>,
    /// Group of each kept subject.
    pub groups: Vec<String>,
    /// `records[n][k]`: subject n, model k.
    pub records: Vec<Vec<FitRecord>>,
    /// `log_evidence[n][k]` of the chosen kind.
    pub log_evidence: Vec<Vec<f64>>,
    /// Subjects dropped because they miss compared models, with the models they miss.
    pub dropped: Vec<(String, Vec<String>)>,
    /// Models present in the file but left out of the comparison (choices-only models when
    /// response-time models are present).
    pub excluded: Vec<String>,
    /// Notes for the output (empty when there is nothing to say).
    pub notes: Vec<String>,
}

/// Builds the comparison set from the rows of `path`: keeps comparable models (choices-only
/// models are left out when response-time models are present, see [`data_kind`]), drops
/// subjects that miss a compared model, and takes each row's log evidence of kind `evidence`.
/// Errors when fewer than two models or no subject remain, when a subject's group differs
/// between rows, when the compared models of a subject were fitted to different numbers of
/// trials, or when the Laplace evidence is asked for and missing.
pub fn assemble(
    path: &Path,
    rows: &[FitRecord],
    evidence: Evidence,
    by: &str,
) -> Result<Comparison, InputError> {
    let mut all_models: Vec<String> = Vec::new();
    for r in rows {
        if !all_models.contains(&r.model) {
            all_models.push(r.model.clone());
        }
    }
    let kinds: Vec<DataKind> = all_models
        .iter()
        .map(|m| recorded_data_kind(m, rows))
        .collect();
    let mixed =
        kinds.contains(&DataKind::ChoicesAndTimes) && kinds.contains(&DataKind::ChoicesOnly);
    let mut notes = Vec::new();
    let (models, excluded): (Vec<String>, Vec<String>) = if mixed {
        let (keep, drop): (Vec<_>, Vec<_>) = all_models
            .iter()
            .zip(&kinds)
            .partition(|(_, k)| **k != DataKind::ChoicesOnly);
        let excluded: Vec<String> = drop.into_iter().map(|(m, _)| m.clone()).collect();
        notes.push(format!(
            "choices-only models left out ({}): their likelihoods are not of the same data as \
             the response-time models",
            excluded.join(", ")
        ));
        (keep.into_iter().map(|(m, _)| m.clone()).collect(), excluded)
    } else {
        (all_models.clone(), Vec::new())
    };
    let unknown: Vec<&str> = models
        .iter()
        .filter(|m| recorded_data_kind(m, rows) == DataKind::Unknown)
        .map(String::as_str)
        .collect();
    if !unknown.is_empty() {
        notes.push(format!(
            "what the likelihood scored is not recorded for ({}) (a {} without its `scored` \
             column): make sure every compared likelihood is of the same data",
            unknown.join(", "),
            fit_folder::SUMMARY.csv()
        ));
    }
    if models.len() < 2 {
        return Err(InputError::file(
            path,
            format!(
                "need at least two comparable models, found {} ({}){}",
                models.len(),
                models.join(", "),
                if excluded.is_empty() {
                    String::new()
                } else {
                    format!("; left out as choices-only: {}", excluded.join(", "))
                }
            ),
        ));
    }
    let mut subjects: Vec<String> = Vec::new();
    let mut by_subject: BTreeMap<&str, Vec<&FitRecord>> = BTreeMap::new();
    for r in rows {
        let entry = by_subject.entry(r.subject.as_str()).or_default();
        if entry.is_empty() {
            subjects.push(r.subject.clone());
        } else if entry[0].group != r.group {
            return Err(InputError::at(
                path,
                r.line,
                by,
                format!(
                    "subject '{}' is in group '{}' here but '{}' on line {}",
                    r.subject, r.group, entry[0].group, entry[0].line
                ),
            ));
        }
        entry.push(r);
    }
    let mut out = Comparison {
        models: models.clone(),
        subjects: Vec::new(),
        groups: Vec::new(),
        records: Vec::new(),
        log_evidence: Vec::new(),
        dropped: Vec::new(),
        excluded,
        notes,
    };
    for subject in subjects {
        let fitted = &by_subject[subject.as_str()];
        let found: Vec<Option<&FitRecord>> = models
            .iter()
            .map(|m| fitted.iter().find(|r| &r.model == m).copied())
            .collect();
        if found.iter().any(Option::is_none) {
            let missing = models
                .iter()
                .zip(&found)
                .filter(|(_, f)| f.is_none())
                .map(|(m, _)| m.clone())
                .collect();
            out.dropped.push((subject, missing));
            continue;
        }
        let found: Vec<FitRecord> = found.into_iter().flatten().cloned().collect();
        if let Some(other) = found.iter().find(|r| r.n_trials != found[0].n_trials) {
            return Err(InputError::at(
                path,
                other.line,
                "n_trials",
                format!(
                    "subject '{subject}': model '{}' was fitted to {} trials but '{}' to {} \
                     (line {}); likelihoods of different data cannot be compared",
                    other.model, other.n_trials, found[0].model, found[0].n_trials, found[0].line
                ),
            ));
        }
        let mut evidence_row = Vec::with_capacity(found.len());
        for r in &found {
            evidence_row.push(match evidence {
                Evidence::Bic => -r.bic / 2.0,
                Evidence::Aic => -r.aic / 2.0,
                Evidence::Laplace => r.log_evidence_laplace.ok_or_else(|| {
                    InputError::at(
                        path,
                        r.line,
                        "log_evidence_laplace",
                        format!(
                            "--evidence laplace needs the Laplace log evidence of subject '{}', \
                             model '{}', which is missing or empty (it is written for fits with \
                             priors, and in {eb} of `fit --hierarchical`: --summary {eb}); use \
                             --evidence bic or aic",
                            r.subject,
                            r.model,
                            eb = fit_folder::EB_SUMMARY.csv()
                        ),
                    )
                })?,
            });
        }
        out.groups.push(found[0].group.clone());
        out.subjects.push(subject);
        out.records.push(found);
        out.log_evidence.push(evidence_row);
    }
    if out.subjects.is_empty() {
        return Err(InputError::file(
            path,
            format!(
                "no subject has every compared model fitted ({})",
                models.join(", ")
            ),
        ));
    }
    Ok(out)
}

/// ln Σ exp(xᵢ), computed as m + ln Σ exp(xᵢ − m) with m = max xᵢ.
pub fn log_sum_exp(x: &[f64]) -> f64 {
    let m = x.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !m.is_finite() {
        return m;
    }
    m + x.iter().map(|v| (v - m).exp()).sum::<f64>().ln()
}

/// Information-criterion weights w_k = exp(−Δ_k/2) / Σ_j exp(−Δ_j/2) with Δ_k = c_k − min_j c_j
/// (Akaike weights from AIC: Burnham & Anderson 2002, Model Selection and Multimodel Inference,
/// 2nd ed.; Schwarz weights from BIC: Wagenmakers & Farrell 2004, "AIC model selection
/// using Akaike weights", Psychon. Bull. Rev. 11:192–196). Computed by log-sum-exp.
pub fn information_weights(criterion: &[f64]) -> Vec<f64> {
    let half: Vec<f64> = criterion.iter().map(|c| -c / 2.0).collect();
    let total = log_sum_exp(&half);
    half.iter().map(|h| (h - total).exp()).collect()
}
