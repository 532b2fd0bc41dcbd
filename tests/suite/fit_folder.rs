//! A fit folder read back (`valuedrift::results::fit_folder`): the fit summary table reads back
//! what its writer wrote.

use valuedrift::fit::{ParameterEstimate, SubjectFit};
use valuedrift::results::fit_folder::{SUMMARY, SUMMARY_COLUMNS, Scored, read_fit_summary};

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
