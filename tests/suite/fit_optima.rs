//! The fitter reaches the real optimum: per-subject log-likelihoods against an independent
//! optimiser. `tests/reference/fit_optima.csv` was written by
//! `tests/reference/generate_fit_optima.py` (scipy's L-BFGS-B, Byrd, Lu, Nocedal & Zhu 1995, on
//! the natural scale with the models' bounds, from a dense set of starts over the whole bounded
//! box, with its own implementation of the learning rules and of the Wiener density, Navarro &
//! Fuss 2009). Cases, each built to trip a naive fitter:
//!
//! - two-armed bandits with two interleaved contexts, ±1 outcomes and small learning rates
//!   (200 trials), where the likelihood has a plateau (inverse temperature, value scale or
//!   learning rates at zero make everything else irrelevant), for a choices-only and a diffusion
//!   model;
//! - a subject whose response times are all 0.05 s (optimum with ndt close to its cap);
//! - 60 participants of the published effort-offers study (Mehrhof & Nord 2025, MIT licence,
//!   `tests/data/effort_offers_README.md`), model `offered-linear-reference`.
//!
//! Every fit must come within 0.05 of the reference log-likelihood (or above it), and a fit
//! reported as converged must not be more than 0.05 below it.

use std::collections::HashMap;
use std::path::Path;
use valuedrift::data::{ColumnMap, read_trials};
use valuedrift::fit::{FitOptions, fit_subject};
use valuedrift::likelihood::SubjectLikelihood;
use valuedrift::model::load_model;

const TOLERANCE: f64 = 0.05;

/// (file, model, subject) → reference log-likelihood.
fn reference() -> HashMap<(String, String, String), f64> {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/fit_optima.csv");
    let mut reader = csv::Reader::from_path(&path).expect("reference table");
    let header = reader.headers().unwrap().clone();
    let col = |name: &str| header.iter().position(|h| h == name).unwrap();
    let (file, model, subject, ll) = (
        col("file"),
        col("model"),
        col("subject"),
        col("log_likelihood"),
    );
    reader
        .records()
        .map(|r| {
            let r = r.unwrap();
            (
                (
                    r[file].to_string(),
                    r[model].to_string(),
                    r[subject].to_string(),
                ),
                r[ll].parse::<f64>().unwrap(),
            )
        })
        .collect()
}

/// Fits every subject of `file` with `model` (a test model file) and compares with the
/// reference; returns (subjects, converged, worst shortfall).
fn check_file(file: &str, model_name: &str) {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let reference = reference();
    let table = read_trials(&root.join("tests/data").join(file), &ColumnMap::default()).unwrap();
    let model = load_model(
        root.join(format!("tests/models/{model_name}.toml"))
            .to_str()
            .unwrap(),
    )
    .unwrap();
    let options = FitOptions::default();
    let mut failures = Vec::new();
    let mut compared = 0;
    for subject in &table.subjects {
        let key = (
            format!("tests/data/{file}"),
            model_name.to_string(),
            subject.id.clone(),
        );
        let Some(&best) = reference.get(&key) else {
            continue;
        };
        compared += 1;
        let lik = SubjectLikelihood::new(&model, subject, None).unwrap();
        let fit = fit_subject(&lik, &options);
        let shortfall = best - fit.log_likelihood;
        if shortfall > TOLERANCE {
            failures.push(format!(
                "{}: ln L {:.4} vs reference {best:.4} (status: {})",
                subject.id, fit.log_likelihood, fit.status
            ));
        }
    }
    assert!(compared >= 1, "no reference rows for {file} / {model_name}");
    assert!(
        failures.is_empty(),
        "{file} / {model_name}: {} of {compared} fits below the reference optimum:\n{}",
        failures.len(),
        failures.join("\n")
    );
}

#[test]
fn choices_only_bandit_fits_reach_the_reference_optima() {
    check_file("bandit_choices.csv", "bandit-gainloss-choices");
}

#[test]
fn diffusion_bandit_fits_reach_the_reference_optima() {
    check_file("bandit_diffusion.csv", "bandit-delta-diffusion");
}

#[test]
fn a_subject_with_all_response_times_equal_reaches_the_reference_optimum() {
    check_file("all_fast_subject.csv", "fast-gainloss-linear");
}

#[test]
fn real_effort_offer_fits_reach_the_reference_optima() {
    check_file("effort_offers_subset.csv", "offered-linear-reference");
}
