//! A fit folder read back (`valuedrift::results::fit_folder`): the fit summary table reads back
//! what its writer wrote, and the run record (run.json) written by `fit` reads back through the
//! typed reader that `compare`, `contrast`, `check` and `export` use, each key on its own.

use std::path::Path;
use valuedrift::fit::{ParameterEstimate, SubjectFit};
use valuedrift::results::fit_folder::{
    RUN_RECORD, RecordedModel, RunRecord, SUMMARY, SUMMARY_COLUMNS, Scored, read_fit_summary,
};

use crate::common::{MODEL, bin, demo_file, succeed};

/// A fit with the given statistics (the other fields do not enter the summary table).
fn fit(subject: &str, model: &str, times: bool, bic: f64, evidence: Option<f64>) -> SubjectFit {
    SubjectFit {
        subject: subject.into(),
        group: "steady".into(),
        model: model.into(),
        scores_response_times: times,
        n_trials: 240,
        n_params: 6,
        log_likelihood: -0.5 * bic + 1.0,
        log_prior: 0.0,
        aic: 0.1 + bic / 3.0,
        bic,
        starts_at_best: 3,
        starts: 10,
        converged: true,
        status: "converged".into(),
        hessian_ok: true,
        termination: "gradient below tolerance".into(),
        gradient_norm: 1e-7,
        estimates: vec![ParameterEstimate {
            name: "boundary".into(),
            estimate: 1.5,
            std_error: None,
            interval: None,
            at_bound: false,
            fixed: false,
        }],
        theta: vec![0.0],
        covariance_theta: None,
        log_evidence: evidence,
    }
}

#[test]
fn the_fit_summary_reads_back_what_its_writer_wrote() {
    // Source: common practice — a table's reader returns what its writer wrote (round trip);
    // numbers are written in the shortest text that reads back to the same f64 (output_formats).
    let fits = [
        fit("sub-01", "rt-model", true, 412.123_456_789, Some(-210.5)),
        fit("sub-01", "choice-model", false, 1.0 / 3.0, None),
        fit("sub-02", "rt-model", true, 7e-12, Some(f64::MIN_POSITIVE)),
    ];
    let dir = tempfile::tempdir().unwrap();
    let path = SUMMARY.csv_in(dir.path());
    let mut bytes = Vec::new();
    valuedrift::results::summary_table(&fits)
        .write_csv(&mut bytes)
        .unwrap();
    std::fs::write(&path, bytes).unwrap();
    let header = std::fs::read_to_string(&path).unwrap();
    assert_eq!(
        header.lines().next(),
        Some(SUMMARY_COLUMNS.join(",").as_str())
    );
    let rows = read_fit_summary(&path, "group").unwrap();
    assert_eq!(rows.len(), fits.len());
    for (k, (row, fit)) in rows.iter().zip(&fits).enumerate() {
        assert_eq!(
            (row.subject.as_str(), row.group.as_str(), row.model.as_str()),
            (fit.subject.as_str(), fit.group.as_str(), fit.model.as_str())
        );
        assert_eq!((row.n_trials, row.n_params), (240, 6));
        assert_eq!(
            (row.aic.to_bits(), row.bic.to_bits()),
            (fit.aic.to_bits(), fit.bic.to_bits())
        );
        assert_eq!(row.log_evidence_laplace, fit.log_evidence);
        assert_eq!(row.scored, Some(Scored::of(fit.scores_response_times)));
        // Header = line 1 (src/files.rs, InputError).
        assert_eq!(row.line, k as u64 + 2);
    }
}

#[test]
fn a_missing_or_unreadable_run_record_is_told_apart_from_a_present_one() {
    // Source: the documentation of RunRecord::read — no record is None (a folder put together
    // by hand), a record that is not JSON is an error naming the file.
    let dir = tempfile::tempdir().unwrap();
    assert_eq!(RunRecord::read(dir.path()).unwrap(), None);
    std::fs::write(dir.path().join(RUN_RECORD), "{").unwrap();
    let err = RunRecord::read(dir.path()).unwrap_err().to_string();
    assert!(
        err.contains(RUN_RECORD) && err.contains("is not the JSON run record"),
        "{err}"
    );
    assert_eq!(RunRecord::if_readable(dir.path()), None);
}

#[test]
fn each_key_of_the_run_record_is_read_on_its_own() {
    // Source: the documentation of RunRecord — a key that is missing or of another type reads
    // as absent, and the other keys are still read (records of older versions lack keys).
    let dir = tempfile::tempdir().unwrap();
    let record = r#"{
        "lock": "0.2",
        "group_column": "clinic",
        "not_fitted": [{"model": "m", "subject": "s1"}, {"model": "m"}, {"model": "n", "subject": "s2"}],
        "models": [{"name": "m", "definition": "text"}, {"definition": "nameless"}, {"name": "n"}],
        "empirical_bayes": {"per_group": true}
    }"#;
    std::fs::write(dir.path().join(RUN_RECORD), record).unwrap();
    let read = RunRecord::read(dir.path()).unwrap().unwrap();
    assert_eq!(read.lock, None);
    assert_eq!(read.group_column.as_deref(), Some("clinic"));
    assert_eq!(
        read.not_fitted_with("m").into_iter().collect::<Vec<_>>(),
        ["s1"]
    );
    assert_eq!(read.definition_of("m").unwrap(), "text");
    let err = read.definition_of("n").unwrap_err().to_string();
    assert!(err.ends_with("has no definition of model n"), "{err}");
    let err = read.definition_of("o").unwrap_err().to_string();
    assert!(
        err.ends_with("records no fit of model o (models fitted: m, n)"),
        "{err}"
    );
    assert!(read.per_group_priors);

    std::fs::write(dir.path().join(RUN_RECORD), "{}").unwrap();
    let empty = RunRecord::read(dir.path()).unwrap().unwrap();
    assert_eq!(
        (
            empty.lock,
            empty.group_column.clone(),
            empty.per_group_priors
        ),
        (None, None, false)
    );
    assert!(empty.not_fitted.is_empty());
    let err = empty.definition_of("m").unwrap_err().to_string();
    assert!(err.contains("has no `models` list"), "{err}");
}

/// The first `n` participants of the demo study (demo-data/README.md) in `dir`.
fn demo_subjects(dir: &Path, n: usize) -> std::path::PathBuf {
    let text = std::fs::read_to_string(demo_file("orchard_trials.csv")).unwrap();
    let prefixes: Vec<String> = (1..=n).map(|k| format!("sub-{k:02},")).collect();
    let kept: Vec<&str> = text
        .lines()
        .enumerate()
        .filter(|(i, l)| *i == 0 || prefixes.iter().any(|p| l.starts_with(p.as_str())))
        .map(|(_, l)| l)
        .collect();
    let path = dir.join("trials.csv");
    std::fs::write(&path, kept.join("\n") + "\n").unwrap();
    path
}

#[test]
fn the_run_record_written_by_fit_reads_back_through_the_typed_reader() {
    // Source: common practice — what `fit` records (its options and the model file's text) is
    // what the reader of later commands returns (round trip through the binary).
    let dir = tempfile::tempdir().unwrap();
    let data = demo_subjects(dir.path(), 2);
    let fits = dir.path().join("fits");
    succeed(
        bin()
            .args(["fit", "--model", MODEL, "--starts", "2", "--lock", "0.05"])
            .arg("--data")
            .arg(&data)
            .arg("--out")
            .arg(&fits),
    );
    let record = RunRecord::read(&fits).unwrap().unwrap();
    assert_eq!(record.path, fits.join(RUN_RECORD));
    assert_eq!(record.lock, Some(0.05));
    assert_eq!(record.group_column.as_deref(), Some("group"));
    assert!(record.not_fitted.is_empty());
    assert!(!record.per_group_priors);
    let model = valuedrift::model::load_model(MODEL).unwrap();
    assert_eq!(
        record.models,
        Some(vec![RecordedModel {
            name: MODEL.to_string(),
            definition: Some(model.text.clone()),
        }])
    );
    assert_eq!(record.definition_of(MODEL).unwrap(), model.text);
}
