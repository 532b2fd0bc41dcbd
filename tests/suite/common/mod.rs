//! Helpers shared by the test files (each test binary uses a part of them).
#![allow(dead_code)]

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;

/// The model that generated the demo data (source: demo-data/README.md).
pub const MODEL: &str = "gainloss-linear";

/// The release binary under test.
pub fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_valuedrift"))
}

/// Runs `command` and asserts that it succeeded, showing its error output when not.
pub fn succeed(command: &mut Command) -> std::process::Output {
    let output = command.output().unwrap();
    assert!(
        output.status.success(),
        "{}",
        String::from_utf8_lossy(&output.stderr)
    );
    output
}

/// A file of demo-data/.
pub fn demo_file(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("demo-data")
        .join(name)
}

/// Pearson (1896) product-moment correlation.
pub fn pearson(x: &[f64], y: &[f64]) -> f64 {
    let n = x.len() as f64;
    let (mx, my) = (x.iter().sum::<f64>() / n, y.iter().sum::<f64>() / n);
    let sxy: f64 = x.iter().zip(y).map(|(a, b)| (a - mx) * (b - my)).sum();
    let sxx: f64 = x.iter().map(|a| (a - mx).powi(2)).sum();
    let syy: f64 = y.iter().map(|b| (b - my).powi(2)).sum();
    sxy / (sxx * syy).sqrt()
}

/// Generating ranges of the reference model's recovery tests (the documented ranges of the
/// README's recovery section): tests/suite/parameter_recovery.rs and tests/suite/plan.rs.
pub const RECOVERY_RANGES: [(&str, f64, f64); 6] = [
    ("gain_rate", 0.1, 0.7),
    ("loss_rate", 0.1, 0.7),
    ("effort_weight", 0.2, 1.5),
    ("value_scale", 2.0, 8.0),
    ("boundary", 1.0, 2.5),
    ("ndt", 0.2, 0.5),
];

/// Every parameter of `model` (model order): a uniform draw from `ranges` for the parameters it
/// names, the fixed value for the others.
pub fn draw_values(
    model: &valuedrift::model::Model,
    ranges: &[(&str, f64, f64)],
    rng: &mut impl rand::Rng,
) -> Vec<f64> {
    use rand::RngExt;
    model
        .parameters
        .iter()
        .map(|p| match ranges.iter().find(|r| r.0 == p.name) {
            Some(&(_, lo, hi)) => rng.random_range(lo..hi),
            None => p.fixed.expect("parameters without a range are fixed"),
        })
        .collect()
}

/// Every file below `dir` with its bytes, by path relative to `dir`.
pub fn contents(dir: &Path) -> BTreeMap<PathBuf, Vec<u8>> {
    let mut found = BTreeMap::new();
    let mut pending = vec![dir.to_path_buf()];
    while let Some(folder) = pending.pop() {
        for entry in std::fs::read_dir(&folder).unwrap() {
            let path = entry.unwrap().path();
            if path.is_dir() {
                pending.push(path);
            } else {
                let bytes = std::fs::read(&path).unwrap();
                found.insert(path.strip_prefix(dir).unwrap().to_path_buf(), bytes);
            }
        }
    }
    found
}

/// An offered option without a shown reward or potential outcome.
pub fn offer(option: usize, effort: f64) -> valuedrift::data::Offer {
    valuedrift::data::Offer {
        option,
        effort,
        reward: None,
        outcome_if: None,
    }
}

/// Central differences of ln L against the exact gradient at θ (common practice), relative
/// tolerance 1e-5.
pub fn assert_gradient(
    lik: &valuedrift::likelihood::SubjectLikelihood<'_>,
    theta: &[f64],
    what: &str,
) {
    let e = lik.evaluate(theta);
    for j in 0..theta.len() {
        let h = 1e-5;
        let (mut up, mut down) = (theta.to_vec(), theta.to_vec());
        up[j] += h;
        down[j] -= h;
        let numeric =
            (lik.evaluate(&up).ln_likelihood - lik.evaluate(&down).ln_likelihood) / (2.0 * h);
        assert!(
            (numeric - e.gradient[j]).abs() < 1e-5 * numeric.abs().max(1.0),
            "{what}: parameter {j}: exact {} numeric {numeric}",
            e.gradient[j]
        );
    }
}

/// For each free parameter of `fit` not at a bound, the steepest rise of ln L + ln prior a step
/// of 1e-5 to either side of the fitted point (unconstrained scale), per unit: (name, rise).
/// At a maximum no side rises (common practice), kinks and grid steps included.
pub fn rises_beside_fit(
    lik: &valuedrift::likelihood::SubjectLikelihood<'_>,
    fit: &valuedrift::fit::SubjectFit,
) -> Vec<(String, f64)> {
    let model = lik.model();
    let free = model.free_slots();
    let natural: Vec<f64> = free.iter().map(|&s| fit.estimates[s].estimate).collect();
    let theta = lik.unconstrained(&natural);
    let objective = |t: &[f64]| {
        let e = lik.evaluate(t);
        e.ln_likelihood + e.ln_prior
    };
    let at = objective(&theta);
    let h = 1e-5;
    free.iter()
        .enumerate()
        .filter(|&(_, &slot)| !fit.estimates[slot].at_bound)
        .map(|(j, &slot)| {
            let side = |sign: f64| {
                let mut moved = theta.clone();
                moved[j] += sign * h;
                (objective(&moved) - at) / h
            };
            (
                model.parameters[slot].name.clone(),
                side(1.0).max(side(-1.0)),
            )
        })
        .collect()
}
