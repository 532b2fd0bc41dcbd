//! End-to-end tests of the `valuedrift` binary on malformed input.
//!
//! Every failing case checks three things: the command exits with failure (status 1, the
//! binary's `ExitCode::FAILURE`, not a panic or a usage error), standard error names the file and,
//! where the problem has a position, its line and column (or, for model files, the dotted key),
//! and no output file was left behind: no file of any kind, `.tmp` leftovers included, appears in
//! the test's temporary folder.
//!
//! Line numbers follow the documented convention of the readers: the header is line 1, the first
//! data row line 2 (source: `src/files.rs`, `InputError`). Every expected line below is counted in
//! the hand-written file of the same test.

use std::collections::BTreeSet;

use crate::common::contents;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

/// The built-in model every data case is fitted with.
const MODEL: &str = "gainloss-linear";

/// A small valid trial table: header on line 1, rows on lines 2–4.
const GOOD_ROWS: [&str; 4] = [
    "subject,trial,effort_a,effort_b,choice,rt",
    "s1,1,0,1,a,0.8",
    "s1,2,1,0,b,1.1",
    "s2,1,0.5,0,a,0.7",
];

/// The built-in model file, copied and broken by the model-file cases.
const MODEL_FILE: &str = include_str!("../../models/gainloss-linear.toml");

/// Header of a valid `density` input (source: `src/cli/mod.rs`, the `density` help).
const DENSITY_HEADER: &str = "rt,bound,drift,boundary,start,ndt";

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_valuedrift"))
}

fn write(dir: &Path, name: &str, content: &str) -> PathBuf {
    let path = dir.join(name);
    std::fs::write(&path, content).unwrap();
    path
}

/// The good table with line `line` (1-based, header = 1) replaced by `replacement`.
fn good_with_line(line: usize, replacement: &str) -> String {
    let mut rows: Vec<&str> = GOOD_ROWS.to_vec();
    rows[line - 1] = replacement;
    rows.join("\n") + "\n"
}

fn good_csv() -> String {
    GOOD_ROWS.join("\n") + "\n"
}

/// `text` with the first `from` replaced by `to`; panics when `from` does not occur, so that a
/// change in the model file cannot silently turn a broken-file case into a valid one.
fn replace_once(text: &str, from: &str, to: &str) -> String {
    assert!(
        text.contains(from),
        "model file no longer contains {from:?}"
    );
    text.replacen(from, to, 1)
}

/// Every file (not folder) below `dir`, as paths relative to it.
fn files_below(dir: &Path) -> BTreeSet<PathBuf> {
    contents(dir).into_keys().collect()
}

fn run(args: &[&str]) -> Output {
    bin().args(args).output().expect("the binary runs")
}

/// Runs `args` in `dir`'s test and checks the three requirements of a failing case. `outputs` are
/// the output paths of the command (a `--out` folder or an output file); `needles` must all occur
/// in standard error.
fn expect_failure(case: &str, dir: &Path, args: &[&str], outputs: &[&Path], needles: &[&str]) {
    let before = files_below(dir);
    let output = run(args);
    let stderr = String::from_utf8_lossy(&output.stderr);
    // 1. Failure, reported through the binary's own error path (source: src/main.rs returns
    // ExitCode::FAILURE, which is 1; a panic would give 101 and a usage error 2).
    assert_eq!(
        output.status.code(),
        Some(1),
        "[{case}] expected exit status 1; stderr:\n{stderr}"
    );
    assert!(
        stderr.starts_with("error: "),
        "[{case}] stderr should start with `error: ` (source: src/main.rs); got:\n{stderr}"
    );
    // 2. The message names the file and position.
    for needle in needles {
        assert!(
            stderr.contains(needle),
            "[{case}] stderr should contain {needle:?}; got:\n{stderr}"
        );
    }
    // 3. Nothing written: the output folder holds no files, an output file does not exist, and
    // no new file (temporary or not) appeared anywhere in the test folder.
    for out in outputs {
        if out.is_dir() {
            let inside = files_below(out);
            assert!(
                inside.is_empty(),
                "[{case}] {} should hold no files, holds {inside:?}",
                out.display()
            );
        } else {
            assert!(
                !out.exists(),
                "[{case}] {} should not exist after a failed run",
                out.display()
            );
        }
    }
    let after = files_below(dir);
    let new: Vec<&PathBuf> = after.difference(&before).collect();
    assert!(
        new.is_empty(),
        "[{case}] the failed run left files behind: {new:?}"
    );
}

/// Runs `fit` on `data` (written into a fresh folder under `name`) with the built-in model and
/// checks the failure; `needles` may use `{file}` for the data path.
fn fit_fails(case: &str, name: &str, data: &str, needles: &[&str]) {
    let dir = tempfile::tempdir().unwrap();
    let path = write(dir.path(), name, data);
    fit_path_fails(case, dir.path(), &path, MODEL, &[], needles);
}

fn fit_path_fails(
    case: &str,
    dir: &Path,
    data: &Path,
    model: &str,
    extra: &[&str],
    needles: &[&str],
) {
    let out = dir.join("out");
    let data_arg = data.to_str().unwrap();
    let mut args = vec![
        "fit",
        "--data",
        data_arg,
        "--model",
        model,
        "--out",
        out.to_str().unwrap(),
    ];
    if !extra.contains(&"--starts") {
        args.extend_from_slice(&["--starts", "1"]);
    }
    args.extend_from_slice(extra);
    let needles: Vec<String> = needles
        .iter()
        .map(|n| n.replace("{file}", data_arg))
        .collect();
    let needles: Vec<&str> = needles.iter().map(String::as_str).collect();
    expect_failure(case, dir, &args, &[&out], &needles);
}

/// Runs `fit` on the good data with the model file `model_text` and checks the failure; `needles`
/// may use `{model}` for the model file's path.
fn model_fails(case: &str, model_text: &str, needles: &[&str]) {
    let dir = tempfile::tempdir().unwrap();
    let data = write(dir.path(), "trials.csv", &good_csv());
    let model = write(dir.path(), "broken.toml", model_text);
    let model_arg = model.to_str().unwrap();
    let needles: Vec<String> = needles
        .iter()
        .map(|n| n.replace("{model}", model_arg))
        .collect();
    let needles: Vec<&str> = needles.iter().map(String::as_str).collect();
    fit_path_fails(case, dir.path(), &data, model_arg, &[], &needles);
}

// ---------------------------------------------------------------------------------------------
// Trial tables given to `fit`

#[test]
fn missing_required_column() {
    // The header (line 1) lacks `rt`, a required column (source: src/data/mod.rs, column
    // table); a missing column is reported at the header line.
    let data = "subject,trial,effort_a,effort_b,choice\ns1,1,0,1,a\ns1,2,1,0,b\n";
    fit_fails(
        "missing column rt",
        "trials.csv",
        data,
        &["{file}", "line 1", "column rt", "missing required column"],
    );
}

#[test]
fn text_in_a_number_column() {
    // effort_a must be a number ≥ 0 (source: src/data/mod.rs); "heavy" is on line 3.
    let data = good_with_line(3, "s1,2,heavy,0,b,1.1");
    fit_fails(
        "effort_a = heavy",
        "trials.csv",
        &data,
        &["{file}", "line 3", "column effort_a", "heavy"],
    );
}

#[test]
fn negative_rt() {
    // rt must be seconds > 0 or empty (source: src/data/mod.rs); -0.4 is on line 3.
    let data = good_with_line(3, "s1,2,1,0,b,-0.4");
    fit_fails(
        "rt = -0.4",
        "trials.csv",
        &data,
        &["{file}", "line 3", "column rt"],
    );
}

#[test]
fn zero_rt() {
    // rt must be > 0 (source: src/data/mod.rs); 0 is on line 2.
    let data = good_with_line(2, "s1,1,0,1,a,0");
    fit_fails(
        "rt = 0",
        "trials.csv",
        &data,
        &["{file}", "line 2", "column rt"],
    );
}

#[test]
fn unknown_choice() {
    // choice must be a, b or empty (source: src/data/mod.rs); "c" is on line 4.
    let data = good_with_line(4, "s2,1,0.5,0,c,0.7");
    fit_fails(
        "choice = c",
        "trials.csv",
        &data,
        &["{file}", "line 4", "column choice"],
    );
}

#[test]
fn choice_without_rt() {
    // rt is given exactly when choice is (source: src/data/mod.rs, `Trial::rt`); line 3 has a
    // choice and an empty rt, which the reader blames on the rt column.
    let data = good_with_line(3, "s1,2,1,0,b,");
    fit_fails(
        "choice without rt",
        "trials.csv",
        &data,
        &["{file}", "line 3", "column rt"],
    );
}

#[test]
fn trials_not_increasing_within_a_subject() {
    // Trial numbers increase within a subject (source: src/data/mod.rs); line 3 goes back from
    // trial 5 to trial 2.
    let data = good_with_line(2, "s1,5,0,1,a,0.8");
    fit_fails(
        "trial 2 after trial 5",
        "trials.csv",
        &data,
        &["{file}", "line 3", "column trial"],
    );
}

#[test]
fn subject_reappearing_later() {
    // The table is sorted by subject (source: src/data/mod.rs, module documentation); s1
    // reappears on line 5 after s2.
    let data = good_csv() + "s1,3,0,1,a,0.9\n";
    fit_fails(
        "s1 after s2",
        "trials.csv",
        &data,
        &["{file}", "line 5", "column subject"],
    );
}

#[test]
fn empty_file() {
    // An empty file has no position; the message names the file (source: src/files.rs).
    fit_fails("empty file", "trials.csv", "", &["{file}", "empty"]);
}

#[test]
fn header_only() {
    // A header without trials (source: src/data/mod.rs: one row per trial).
    let data = format!("{}\n", GOOD_ROWS[0]);
    fit_fails("header only", "trials.csv", &data, &["{file}", "no trials"]);
}

#[test]
fn negative_effort() {
    // effort_b must be ≥ 0 (source: src/data/mod.rs); -1 is on line 4.
    let data = good_with_line(4, "s2,1,0.5,-1,a,0.7");
    fit_fails(
        "effort_b = -1",
        "trials.csv",
        &data,
        &["{file}", "line 4", "column effort_b"],
    );
}

#[test]
fn unsupported_extension() {
    // Trial tables are .csv, .tsv or .parquet (source: src/cli/mod.rs, `fit --data` help); the
    // content is valid CSV, so only the extension can be refused.
    fit_fails(
        "extension .xlsx",
        "trials.xlsx",
        &good_csv(),
        &["{file}", ".xlsx"],
    );
}

#[test]
fn data_file_that_does_not_exist() {
    // Nothing to read (common practice: a missing input is named in the error).
    let dir = tempfile::tempdir().unwrap();
    let missing = dir.path().join("no-such-trials.csv");
    fit_path_fails(
        "missing data file",
        dir.path(),
        &missing,
        MODEL,
        &[],
        &["{file}", "cannot be read"],
    );
}

#[test]
fn columns_naming_an_unknown_canonical_column() {
    // `--columns` takes canonical=file pairs (source: src/cli/mod.rs); `participant` is not a
    // canonical column (source: src/data/mod.rs, column table). The flag has no file, so the
    // message names the flag and the offending name.
    let dir = tempfile::tempdir().unwrap();
    let data = write(dir.path(), "trials.csv", &good_csv());
    fit_path_fails(
        "--columns participant=subject",
        dir.path(),
        &data,
        MODEL,
        &["--columns", "participant=subject"],
        &["--columns", "participant"],
    );
}

// ---------------------------------------------------------------------------------------------
// Model files given to `fit`

#[test]
fn model_file_unknown_top_level_key() {
    // Top-level keys are name, description, learning, cost, drift, choice, parameters (source:
    // src/model/spec.rs, module documentation); `colour` is not one of them.
    let text = format!("colour = \"blue\"\n{MODEL_FILE}");
    model_fails("unknown key colour", &text, &["{model}: colour:"]);
}

#[test]
fn model_file_upper_below_lower() {
    // A parameter's upper bound must exceed its lower bound (common practice); gain_rate is the
    // first parameter declared with upper = 1.0 (source: models/gainloss-linear.toml).
    let text = replace_once(
        MODEL_FILE,
        "[parameters.gain_rate]\nlower = 0.0\nupper = 1.0",
        "[parameters.gain_rate]\nlower = 0.0\nupper = -0.5",
    );
    model_fails(
        "gain_rate upper < lower",
        &text,
        &["{model}: parameters.gain_rate.upper:"],
    );
}

#[test]
fn model_file_unknown_cost_shape() {
    // Cost shapes are none, linear, quadratic, hyperbolic, exponential (source:
    // src/model/spec.rs, module documentation); "cubic" is not one of them.
    let text = replace_once(MODEL_FILE, "shape = \"linear\"", "shape = \"cubic\"");
    model_fails(
        "cost shape cubic",
        &text,
        &["{model}: cost.shape:", "cubic"],
    );
}

#[test]
fn model_file_missing_required_parameter() {
    // The diffusion stage needs ndt and gives it no default (source:
    // src/model/components/choice_diffusion.rs); the ndt table is removed.
    let start = MODEL_FILE
        .find("[parameters.ndt]")
        .expect("the model file declares ndt");
    let text = &MODEL_FILE[..start];
    model_fails(
        "ndt not declared",
        text,
        &["{model}: parameters.ndt:", "missing"],
    );
}

#[test]
fn model_file_invalid_toml() {
    // An unclosed table header is not TOML (source: the TOML 1.0 specification, tables); the
    // broken header is on the line counted below in the file itself.
    let text = replace_once(MODEL_FILE, "[cost]\n", "[cost\n");
    let line = 1 + text[..text.find("[cost\n").unwrap()].matches('\n').count();
    let at_line = format!("line {line}");
    model_fails(
        "unclosed [cost",
        &text,
        &["{model}: (file):", "not valid TOML", &at_line],
    );
}

// ---------------------------------------------------------------------------------------------
// `density`

/// Runs `density` on `content` with `--output` and checks the failure.
fn density_fails(case: &str, content: &str, needles: &[&str]) {
    let dir = tempfile::tempdir().unwrap();
    let input = write(dir.path(), "rows.csv", content);
    let output = dir.path().join("densities.csv");
    let input_arg = input.to_str().unwrap();
    let mut all = vec![input_arg];
    all.extend_from_slice(needles);
    expect_failure(
        case,
        dir.path(),
        &[
            "density",
            "--input",
            input_arg,
            "--output",
            output.to_str().unwrap(),
        ],
        &[&output],
        &all,
    );
}

#[test]
fn density_bad_bound() {
    // bound is upper or lower (source: src/cli/mod.rs, `density` help); "middle" is on line 3.
    let content = format!("{DENSITY_HEADER}\n0.8,upper,1,1.5,0.5,0.3\n0.9,middle,1,1.5,0.5,0.3\n");
    density_fails(
        "bound = middle",
        &content,
        &["line 3", "column bound", "middle"],
    );
}

#[test]
fn density_start_outside_unit_interval() {
    // start is a fraction 0..1 of the boundary from the lower bound (source: src/cli/mod.rs,
    // `density` help); 1.5 is on line 3.
    let content = format!("{DENSITY_HEADER}\n0.8,upper,1,1.5,0.5,0.3\n0.9,lower,1,1.5,1.5,0.3\n");
    density_fails("start = 1.5", &content, &["line 3", "column start"]);
}

#[test]
fn density_control_writes_output() {
    // Positive control for the two density cases: the same rows with valid values produce the
    // output file, with log_density and cdf appended (source: src/cli/mod.rs, `density` help).
    let dir = tempfile::tempdir().unwrap();
    let content = format!("{DENSITY_HEADER}\n0.8,upper,1,1.5,0.5,0.3\n0.9,lower,1,1.5,0.5,0.3\n");
    let input = write(dir.path(), "rows.csv", &content);
    let output = dir.path().join("densities.csv");
    let result = run(&[
        "density",
        "--input",
        input.to_str().unwrap(),
        "--output",
        output.to_str().unwrap(),
    ]);
    assert!(
        result.status.success(),
        "density failed: {}",
        String::from_utf8_lossy(&result.stderr)
    );
    let written = std::fs::read_to_string(&output).unwrap();
    let header = written.lines().next().unwrap_or("");
    assert_eq!(header, format!("{DENSITY_HEADER},log_density,cdf"));
    assert_eq!(
        written.lines().count(),
        3,
        "header and two rows:\n{written}"
    );
    let files = files_below(dir.path());
    let expected: BTreeSet<PathBuf> = ["rows.csv", "densities.csv"].map(PathBuf::from).into();
    assert_eq!(files, expected, "no leftovers beside the output");
}

// ---------------------------------------------------------------------------------------------
// `simulate`, and the positive control of `fit`

/// Natural-scale values for the six free parameters of gainloss-linear, inside the declared
/// bounds of models/gainloss-linear.toml (any valid values serve these error cases).
const PARAMS_HEADER: &str = "subject,gain_rate,loss_rate,effort_weight,value_scale,boundary,ndt";
const PARAMS_ROWS: [&str; 2] = [
    "s1,0.40,0.35,0.6,5.0,1.6,0.38",
    "s2,0.30,0.45,0.4,4.5,1.8,0.40",
];

/// Trials per subject of the design: at least ten responses per free parameter of the six of
/// gainloss-linear, the data screen's rule (source: src/data/screen.rs, TRIALS_PER_PARAMETER).
const DESIGN_TRIALS: u32 = 70;

/// A design of 2 subjects × DESIGN_TRIALS trials: efforts 0–1 and fixed would-be outcomes (option a pays
/// on 7 of every 10 trials, option b on 3), with choice, rt and outcome left empty (source:
/// src/cli/mod.rs, `simulate` help).
fn design_csv() -> String {
    let mut text =
        String::from("subject,trial,effort_a,effort_b,choice,rt,outcome_if_a,outcome_if_b\n");
    for subject in ["s1", "s2"] {
        for trial in 1..=DESIGN_TRIALS {
            let effort_a = f64::from(trial % 5) * 0.25;
            let effort_b = f64::from((trial * 3) % 5) * 0.25;
            let pays_a = u8::from(trial % 10 < 7);
            let pays_b = u8::from((trial * 7) % 10 < 3);
            text.push_str(&format!(
                "{subject},{trial},{effort_a},{effort_b},,,{pays_a},{pays_b}\n"
            ));
        }
    }
    text
}

#[test]
fn simulate_parameter_file_missing_a_free_parameter() {
    // gainloss-linear has ndt as a free parameter (source: models/gainloss-linear.toml); the
    // parameter file below lacks that column.
    let dir = tempfile::tempdir().unwrap();
    let design = write(dir.path(), "design.csv", &design_csv());
    let header = PARAMS_HEADER.strip_suffix(",ndt").unwrap();
    let rows: Vec<&str> = PARAMS_ROWS
        .iter()
        .map(|r| &r[..r.rfind(',').unwrap()])
        .collect();
    let params = write(
        dir.path(),
        "params.csv",
        &format!("{header}\n{}\n", rows.join("\n")),
    );
    let out = dir.path().join("simulated.csv");
    let params_arg = params.to_str().unwrap();
    expect_failure(
        "parameter file without ndt",
        dir.path(),
        &[
            "simulate",
            "--model",
            MODEL,
            "--params",
            params_arg,
            "--design",
            design.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
        ],
        &[&out],
        &[params_arg, "line 1", "column ndt"],
    );
}

#[test]
fn fit_control_writes_every_output() {
    // Positive control: simulate 2 subjects × 30 trials, then fit them; fit writes
    // parameters.csv, fit_summary.csv, their Parquet twins and run.json (source: src/cli/mod.rs,
    // `fit` help), and no temporary file remains.
    let dir = tempfile::tempdir().unwrap();
    let design = write(dir.path(), "design.csv", &design_csv());
    let params = write(
        dir.path(),
        "params.csv",
        &format!("{PARAMS_HEADER}\n{}\n", PARAMS_ROWS.join("\n")),
    );
    let trials = dir.path().join("trials.csv");
    let simulated = run(&[
        "simulate",
        "--model",
        MODEL,
        "--params",
        params.to_str().unwrap(),
        "--design",
        design.to_str().unwrap(),
        "--out",
        trials.to_str().unwrap(),
    ]);
    assert!(
        simulated.status.success(),
        "simulate failed: {}",
        String::from_utf8_lossy(&simulated.stderr)
    );
    let text = std::fs::read_to_string(&trials).unwrap();
    // Header plus 140 trials (source: design_csv above).
    assert_eq!(text.lines().count(), 141, "simulated table:\n{text}");
    let with_rt = text
        .lines()
        .skip(1)
        .filter(|l| l.split(',').nth(11).is_some_and(|rt| !rt.is_empty()))
        .count();
    // Without a deadline every simulated trial has a response (source: src/simulate.rs).
    assert_eq!(with_rt, 140, "simulated trials with an rt");

    let out = dir.path().join("out");
    let fitted = run(&[
        "fit",
        "--data",
        trials.to_str().unwrap(),
        "--model",
        MODEL,
        "--out",
        out.to_str().unwrap(),
        "--starts",
        "1",
        "--threads",
        "1",
    ]);
    assert!(
        fitted.status.success(),
        "fit failed: {}",
        String::from_utf8_lossy(&fitted.stderr)
    );
    let expected: BTreeSet<PathBuf> = [
        "parameters.csv",
        "estimates_wide.csv",
        "fit_summary.csv",
        "parameters.parquet",
        "estimates_wide.parquet",
        "fit_summary.parquet",
        "data_screen.csv",
        "data_screen.parquet",
        "run.json",
    ]
    .map(PathBuf::from)
    .into();
    assert_eq!(files_below(&out), expected, "files in the output folder");
    let tmp: Vec<PathBuf> = files_below(dir.path())
        .into_iter()
        .filter(|p| p.to_string_lossy().ends_with(".tmp"))
        .collect();
    assert!(tmp.is_empty(), "temporary files left: {tmp:?}");
    // Both subjects appear in the parameter table, whose first column is the subject (source:
    // the design above; src/results/mod.rs, `parameters_table`).
    let parameters = std::fs::read_to_string(out.join("parameters.csv")).unwrap();
    for subject in ["s1", "s2"] {
        assert!(
            parameters
                .lines()
                .any(|l| l.starts_with(&format!("{subject},"))),
            "{subject} missing from parameters.csv:\n{parameters}"
        );
    }
}

// ---------------------------------------------------------------------------------------------
// Options that would otherwise be accepted as nonsense, the reader's options and the data screen

/// Runs `fit` on the good table with `extra` options and checks the failure; `needles` may use
/// `{file}` for the data path.
fn fit_option_fails(case: &str, extra: &[&str], needles: &[&str]) {
    fit_table_option_fails(case, &good_csv(), extra, needles);
}

/// Runs `fit` on `data` with `extra` options and checks the failure.
fn fit_table_option_fails(case: &str, data: &str, extra: &[&str], needles: &[&str]) {
    let dir = tempfile::tempdir().unwrap();
    let path = write(dir.path(), "trials.csv", data);
    fit_path_fails(case, dir.path(), &path, MODEL, extra, needles);
}

#[test]
fn fit_options_out_of_range() {
    // Each value below is outside what the option's help allows (source: src/cli/mod.rs and
    // src/cli/input.rs); the message names the option, the value and what was expected.
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    let many = (1000 * cores).to_string();
    let cores_text = format!("{cores} cores");
    let cases: Vec<(&str, Vec<&str>, Vec<&str>)> = vec![
        (
            "starts 0",
            vec!["--starts", "0"],
            vec!["--starts 0", "at least 1"],
        ),
        (
            "threads far above the cores",
            vec!["--threads", &many],
            vec!["--threads", &cores_text],
        ),
        (
            "deadline 0",
            vec!["--deadline", "0"],
            vec!["--deadline 0", "> 0"],
        ),
        (
            "deadline negative",
            vec!["--deadline=-2"],
            vec!["--deadline -2", "> 0"],
        ),
        ("lock negative", vec!["--lock=-1"], vec!["--lock -1", "≥ 0"]),
        (
            "lock after the deadline",
            vec!["--lock", "3", "--deadline", "2"],
            vec!["--lock 3", "before the deadline (2 s)"],
        ),
        (
            "lock after most responses",
            vec!["--lock", "50"],
            vec!["--lock 50", "faster than it", "Are the times in seconds?"],
        ),
        (
            "deadline NaN",
            vec!["--deadline", "NaN"],
            vec!["--deadline NaN", "> 0"],
        ),
        (
            "em iterations 0",
            vec!["--hierarchical", "--em-iterations", "0"],
            vec!["--em-iterations 0", "at least 1"],
        ),
        (
            "ibic samples 1",
            vec!["--hierarchical", "--ibic-samples", "1"],
            vec!["--ibic-samples 1", "at least 2"],
        ),
        (
            "em tolerance 0",
            vec!["--hierarchical", "--em-tolerance", "0"],
            vec!["--em-tolerance 0", "> 0"],
        ),
        (
            "fast floor 0",
            vec!["--fast-floor", "0"],
            vec!["--fast-floor 0", "> 0"],
        ),
        (
            "responses per parameter 0",
            vec!["--responses-per-parameter", "0"],
            vec!["--responses-per-parameter 0", "at least 1"],
        ),
        (
            "trim below negative",
            vec!["--trim-below=-0.1"],
            vec!["--trim-below -0.1", "> 0"],
        ),
        (
            "trim above infinite",
            vec!["--trim-above", "inf"],
            vec!["--trim-above inf", "> 0"],
        ),
        (
            "trim limits crossed",
            vec!["--trim-below", "2", "--trim-above", "1"],
            vec!["--trim-below 2", "--trim-above 1", "lower limit"],
        ),
        (
            "choice codes without b",
            vec!["--choice-codes", "1=a"],
            vec!["--choice-codes", "no code for option b"],
        ),
        (
            "choice code to an unknown option",
            vec!["--choice-codes", "1=a,2=left"],
            vec!["--choice-codes", "`2=left`", "expected an option a, b, c"],
        ),
        (
            "empty missing token",
            vec!["--missing", "NA,,NaN"],
            vec!["--missing", "empty token"],
        ),
        (
            "missing token that is a choice code",
            vec!["--choice-codes", "1=a,2=b", "--missing", "2"],
            vec!["--missing", "`2`", "choice code"],
        ),
        // Shard I of N exists for 1 ≤ I ≤ N only (src/cli/shard.rs).
        (
            "shard 0",
            vec!["--shard", "0/3"],
            vec!["--shard 0/3", "1 ≤ I ≤ N"],
        ),
        (
            "shard above the count",
            vec!["--shard", "4/3"],
            vec!["--shard 4/3", "1 ≤ I ≤ N"],
        ),
        (
            "shard not a number",
            vec!["--shard", "x/3"],
            vec!["--shard x/3", "expected I/N"],
        ),
    ];
    for (case, extra, needles) in cases {
        fit_option_fails(case, &extra, &needles);
    }
}

#[test]
fn deadline_below_most_response_times() {
    // The good table's times are 0.8, 1.1 and 0.7 s: all are slower than a 0.5 s deadline, which
    // cannot be the time at which trials ended without response.
    fit_option_fails(
        "deadline below the response times",
        &["--deadline", "0.5"],
        &["--deadline 0.5", "100.0 % of the response times", "{file}"],
    );
}

#[test]
fn response_times_in_milliseconds() {
    // Medians of 950 and 700 "seconds" (source: the rows below) are milliseconds.
    let data = good_with_line(2, "s1,1,0,1,a,800");
    let data = data.replace("s1,2,1,0,b,1.1", "s1,2,1,0,b,1100");
    let data = data.replace("s2,1,0.5,0,a,0.7", "s2,1,0.5,0,a,700");
    fit_table_option_fails(
        "milliseconds",
        &data,
        &[],
        &[
            "{file}",
            "column rt",
            "look like milliseconds",
            "divide the rt column by 1000",
        ],
    );
}

#[test]
fn subjects_with_fewer_responses_than_parameters() {
    // gainloss-linear has six free parameters (source: models/gainloss-linear.toml); s1 has two
    // responses and s2 one (source: GOOD_ROWS).
    fit_option_fails(
        "fewer responses than parameters",
        &[],
        &[
            "{file}",
            "column subject",
            "\"s1\", \"s2\"",
            "6 free parameters",
        ],
    );
}

#[test]
fn choice_codes_in_the_table() {
    // Line 3 writes 2 where a or b is expected.
    fit_table_option_fails(
        "code without --choice-codes",
        &good_with_line(3, "s1,2,1,0,2,1.1"),
        &[],
        &[
            "{file}",
            "line 3",
            "column choice",
            "--choice-codes 1=a,2=b",
        ],
    );
    // With codes 1 and 2, line 4 writes 3.
    let data = good_csv()
        .replace(",a,", ",1,")
        .replace(",b,", ",2,")
        .replace("s2,1,0.5,0,1,0.7", "s2,1,0.5,0,3,0.7");
    fit_table_option_fails(
        "code not listed",
        &data,
        &["--choice-codes", "1=a,2=b"],
        &["{file}", "line 4", "column choice", "1 (a), 2 (b)"],
    );
}

#[test]
fn missing_value_token_without_missing() {
    // Line 2 writes NA for the response time, which the reader does not take as missing unless
    // told.
    fit_table_option_fails(
        "NA without --missing",
        &good_with_line(2, "s1,1,0,1,a,NA"),
        &[],
        &["{file}", "line 2", "column rt", "--missing NA"],
    );
}

#[test]
fn runs_out_of_order() {
    // Subject s1's run r1 starts again on line 4, after run r2 (rows must be ordered by subject,
    // run, trial; source: src/data/mod.rs).
    let data = "subject,run,trial,effort_a,effort_b,choice,rt\n\
                s1,r1,1,0,1,a,0.8\ns1,r2,1,1,0,b,1.1\ns1,r1,2,0.5,0,a,0.7\n";
    fit_table_option_fails(
        "run reappears",
        data,
        &[],
        &["{file}", "line 4", "column run", "appears again"],
    );
    // Within run r1, trial 1 follows trial 2 on line 3.
    let data = "subject,run,trial,effort_a,effort_b,choice,rt\n\
                s1,r1,2,0,1,a,0.8\ns1,r1,1,1,0,b,1.1\n";
    fit_table_option_fails(
        "trial decreasing within a run",
        data,
        &[],
        &["{file}", "line 3", "column trial", "within run \"r1\""],
    );
}

#[test]
fn demo_threads_far_above_the_cores() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("demo");
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    let many = (1000 * cores).to_string();
    expect_failure(
        "demo threads",
        dir.path(),
        &["demo", "--out", out.to_str().unwrap(), "--threads", &many],
        &[&out],
        &["--threads", &format!("this machine has {cores} cores")],
    );
}

#[test]
fn simulate_deadline_not_positive() {
    // A deadline is a number of seconds > 0 (source: src/cli/mod.rs, `simulate` help).
    let dir = tempfile::tempdir().unwrap();
    let design = write(dir.path(), "design.csv", &design_csv());
    let params = write(
        dir.path(),
        "params.csv",
        &format!("{PARAMS_HEADER}\n{}\n", PARAMS_ROWS.join("\n")),
    );
    let out = dir.path().join("simulated.csv");
    for deadline in ["0", "-1", "inf"] {
        let flag = format!("--deadline={deadline}");
        expect_failure(
            &format!("simulate deadline {deadline}"),
            dir.path(),
            &[
                "simulate",
                "--model",
                MODEL,
                "--params",
                params.to_str().unwrap(),
                "--design",
                design.to_str().unwrap(),
                "--out",
                out.to_str().unwrap(),
                &flag,
            ],
            &[&out],
            &[&format!("--deadline {deadline}"), "seconds > 0"],
        );
    }
    // A design whose choice column uses codes not given with --choice-codes.
    let coded = write(
        dir.path(),
        "coded.csv",
        &design_csv().replacen(",,,1,", ",left,0.9,1,", 1),
    );
    expect_failure(
        "simulate design choice code",
        dir.path(),
        &[
            "simulate",
            "--model",
            MODEL,
            "--params",
            params.to_str().unwrap(),
            "--design",
            coded.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
            "--choice-codes",
            "l=a,r=b",
        ],
        &[&out],
        &[
            coded.to_str().unwrap(),
            "line 2",
            "column choice",
            "l (a), r (b)",
        ],
    );
}

#[test]
fn check_and_export_reader_options() {
    // `check` and `export` read the trial table with the same options as `fit`; bad
    // specifications are refused before anything is read or written.
    let dir = tempfile::tempdir().unwrap();
    let data = write(dir.path(), "trials.csv", &good_csv());
    let fits = dir.path().join("fits");
    std::fs::create_dir(&fits).unwrap();
    let out = dir.path().join("out");
    let common = [
        "--fits",
        fits.to_str().unwrap(),
        "--data",
        data.to_str().unwrap(),
        "--model",
        MODEL,
        "--out",
        out.to_str().unwrap(),
    ];
    let cases: [(&str, &[&str], &[&str]); 4] = [
        (
            "check",
            &["--choice-codes", "left=a"],
            &["--choice-codes", "no code for option b"],
        ),
        (
            "export",
            &["--missing", ",NA,"],
            &["--missing", "empty token"],
        ),
        ("check", &["--sims", "5"], &["--sims 5", "at least"]),
        ("check", &["--deadline", "0"], &["--deadline 0", "> 0"]),
    ];
    for (command, extra, needles) in cases {
        let mut args = vec![command];
        args.extend_from_slice(&common);
        args.extend_from_slice(extra);
        expect_failure(
            &format!("{command} {extra:?}"),
            dir.path(),
            &args,
            &[&out],
            needles,
        );
    }
}
