//! What the console tells a researcher after a fit, and the group column of `--by` carried from
//! `fit --hierarchical` to `contrast`. Runs the release binary on a subset of the demo data
//! (the orchard study, our own simulator; its group column renamed `site`).

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_valuedrift"))
}

/// Four participants of each cohort, their first 120 trials, with the group column named `site`.
fn subset(dir: &Path) -> PathBuf {
    let text = std::fs::read_to_string(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data/orchard_trials.csv"),
    )
    .unwrap();
    let mut lines = text.lines();
    let header = lines.next().unwrap().replacen(",group,", ",site,", 1);
    let keep = [
        "sub-01", "sub-02", "sub-03", "sub-04", "sub-21", "sub-22", "sub-23", "sub-24",
    ];
    let rows: Vec<&str> = lines
        .filter(|l| {
            let mut f = l.split(',');
            let subject = f.next().unwrap();
            let trial: i64 = f.nth(2).unwrap().parse().unwrap();
            keep.contains(&subject) && trial <= 120
        })
        .collect();
    let path = dir.join("orchard_site.csv");
    std::fs::write(&path, format!("{header}\n{}\n", rows.join("\n"))).unwrap();
    path
}

fn run(args: &[&str]) -> Output {
    bin().args(args).output().expect("the binary runs")
}

fn text(bytes: &[u8]) -> String {
    String::from_utf8_lossy(bytes).into_owned()
}

/// `fit --hierarchical --by <by>` of gainloss-linear on `data` into `out` (2 starts).
fn fit_by(data: &Path, out: &Path, by: &str) -> Output {
    run(&[
        "fit",
        "--data",
        data.to_str().unwrap(),
        "--model",
        "gainloss-linear",
        "--out",
        out.to_str().unwrap(),
        "--hierarchical",
        "--by",
        by,
        "--starts",
        "2",
    ])
}

#[test]
fn by_a_missing_column_is_an_error_naming_it() {
    let dir = tempfile::tempdir().unwrap();
    let data = subset(dir.path());
    let out = dir.path().join("fit");
    let output = fit_by(&data, &out, "clinic");
    let stderr = text(&output.stderr);
    assert!(!output.status.success(), "accepted a missing --by column");
    assert!(
        stderr.contains("--by clinic") && stderr.contains("no such column"),
        "{stderr}"
    );
    assert!(!out.exists(), "output left behind");
}

#[test]
fn fit_by_a_column_then_contrast_by_it_with_the_console_diagnostics_and_warnings() {
    let dir = tempfile::tempdir().unwrap();
    let data = subset(dir.path());
    let out = dir.path().join("fit");
    let output = fit_by(&data, &out, "site");
    let stdout = text(&output.stdout);
    let stderr = text(&output.stderr);
    assert!(output.status.success(), "{stderr}");
    // The required console statements after a fit.
    for line in [
        "estimates at a bound:",
        "Hessian not positive definite (no standard errors):",
        "not converged:",
        "fit_summary.csv",
    ] {
        assert!(stdout.contains(line), "missing '{line}' in:\n{stdout}");
    }
    // Six free parameters give a diagonal group prior 12 parameters, more than the 4 subjects
    // of each site (Huys et al. 2011 count 2k group parameters for a diagonal prior).
    assert!(
        stderr.contains("has 12 parameters but only 4 subjects"),
        "{stderr}"
    );
    let contrast = run(&[
        "contrast",
        "--fits",
        out.to_str().unwrap(),
        "--model",
        "gainloss-linear",
        "--by",
        "site",
        "--estimates",
        "empirical-bayes",
        "--out",
        dir.path().join("contrast").to_str().unwrap(),
    ]);
    let stderr = text(&contrast.stderr);
    assert!(contrast.status.success(), "{stderr}");
    assert!(
        stderr.contains("shrunk towards one prior per group"),
        "{stderr}"
    );
    assert!(dir.path().join("contrast/contrast.csv").exists());
}
