//! `export` and `check` refuse inputs that do not belong together: estimates outside the model's
//! bounds (an error at the file, line and column, with the value and the bounds) and a model
//! whose definition differs from the one recorded in the fit folder's run.json. Each refusal
//! exits with status 1 (src/main.rs) and writes nothing.
//!
//! Line numbers follow the readers' convention: the header is line 1 (src/files.rs, `InputError`).

use std::path::{Path, PathBuf};
use std::process::Output;

use crate::common::{MODEL, bin, demo_file};
use valuedrift::model::load_model;

/// The demo trials of the first two participants (sub-01, sub-02; demo-data/README.md).
fn two_subjects(dir: &Path) -> PathBuf {
    let text = std::fs::read_to_string(demo_file("orchard_trials.csv")).unwrap();
    let kept: Vec<&str> = text
        .lines()
        .enumerate()
        .filter(|(i, l)| *i == 0 || l.starts_with("sub-01,") || l.starts_with("sub-02,"))
        .map(|(_, l)| l)
        .collect();
    // 2 × 240 trials and the header (demo-data/README.md).
    assert_eq!(kept.len(), 481);
    let path = dir.join("trials.csv");
    std::fs::write(&path, kept.join("\n") + "\n").unwrap();
    path
}

/// Runs `export` (or `check`, with 10 replicates, the fewest it accepts) of `model`.
fn run(command: &str, fits: &Path, data: &Path, model: &str, out: &Path) -> Output {
    let mut c = bin();
    c.args([command, "--model", model])
        .arg("--fits")
        .arg(fits)
        .arg("--data")
        .arg(data)
        .arg("--out")
        .arg(out);
    if command == "check" {
        c.args(["--sims", "10"]);
    }
    c.output().unwrap()
}

/// Status 1, every needle in standard error, and no output folder nor any staging folder beside it.
fn refused(output: &Output, out: &Path, needles: &[&str]) {
    let stderr = String::from_utf8_lossy(&output.stderr);
    assert_eq!(output.status.code(), Some(1), "{stderr}");
    for needle in needles {
        assert!(stderr.contains(needle), "missing {needle:?} in:\n{stderr}");
    }
    assert!(!out.exists(), "{} was written", out.display());
    let name = out.file_name().unwrap().to_string_lossy();
    let stray: Vec<String> = std::fs::read_dir(out.parent().unwrap())
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n.starts_with(&format!(".{name}.")))
        .collect();
    assert!(stray.is_empty(), "left behind: {stray:?}");
}

#[test]
fn estimates_outside_the_bounds_are_refused_with_their_position() {
    let dir = tempfile::tempdir().unwrap();
    let data = two_subjects(dir.path());
    let model = load_model(MODEL).unwrap();
    // The bounds come from the model file (models/gainloss-linear.toml).
    let spec = model
        .parameters
        .iter()
        .find(|p| p.name == "effort_weight")
        .unwrap();
    let beyond = spec.upper + 5.0;
    // parameters.csv in the layout of `valuedrift fit`, at the demo's generating values
    // (demo-data/generating_values.csv), with sub-02's effort weight beyond the upper bound.
    let values = std::fs::read_to_string(demo_file("generating_values.csv")).unwrap();
    let mut lines = values.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    let mut text = String::from("subject,group,model,parameter,estimate\n");
    let mut bad_line = 0;
    for line in lines.take(2) {
        let cells: Vec<&str> = line.split(',').collect();
        for (name, value) in header.iter().zip(&cells).skip(2) {
            let value = if cells[0] == "sub-02" && *name == "effort_weight" {
                bad_line = text.lines().count() + 1;
                beyond.to_string()
            } else {
                value.to_string()
            };
            text.push_str(&format!(
                "{},{},{MODEL},{name},{value}\n",
                cells[0], cells[1]
            ));
        }
    }
    let fits = dir.path().join("fits");
    std::fs::create_dir_all(&fits).unwrap();
    let parameters = fits.join("parameters.csv");
    std::fs::write(&parameters, &text).unwrap();
    let position = format!("{} line {bad_line}, column estimate", parameters.display());
    let bounds = format!("[{}, {}]", spec.lower, spec.upper);
    for command in ["export", "check"] {
        let out = dir.path().join(command);
        let output = run(command, &fits, &data, MODEL, &out);
        refused(
            &output,
            &out,
            &[&position, &beyond.to_string(), &bounds, "effort_weight"],
        );
    }
}

/// The model file with the upper bound of `effort_weight` changed, and the 1-based line changed.
fn with_changed_upper(text: &str) -> (String, usize) {
    let lines: Vec<&str> = text.lines().collect();
    let section = lines
        .iter()
        .position(|l| l.trim() == "[parameters.effort_weight]")
        .expect("the model file declares effort_weight");
    let upper = (section..lines.len())
        .find(|&i| lines[i].trim_start().starts_with("upper"))
        .expect("effort_weight has an upper bound");
    let mut changed: Vec<String> = lines.iter().map(|l| l.to_string()).collect();
    changed[upper] = "upper = 99.0".to_string();
    (changed.join("\n") + "\n", upper + 1)
}

#[test]
fn a_model_file_changed_since_the_fit_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let data = two_subjects(dir.path());
    let model_file = dir.path().join("model.toml");
    let original = load_model(MODEL).unwrap().text;
    std::fs::write(&model_file, &original).unwrap();
    let model_arg = model_file.to_str().unwrap();
    let fits = dir.path().join("fits");
    let fitted = bin()
        .args([
            "fit",
            "--model",
            model_arg,
            "--starts",
            "1",
            "--threads",
            "1",
        ])
        .arg("--data")
        .arg(&data)
        .arg("--out")
        .arg(&fits)
        .output()
        .unwrap();
    assert!(
        fitted.status.success(),
        "{}",
        String::from_utf8_lossy(&fitted.stderr)
    );
    // Control: the unchanged file passes (its definition is the one recorded in run.json).
    let control = dir.path().join("control");
    let output = run("export", &fits, &data, model_arg, &control);
    assert!(
        output.status.success(),
        "{}",
        String::from_utf8_lossy(&output.stderr)
    );

    let (changed, line) = with_changed_upper(&original);
    std::fs::write(&model_file, changed).unwrap();
    let record = fits.join("run.json").display().to_string();
    let position = format!("{model_arg} line {line}");
    for command in ["export", "check"] {
        let out = dir.path().join(command);
        let output = run(command, &fits, &data, model_arg, &out);
        refused(
            &output,
            &out,
            &[
                &position,
                &format!("model {MODEL} has changed since the fit"),
                &record,
                "upper = 99.0",
            ],
        );
    }
}

#[test]
fn subjects_the_fit_left_out_are_left_out_of_check_and_export_with_a_note() {
    // sub-02 keeps 40 of its 240 trials: with 10 responses per free parameter (6 free, so 60
    // responses) the fit leaves it out and records why (run.json `not_fitted`); `check` and
    // `export` then work on sub-01 and say that one subject was left out (common practice: a
    // run downstream of a fit covers what the fit covered, and says so).
    let dir = tempfile::tempdir().unwrap();
    let full = two_subjects(dir.path());
    let text = std::fs::read_to_string(&full).unwrap();
    let mut kept_02 = 0;
    let lines: Vec<&str> = text
        .lines()
        .filter(|l| {
            if l.starts_with("sub-02,") {
                kept_02 += 1;
                kept_02 <= 40
            } else {
                true
            }
        })
        .collect();
    let data = dir.path().join("short.csv");
    std::fs::write(&data, lines.join("\n") + "\n").unwrap();
    let fits = fit_quickly(&data, dir.path());
    let record: serde_json::Value =
        serde_json::from_slice(&std::fs::read(fits.join("run.json")).unwrap()).unwrap();
    assert_eq!(record["not_fitted"][0]["subject"], "sub-02");
    for command in ["check", "export"] {
        let out = dir.path().join(command);
        let output = run(command, &fits, &data, MODEL, &out);
        let stderr = String::from_utf8_lossy(&output.stderr);
        assert!(output.status.success(), "{command}: {stderr}");
        assert!(
            stderr.contains("1 of 2 subjects were not fitted with model"),
            "{command}: {stderr}"
        );
        assert!(out.exists());
    }
}

#[test]
fn check_by_a_column_the_table_lacks_is_refused_naming_it() {
    // common practice: an option naming a column the file does not have is an error naming the
    // file and the column, and nothing is written.
    let dir = tempfile::tempdir().unwrap();
    let data = two_subjects(dir.path());
    let fits = fit_quickly(&data, dir.path());
    let out = dir.path().join("check");
    let output = bin()
        .args([
            "check", "--model", MODEL, "--sims", "10", "--by", "clinic", "--fits",
        ])
        .arg(&fits)
        .arg("--data")
        .arg(&data)
        .arg("--out")
        .arg(&out)
        .output()
        .unwrap();
    refused(
        &output,
        &out,
        &["--by clinic", "trials.csv", "no column `clinic`"],
    );
}

/// Fits the demo model to `data` with 2 starts into `dir`/fits, which it returns.
fn fit_quickly(data: &Path, dir: &Path) -> PathBuf {
    let fits = dir.join("fits");
    let status = bin()
        .args(["fit", "--model", MODEL, "--starts", "2", "--data"])
        .arg(data)
        .arg("--out")
        .arg(&fits)
        .output()
        .unwrap();
    assert!(
        status.status.success(),
        "{}",
        String::from_utf8_lossy(&status.stderr)
    );
    fits
}
