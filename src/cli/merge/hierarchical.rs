//! The EM steps of a sharded `fit --hierarchical`, run by `merge` on one node.
//!
//! Each EM iteration needs every subject (the M-step averages all posterior modes), so shards
//! cannot run it. A shard of `fit --hierarchical --shard I/N` fits its subjects as a single run
//! would and also writes each fit's unconstrained optimum θ and its covariance
//! ([`shard::EM_STARTS`], shortest round-trip digits, so they read back to the same numbers).
//! `merge` then runs the recorded fit command itself (the shards' command line without
//! `--shard`, with the merge's `--out`), with the shards' per-subject fits in place of fitting
//! them again: the data are read and screened again, the EM starts from exactly the fits a
//! single run would have made, and every table and run.json are written by the code that writes
//! a single run's folder. What it costs: the merging node needs the trial table at the recorded
//! path (checked against the recorded checksum), the memory of a single run's EM, and the EM's
//! time (every E-step refits each subject's posterior mode, in parallel on `--threads`).

use super::record::{ShardFolder, check_data, strings};
use super::{estimates_by_fit, read_all, run_recorded};
use crate::cli::ShardResults;
use crate::cli::fit::FromShards;
use crate::cli::shard::{self, em_starts_table};
use crate::fit::{Skipped, SubjectFit};
use crate::likelihood::DataMismatch;
use crate::results::Table;
use crate::results::fit_folder::{self, Scored, key};
use serde_json::Value;
use std::collections::HashMap;

/// Runs the EM steps of the shards' fit command into the folder recorded in `record` (the merged
/// run record), from the per-subject fits of the merged `summary` and `parameters` tables and the
/// shards' [`shard::EM_STARTS`].
pub(super) fn run(
    shards: &[ShardFolder],
    parameters: &Table,
    summary: &Table,
    record: &Value,
    replace: bool,
) -> Result<(), Box<dyn std::error::Error>> {
    check_data(record)?;
    let template = em_starts_table(&[]);
    let starts = Table::concatenated(&template, &read_all(shards, shard::EM_STARTS, &template)?);
    let fits = fits_from_tables(summary, parameters, &starts)?;
    let skipped = skipped_from_record(record)?;
    let line = strings(&record["command_line"]);
    println!(
        "merged {} shards: {} per-subject fits; running the EM steps of the group priors",
        shards.len(),
        fits.len()
    );
    run_recorded(
        &shards[0],
        &line,
        ShardResults::Fit(FromShards {
            fits,
            skipped,
            replace,
        }),
    )
}

/// A covariance cell (i, j, value) of [`shard::EM_STARTS`].
type Cell = (usize, usize, f64);

/// The per-subject fits of the fit summary `summary` (rows in a single run's order), with their
/// estimates from `parameters` and θ and its covariance from `starts`.
fn fits_from_tables(
    summary: &Table,
    parameters: &Table,
    starts: &Table,
) -> Result<Vec<SubjectFit>, String> {
    let mut estimates = estimates_by_fit(parameters)?;
    let text = |t: &Table, name: &str| t.texts(name).unwrap_or_default().to_vec();
    let (subject, model, quantity) = (
        text(starts, "subject"),
        text(starts, "model"),
        text(starts, "quantity"),
    );
    let (i, j) = (
        starts.integers("i").unwrap_or_default(),
        starts.integers("j").unwrap_or_default(),
    );
    let value = starts.numbers("value").unwrap_or_default();
    let mut theta: HashMap<(&str, &str), Vec<f64>> = HashMap::new();
    let mut entries: HashMap<(&str, &str), Vec<Cell>> = HashMap::new();
    for r in 0..starts.rows() {
        let fit = (subject[r].as_str(), model[r].as_str());
        let v = value[r].unwrap_or(f64::NAN);
        if quantity[r] == shard::THETA {
            theta.entry(fit).or_default().push(v);
        } else {
            entries
                .entry(fit)
                .or_default()
                .push((i[r] as usize, j[r] as usize, v));
        }
    }
    let number = |name: &str| summary.numbers(name).unwrap_or_default();
    let integer = |name: &str| summary.integers(name).unwrap_or_default();
    let flag = |name: &str| summary.flags(name).unwrap_or_default();
    let (subjects, groups, models) = (
        text(summary, "subject"),
        text(summary, "group"),
        text(summary, "model"),
    );
    let mut fits = Vec::with_capacity(summary.rows());
    for r in 0..summary.rows() {
        let fit = (subjects[r].as_str(), models[r].as_str());
        let missing = |what: &str| {
            format!(
                "the shards hold no {what} of subject {} with model {}: expected the folders of \
                 `fit --hierarchical --shard I/N` ({} and {})",
                fit.0,
                fit.1,
                fit_folder::SUMMARY.csv(),
                shard::EM_STARTS.csv()
            )
        };
        let needed = |name: &str| number(name)[r].ok_or_else(|| missing(name));
        let theta = theta.remove(&fit).ok_or_else(|| missing("theta"))?;
        let covariance_theta = entries.remove(&fit).map(|cells| {
            let mut matrix = vec![vec![f64::NAN; theta.len()]; theta.len()];
            for (a, b, v) in cells {
                if let Some(cell) = matrix.get_mut(a).and_then(|row| row.get_mut(b)) {
                    *cell = v;
                }
            }
            matrix
        });
        fits.push(SubjectFit {
            subject: subjects[r].clone(),
            group: groups[r].clone(),
            model: models[r].clone(),
            scores_response_times: Scored::from_label(&text(summary, "scored")[r])
                .ok_or_else(|| missing("scored"))?
                == Scored::ChoicesAndTimes,
            n_trials: integer("n_trials")[r] as usize,
            n_params: integer("n_params")[r] as usize,
            log_likelihood: needed("log_likelihood")?,
            log_prior: needed("log_prior")?,
            aic: needed("aic")?,
            bic: needed("bic")?,
            starts_at_best: integer("starts_at_best")[r] as usize,
            starts: integer("starts")[r] as usize,
            converged: flag("converged")[r],
            status: text(summary, "status")[r].clone(),
            hessian_ok: flag("hessian_ok")[r],
            termination: text(summary, "termination")[r].clone(),
            gradient_norm: needed("gradient_norm")?,
            estimates: estimates.remove(&fit).ok_or_else(|| missing("estimates"))?,
            theta,
            covariance_theta,
            log_evidence: number("log_evidence_laplace")[r],
        });
    }
    Ok(fits)
}

/// The pairs not fitted of the merged run record `record`, in its order.
fn skipped_from_record(record: &Value) -> Result<Vec<Skipped>, String> {
    let texts = strings(&record["skipped"]);
    let pairs = record[key::NOT_FITTED]
        .as_array()
        .cloned()
        .unwrap_or_default();
    texts
        .iter()
        .zip(&pairs)
        .map(|(text, pair)| {
            let model = pair[key::MODEL].as_str().unwrap_or_default();
            let subject = pair[key::SUBJECT].as_str().unwrap_or_default();
            let message = text
                .strip_prefix(&format!("{model}: subject {subject}: "))
                .ok_or_else(|| {
                    format!(
                        "{} of the shards: {text:?} does not describe the pair not fitted \
                         (model {model}, subject {subject}) beside it",
                        fit_folder::RUN_RECORD
                    )
                })?;
            Ok(Skipped {
                model: model.to_string(),
                reason: DataMismatch {
                    subject: subject.to_string(),
                    message: message.to_string(),
                },
            })
        })
        .collect()
}
