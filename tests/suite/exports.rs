//! `valuedrift export`: latent variables against a hand-computed example, scaling of the
//! modulators, and the events files against the rules of the BIDS specification for events
//! files (checked here from memory of the specification), end to end through the command.

use crate::common;

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use std::collections::HashMap;
use std::path::Path;
use std::process::Command;
use valuedrift::data::{Choice, Subject, Trial, TrialTable};
use valuedrift::exports::{
    Latent, Scale, bids_label, bids_labels, events_files, latents, run_indices, scale_values,
};
use valuedrift::model::{Model, load_model};
use valuedrift::results::trials_table;
use valuedrift::simulate::{SimulationSettings, orchard_design, simulate_subject};

#[allow(clippy::too_many_arguments)]
fn trial(
    n: i64,
    run: &str,
    (a, b): (usize, usize),
    effort: (f64, f64),
    choice: Option<Choice>,
    rt: Option<f64>,
    outcome: Option<f64>,
    onset: Option<f64>,
) -> Trial {
    Trial {
        trial: n,
        run: run.into(),
        offers: vec![common::offer(a, effort.0), common::offer(b, effort.1)],
        choice,
        rt,
        outcome,
        onset,
        outcome_onset: onset.map(|t| t + 2.0),
        covariates: Vec::new(),
    }
}

/// Six trials over options x (0) and y (1), two runs of three; trial 3 has no response, trial 5
/// no outcome.
fn worked_subject() -> Subject {
    const A: Choice = Choice::A;
    const B: Choice = Choice::B;
    Subject {
        id: "sub-w_1".into(),
        group: "g".into(),
        options: vec!["x".into(), "y".into()],
        trials: vec![
            trial(
                1,
                "1",
                (0, 1),
                (0.2, 0.6),
                Some(A),
                Some(0.6),
                Some(1.0),
                Some(0.0),
            ),
            trial(
                2,
                "1",
                (0, 1),
                (0.4, 0.4),
                Some(B),
                Some(0.9),
                Some(0.0),
                Some(6.0),
            ),
            trial(3, "1", (0, 1), (0.6, 0.2), None, None, None, Some(12.0)),
            trial(
                4,
                "2",
                (1, 0),
                (0.2, 0.2),
                Some(B),
                Some(0.7),
                Some(0.0),
                Some(0.0),
            ),
            trial(
                5,
                "2",
                (0, 1),
                (0.2, 0.2),
                Some(A),
                Some(0.5),
                None,
                Some(6.0),
            ),
            trial(
                6,
                "2",
                (0, 1),
                (0.0, 0.0),
                Some(A),
                Some(0.8),
                Some(1.0),
                Some(12.0),
            ),
        ],
        covariates: std::sync::Arc::from([]),
    }
}

/// gain 0.5, loss 0.2, k 0.5, value_scale 3, boundary 1.5, ndt 0.3; fixed ones at their value.
fn natural(model: &Model) -> Vec<f64> {
    model
        .parameters
        .iter()
        .map(|p| match p.name.as_str() {
            "gain_rate" => 0.5,
            "loss_rate" => 0.2,
            "effort_weight" => 0.5,
            "value_scale" => 3.0,
            "boundary" => 1.5,
            "ndt" => 0.3,
            _ => p.fixed.unwrap(),
        })
        .collect()
}

fn close(a: Option<f64>, b: Option<f64>) -> bool {
    match (a, b) {
        (Some(a), Some(b)) => (a - b).abs() < 1e-12,
        (None, None) => true,
        _ => false,
    }
}

#[test]
fn latents_match_a_hand_computed_worked_example() {
    // Expected values worked by hand (arithmetic below) from the gain/loss delta rule (common
    // practice): d = r − Q(s), Q(s) += (gain if d > 0 else loss)·d, values before the outcome;
    // linear cost SV = Q − k·E with k = 0.5; drift = 3·(SV_a − SV_b).
    // t1: Q x 0, y 0; SV_a = 0 − 0.5·0.2 = −0.1, SV_b = 0 − 0.5·0.6 = −0.3, ΔSV = 0.2;
    //     chose a (x): chosen −0.1, unchosen −0.3, effort 0.2; d = 1 − 0 = 1 > 0 → Q(x) = 0.5
    // t2: Q x 0.5, y 0; SV_a = 0.5 − 0.2 = 0.3, SV_b = −0.2, ΔSV = 0.5;
    //     chose b (y): chosen −0.2, unchosen 0.3, effort 0.4; d = 0 − 0 = 0 → no change
    // t3: Q x 0.5, y 0; SV_a = 0.5 − 0.3 = 0.2, SV_b = −0.1, ΔSV = 0.3; no response: nothing
    //     chosen, no prediction error, no update
    // t4: a = y, b = x: Q_a 0, Q_b 0.5; SV_a = −0.1, SV_b = 0.4, ΔSV = −0.5;
    //     chose b (x): chosen 0.4, unchosen −0.1, effort 0.2; d = 0 − 0.5 = −0.5 < 0
    //     → Q(x) = 0.5 + 0.2·(−0.5) = 0.4
    // t5: Q x 0.4, y 0; SV_a = 0.3, SV_b = −0.1, ΔSV = 0.4; chose a, no outcome: no d, no update
    // t6: Q x 0.4, y 0; efforts 0: SV = Q, ΔSV = 0.4; chose a; d = 1 − 0.4 = 0.6 → Q(x) = 0.7
    let model = load_model("gainloss-linear").unwrap();
    let rows = latents(&model, &worked_subject(), &natural(&model)).unwrap();
    type Row = (
        f64,
        f64,
        f64,
        Option<f64>,
        Option<f64>,
        Option<f64>,
        Option<f64>,
    );
    // (value_a, value_b, value_difference, value_chosen, value_unchosen, effort_chosen, d)
    let expected: [Row; 6] = [
        (0.0, 0.0, 0.2, Some(-0.1), Some(-0.3), Some(0.2), Some(1.0)),
        (0.5, 0.0, 0.5, Some(-0.2), Some(0.3), Some(0.4), Some(0.0)),
        (0.5, 0.0, 0.3, None, None, None, None),
        (0.0, 0.5, -0.5, Some(0.4), Some(-0.1), Some(0.2), Some(-0.5)),
        (0.4, 0.0, 0.4, Some(0.3), Some(-0.1), Some(0.2), None),
        (0.4, 0.0, 0.4, Some(0.4), Some(0.0), Some(0.0), Some(0.6)),
    ];
    assert_eq!(rows.len(), 6);
    for (k, (r, e)) in rows.iter().zip(expected).enumerate() {
        assert!(
            close(Some(r.values[0]), Some(e.0)),
            "trial {}: value_a {}",
            k + 1,
            r.values[0]
        );
        assert!(
            close(Some(r.values[1]), Some(e.1)),
            "trial {}: value_b {}",
            k + 1,
            r.values[1]
        );
        assert!(
            close(r.value_difference, Some(e.2)),
            "trial {}: value_difference {:?}",
            k + 1,
            r.value_difference
        );
        assert!(
            close(r.value_chosen, e.3),
            "trial {}: {:?}",
            k + 1,
            r.value_chosen
        );
        assert!(
            close(r.value_unchosen, e.4),
            "trial {}: {:?}",
            k + 1,
            r.value_unchosen
        );
        assert!(
            close(r.effort_chosen, e.5),
            "trial {}: {:?}",
            k + 1,
            r.effort_chosen
        );
        assert!(
            close(r.prediction_error, e.6),
            "trial {}: {:?}",
            k + 1,
            r.prediction_error
        );
        // drift = value_scale·ΔSV (the linear drift mapping of the model).
        assert!(
            close(r.drift, Some(3.0 * e.2)),
            "trial {}: drift {:?}",
            k + 1,
            r.drift
        );
    }
    // Probability of the choice made: unbiased diffusion (start at half the boundary a, unit
    // noise) reaches the upper bound (a) with P = 1/(1 + exp(−v·a)) (common practice: the
    // standard Wiener first-passage result). t1: v = 0.6, a = 1.5, chose a: 1/(1 + e^−0.9).
    let p1 = 1.0 / (1.0 + (-0.9f64).exp());
    assert!((rows[0].choice_probability.unwrap() - p1).abs() < 1e-9);
    // t2: v = 1.5, chose b: 1 − 1/(1 + e^−2.25) = 1/(1 + e^2.25).
    let p2 = 1.0 / (1.0 + 2.25f64.exp());
    assert!((rows[1].choice_probability.unwrap() - p2).abs() < 1e-9);
    assert_eq!(rows[2].choice_probability, None);
    // Expected decision time of the unbiased diffusion: (a/(2v))·tanh(v·a/2) (common practice);
    // t1: (1.5/1.2)·tanh(0.45); expected rt adds ndt = 0.3.
    let t1 = 1.25 * 0.45f64.tanh();
    assert!((rows[0].expected_decision_time.unwrap() - t1).abs() < 1e-6);
    assert!((rows[0].expected_rt.unwrap() - (t1 + 0.3)).abs() < 1e-6);
    // The no-response trial has a value difference and an expected time, but no rt.
    assert_eq!(rows[2].rt, None);
    assert!(rows[2].expected_rt.is_some());
}

#[test]
fn labels_and_run_indices_follow_the_bids_rules() {
    // BIDS labels are alphanumeric (from memory of the BIDS specification).
    assert_eq!(bids_label("sub-01_A").as_deref(), Some("01A"));
    assert_eq!(bids_label("p 7.b").as_deref(), Some("p7b"));
    assert_eq!(bids_label("__"), None);
    let mut a = worked_subject();
    let mut b = worked_subject();
    a.id = "s-1".into();
    b.id = "s_1".into();
    let err = bids_labels(&[a, b.clone()]).unwrap_err().to_string();
    assert!(err.contains("s-1") && err.contains("s_1"), "{err}");
    // Positive integer run labels are kept; other labels get their order of appearance.
    let runs = run_indices(&worked_subject());
    assert_eq!(
        runs,
        vec![("1".to_string(), Some(1)), ("2".to_string(), Some(2))]
    );
    for (t, run) in b
        .trials
        .iter_mut()
        .zip(["pre", "pre", "pre", "0", "0", "0"])
    {
        t.run = run.into();
    }
    assert_eq!(
        run_indices(&b),
        vec![("pre".to_string(), Some(1)), ("0".to_string(), Some(2))]
    );
    for t in &mut b.trials {
        t.run = String::new();
    }
    assert_eq!(run_indices(&b), vec![(String::new(), None)]);
}

/// Index of column `name` in an events file header.
fn col(header: &[String], name: &str) -> usize {
    header.iter().position(|h| h == name).unwrap()
}

fn parse(cell: &str) -> Option<f64> {
    (cell != "n/a").then(|| cell.parse().unwrap())
}

const MODULATORS: [&str; 8] = [
    "value_chosen",
    "value_unchosen",
    "value_difference",
    "effort_chosen",
    "choice_probability",
    "drift",
    "expected_rt",
    "prediction_error",
];

#[test]
fn modulators_are_centred_or_z_scored_within_each_run_with_n_a_where_expected() {
    let model = load_model("gainloss-linear").unwrap();
    let subject = worked_subject();
    let rows: Vec<Latent> = latents(&model, &subject, &natural(&model)).unwrap();
    for scale in [Scale::Center, Scale::Zscore] {
        let files = events_files(&model, &subject, "w1", "choice", &rows, scale, true);
        assert_eq!(files.len(), 2);
        // BIDS derivative layout: sub-<label>/func/, task entity required for functional files
        // (BIDS specification, common principles: file name structure; from memory).
        assert_eq!(
            files[0].stem,
            "sub-w1/func/sub-w1_task-choice_run-1_desc-gainlosslinear_events"
        );
        for file in &files {
            for name in MODULATORS {
                let k = col(&file.header, name);
                let values: Vec<f64> = file.rows.iter().filter_map(|r| parse(&r[k])).collect();
                let n = values.len() as f64;
                let mean = values.iter().sum::<f64>() / n;
                assert!(mean.abs() < 1e-12, "{name} in {}: mean {mean}", file.stem);
                if scale == Scale::Zscore {
                    // Sample standard deviation, n − 1 denominator (common practice).
                    let var = values.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0);
                    assert!(
                        (var.sqrt() - 1.0).abs() < 1e-12,
                        "{name}: sd {}",
                        var.sqrt()
                    );
                }
            }
            // n/a exactly where a value does not exist: choice-event modulators on choice rows
            // with a response; the prediction error on outcome rows with response and outcome.
            let kind = col(&file.header, "trial_type");
            let trial = col(&file.header, "trial");
            for r in &file.rows {
                let n: i64 = r[trial].parse().unwrap();
                let responded = n != 3;
                let learned = responded && n != 5;
                let is_choice = r[kind] == "choice";
                assert!(is_choice || r[kind] == "outcome");
                for name in ["value_chosen", "effort_chosen", "choice_probability"] {
                    let present = r[col(&file.header, name)] != "n/a";
                    assert_eq!(present, is_choice && responded, "{name}, trial {n}");
                }
                let present = r[col(&file.header, "value_difference")] != "n/a";
                assert_eq!(present, is_choice, "value_difference, trial {n}");
                let present = r[col(&file.header, "prediction_error")] != "n/a";
                assert_eq!(
                    present,
                    !is_choice && learned,
                    "prediction_error, trial {n}"
                );
            }
        }
    }
    // Centred prediction errors of run 1, by hand: d = 1 and 0 (trial 3 has none), mean 0.5,
    // so 0.5 and −0.5 (arithmetic from the worked example above).
    let files = events_files(&model, &subject, "w1", "choice", &rows, Scale::Center, true);
    let k = col(&files[0].header, "prediction_error");
    let centred: Vec<f64> = files[0].rows.iter().filter_map(|r| parse(&r[k])).collect();
    assert_eq!(centred, vec![0.5, -0.5]);
    // Raw values are written unscaled.
    let files = events_files(&model, &subject, "w1", "choice", &rows, Scale::None, true);
    let raw: Vec<f64> = files[0].rows.iter().filter_map(|r| parse(&r[k])).collect();
    assert_eq!(raw, vec![1.0, 0.0]);
}

#[test]
fn z_score_of_a_constant_column_is_only_centred() {
    // A constant column has sd 0: dividing is undefined, so values are only centred.
    let mut v = vec![Some(2.0), None, Some(2.0)];
    let s = scale_values(&mut v, Scale::Zscore);
    assert_eq!(v, vec![Some(0.0), None, Some(0.0)]);
    assert_eq!((s.mean, s.sd), (Some(2.0), None));
    // Hand example: 1, 2, 3 → mean 2, sample sd 1 (n − 1): −1, 0, 1.
    let mut v = vec![Some(1.0), Some(2.0), Some(3.0)];
    scale_values(&mut v, Scale::Zscore);
    assert_eq!(v, vec![Some(-1.0), Some(0.0), Some(1.0)]);
}

// ---------------------------------------------------------------------------------------------
// End to end

fn binary() -> Command {
    Command::new(env!("CARGO_BIN_EXE_valuedrift"))
}

/// Two simulated subjects of the orchard design (two runs each); trial 3 of the first has no
/// response, trial 5 of the second no onset.
fn simulated_data(dir: &Path) -> std::path::PathBuf {
    let model = load_model("gainloss-linear").unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let mut subjects = Vec::new();
    for id in ["sub-01", "p_02"] {
        let design = orchard_design(id, "sim", 40, &mut rng);
        let mut s = simulate_subject(
            &model,
            &natural(&model),
            &design,
            SimulationSettings::default(),
            &mut rng,
        )
        .expect("the design suits the model");
        if id == "sub-01" {
            let t = &mut s.trials[2];
            (t.choice, t.rt, t.outcome) = (None, None, None);
        } else {
            s.trials[4].onset = None;
        }
        subjects.push(s);
    }
    let table = TrialTable {
        subjects,
        present: Vec::new(),
    };
    let path = dir.join("trials.csv");
    let mut bytes = Vec::new();
    trials_table(&table).write_csv(&mut bytes).unwrap();
    std::fs::write(&path, bytes).unwrap();
    path
}

#[test]
fn export_writes_latents_and_bids_events_files() {
    let dir = tempfile::tempdir().unwrap();
    let data = simulated_data(dir.path());
    let fits = dir.path().join("fits");
    let status = binary()
        .args([
            "fit",
            "--model",
            "gainloss-linear",
            "--starts",
            "1",
            "--threads",
            "1",
            // 39 responses for six free parameters: the data screen's default asks for ten
            // per parameter (source: src/data/screen.rs); five suffice for this export test.
            "--responses-per-parameter",
            "5",
        ])
        .arg("--data")
        .arg(&data)
        .arg("--out")
        .arg(&fits)
        .output()
        .unwrap();
    assert!(
        status.status.success(),
        "{}",
        String::from_utf8_lossy(&status.stderr)
    );
    let out = dir.path().join("export");
    let run = binary()
        .args(["export", "--model", "gainloss-linear"])
        .arg("--fits")
        .arg(&fits)
        .arg("--data")
        .arg(&data)
        .arg("--out")
        .arg(&out)
        .output()
        .unwrap();
    let stdout = String::from_utf8_lossy(&run.stdout);
    assert!(
        run.status.success(),
        "{}",
        String::from_utf8_lossy(&run.stderr)
    );
    assert!(stdout.contains("skipped 1 choice events"), "{stdout}");

    // latents.csv: one row per trial; empty fields where a value does not exist.
    let mut reader = csv::Reader::from_path(out.join("latents.csv")).unwrap();
    let header = reader.headers().unwrap().clone();
    for name in [
        "subject",
        "group",
        "run",
        "trial",
        "onset",
        "outcome_onset",
        "choice",
        "rt",
        "value_a",
        "value_b",
        "subjective_value_a",
        "subjective_value_b",
        "value_chosen",
        "value_unchosen",
        "value_difference",
        "prediction_error",
        "effort_chosen",
        "drift",
        "choice_probability",
        "expected_decision_time",
        "expected_rt",
    ] {
        assert!(header.iter().any(|h| h == name), "latents.csv lacks {name}");
    }
    let records: Vec<csv::StringRecord> = reader.records().map(|r| r.unwrap()).collect();
    assert_eq!(records.len(), 80);
    let h = |name: &str| header.iter().position(|x| x == name).unwrap();
    let no_response = records
        .iter()
        .find(|r| &r[h("subject")] == "sub-01" && &r[h("trial")] == "3")
        .unwrap();
    assert_eq!(&no_response[h("choice")], "");
    assert_eq!(&no_response[h("value_chosen")], "");
    assert_eq!(&no_response[h("prediction_error")], "");
    assert_ne!(&no_response[h("value_difference")], "");
    assert!(out.join("latents.parquet").is_file());

    // Subject labels mapped to BIDS labels in participants.tsv (BIDS specification:
    // participant_id first, sub-<label>; from memory), described by participants.json.
    let participants = std::fs::read_to_string(out.join("participants.tsv")).unwrap();
    assert!(
        participants.starts_with("participant_id\tsubject\tgroup\n")
            && participants.contains("sub-01\tsub-01\t")
            && participants.contains("sub-p02\tp_02\t"),
        "{participants}"
    );
    let dictionary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("participants.json")).unwrap())
            .unwrap();
    for column in ["participant_id", "subject", "group"] {
        assert!(dictionary[column]["Description"].is_string(), "{column}");
    }
    // The files outside the specification are named in .bidsignore; a README describes the set.
    let ignored = std::fs::read_to_string(out.join(".bidsignore")).unwrap();
    assert!(ignored.lines().any(|l| l == "latents.csv") && ignored.contains("*_design.tsv"));
    assert!(
        std::fs::read_to_string(out.join("README"))
            .unwrap()
            .contains("gainloss-linear")
    );

    // One events file per subject and run, with sidecars, in the subject's func folder.
    let names = func_files(&out, "_events.tsv");
    assert_eq!(
        names,
        [
            "sub-01/func/sub-01_task-choice_run-1_desc-gainlosslinear_events.tsv",
            "sub-01/func/sub-01_task-choice_run-2_desc-gainlosslinear_events.tsv",
            "sub-p02/func/sub-p02_task-choice_run-1_desc-gainlosslinear_events.tsv",
            "sub-p02/func/sub-p02_task-choice_run-2_desc-gainlosslinear_events.tsv",
        ]
    );
    let mut choice_events = 0;
    for name in &names {
        check_bids_events(&out.join(name));
        let text = std::fs::read_to_string(out.join(name)).unwrap();
        choice_events += text
            .lines()
            .skip(1)
            .filter(|l| l.split('\t').nth(2) == Some("choice"))
            .count();
    }
    // 80 trials, one without onset.
    assert_eq!(choice_events, 79);

    // A derivative dataset description (BIDS specification, derived datasets: Name,
    // BIDSVersion, DatasetType "derivative", GeneratedBy with a Name; from memory).
    let description: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(out.join("dataset_description.json")).unwrap(),
    )
    .unwrap();
    assert!(description["Name"].is_string() && description["BIDSVersion"].is_string());
    assert_eq!(description["DatasetType"], "derivative");
    assert_eq!(description["GeneratedBy"][0]["Name"], "valuedrift");

    // --task sets the task entity, after the subject (BIDS entity order: sub, ses, task, …,
    // run, …, desc); a task label that is not alphanumeric is refused.
    let with_task = |task: &str, out: &std::path::Path| {
        binary()
            .args(["export", "--model", "gainloss-linear", "--task", task])
            .arg("--fits")
            .arg(&fits)
            .arg("--data")
            .arg(&data)
            .arg("--out")
            .arg(out)
            .output()
            .unwrap()
    };
    let tasked = dir.path().join("tasked");
    assert!(with_task("orchard", &tasked).status.success());
    assert!(
        tasked
            .join("sub-01/func/sub-01_task-orchard_run-1_desc-gainlosslinear_events.tsv")
            .is_file()
    );
    let refused = dir.path().join("refused");
    let bad = with_task("orch_ard", &refused);
    assert!(!bad.status.success());
    assert!(String::from_utf8_lossy(&bad.stderr).contains("--task orch_ard"));
    assert!(!refused.exists());
}

/// Rules of BIDS events files (from memory of the BIDS specification): tab-separated with a
/// header row, every row as many fields as the header; first columns onset and duration, in
/// seconds, onsets numbers and durations non-negative numbers (or n/a); missing values written
/// n/a (no empty cells); the JSON sidecar describes each further column.
fn check_bids_events(path: &Path) {
    let text = std::fs::read_to_string(path).unwrap();
    assert!(
        !text.contains('\r'),
        "{}: line ends must be \\n",
        path.display()
    );
    let mut lines = text.lines();
    let header: Vec<&str> = lines.next().unwrap().split('\t').collect();
    assert_eq!(&header[..2], ["onset", "duration"], "{}", path.display());
    let mut rows = 0;
    for (i, line) in lines.enumerate() {
        let cells: Vec<&str> = line.split('\t').collect();
        assert_eq!(
            cells.len(),
            header.len(),
            "{} row {}",
            path.display(),
            i + 2
        );
        for c in &cells {
            assert!(
                !c.trim().is_empty(),
                "{} row {}: empty cell",
                path.display(),
                i + 2
            );
        }
        let onset: f64 = cells[0].parse().unwrap();
        assert!(onset >= 0.0 && onset.is_finite());
        let duration: f64 = cells[1].parse().unwrap();
        assert!(duration >= 0.0 && duration.is_finite());
        for (name, c) in header.iter().zip(&cells).skip(3) {
            if MODULATORS.contains(name) {
                assert!(
                    *c == "n/a" || c.parse::<f64>().is_ok_and(f64::is_finite),
                    "{c}"
                );
            }
        }
        rows += 1;
    }
    assert!(rows > 0);
    let sidecar: HashMap<String, serde_json::Value> =
        serde_json::from_str(&std::fs::read_to_string(path.with_extension("json")).unwrap())
            .unwrap();
    for name in &header {
        let entry = sidecar
            .get(*name)
            .unwrap_or_else(|| panic!("sidecar lacks {name}"));
        assert!(
            entry["LongName"].is_string() && entry["Description"].is_string(),
            "{name}"
        );
        if MODULATORS.contains(name) || ["onset", "duration"].contains(name) {
            assert!(entry["Units"].is_string(), "{name} has no Units");
        }
    }
    // The scaling is recorded (default: mean-centred within the run).
    let pe = sidecar["prediction_error"]["Description"].as_str().unwrap();
    assert!(pe.contains("Mean-centred within this run"), "{pe}");
}

#[test]
fn export_errors_name_the_parameters_file_and_what_is_missing() {
    let dir = tempfile::tempdir().unwrap();
    let data = simulated_data(dir.path());
    let fits = dir.path().join("fits");
    std::fs::create_dir(&fits).unwrap();
    let params = fits.join("parameters.csv");
    // Expected messages are this crate's own (read_estimates).
    std::fs::write(
        &params,
        "subject,group,model,parameter,estimate\nsub-01,sim,delta-linear,learning_rate,0.3\n",
    )
    .unwrap();
    let export = || {
        binary()
            .args(["export", "--model", "gainloss-linear"])
            .arg("--fits")
            .arg(&fits)
            .arg("--data")
            .arg(&data)
            .arg("--out")
            .arg(dir.path().join("out"))
            .output()
            .unwrap()
    };
    let run = export();
    let err = String::from_utf8_lossy(&run.stderr);
    assert!(!run.status.success());
    assert!(
        err.contains("parameters.csv") && err.contains("no estimates of model"),
        "{err}"
    );
    // A subject of the trial table missing from the file.
    let model = load_model("gainloss-linear").unwrap();
    let mut text = String::from("subject,group,model,parameter,estimate\n");
    for (p, x) in model.parameters.iter().zip(natural(&model)) {
        text.push_str(&format!("sub-01,sim,gainloss-linear,{},{x}\n", p.name));
    }
    std::fs::write(&params, &text).unwrap();
    let run = export();
    let err = String::from_utf8_lossy(&run.stderr);
    assert!(!run.status.success());
    assert!(
        err.contains("parameters.csv") && err.contains("subject p_02"),
        "{err}"
    );
    // A bad estimate is reported with its line and column.
    text.push_str("p_02,sim,gainloss-linear,gain_rate,abc\n");
    std::fs::write(&params, &text).unwrap();
    let run = export();
    let err = String::from_utf8_lossy(&run.stderr);
    assert!(
        err.contains("column estimate") && err.contains("'abc'"),
        "{err}"
    );
    assert!(
        !dir.path().join("out").exists(),
        "nothing is written on error"
    );
}

// ---------------------------------------------------------------------------------------------
// Design matrices (--tr, --scans)

/// parameters.csv of both simulated subjects at the generating values (the layout written by
/// `valuedrift fit`), so the export needs no fit.
fn generating_fits(dir: &Path) -> std::path::PathBuf {
    let model = load_model("gainloss-linear").unwrap();
    let mut text = String::from("subject,group,model,parameter,estimate\n");
    for subject in ["sub-01", "p_02"] {
        for (p, x) in model.parameters.iter().zip(natural(&model)) {
            text.push_str(&format!("{subject},sim,gainloss-linear,{},{x}\n", p.name));
        }
    }
    let fits = dir.join("fits");
    std::fs::create_dir_all(&fits).unwrap();
    std::fs::write(fits.join("parameters.csv"), text).unwrap();
    fits
}

fn export_with(dir: &Path, out: &Path, extra: &[&str]) -> std::process::Output {
    let data = simulated_data(dir);
    let fits = generating_fits(dir);
    binary()
        .args(["export", "--model", "gainloss-linear"])
        .arg("--fits")
        .arg(&fits)
        .arg("--data")
        .arg(&data)
        .arg("--out")
        .arg(out)
        .args(extra)
        .output()
        .unwrap()
}

/// The files of every subject's func folder in `out` whose names end in `suffix`, as paths
/// relative to `out`, sorted.
fn func_files(out: &Path, suffix: &str) -> Vec<String> {
    let mut names = Vec::new();
    for subject in std::fs::read_dir(out).unwrap() {
        let subject = subject.unwrap().file_name().to_string_lossy().into_owned();
        let func = out.join(&subject).join("func");
        if !subject.starts_with("sub-") || !func.is_dir() {
            continue;
        }
        names.extend(
            std::fs::read_dir(&func)
                .unwrap()
                .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
                .filter(|n| n.ends_with(suffix))
                .map(|n| format!("{subject}/func/{n}")),
        );
    }
    names.sort();
    names
}

/// Header and numeric rows of a tab-separated file.
fn read_tsv(path: &Path) -> (Vec<String>, Vec<Vec<String>>) {
    let text = std::fs::read_to_string(path).unwrap();
    let mut lines = text.lines();
    let header = lines
        .next()
        .unwrap()
        .split('\t')
        .map(String::from)
        .collect();
    let rows = lines
        .map(|l| l.split('\t').map(String::from).collect())
        .collect();
    (header, rows)
}

#[test]
fn export_with_tr_and_scans_writes_one_design_matrix_per_run() {
    use valuedrift::exports::hrf::{DoubleGamma, Event, Timing, convolve};
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("export");
    // Orchard runs: 20 trials 6 s apart, outcomes 2.5 s after the onset, so the last event is
    // before 120 s; 70 scans of 2 s (140 s) hold every run.
    let run = export_with(dir.path(), &out, &["--tr", "2", "--scans", "70"]);
    assert!(
        run.status.success(),
        "{}",
        String::from_utf8_lossy(&run.stderr)
    );
    let stdout = String::from_utf8_lossy(&run.stdout);
    assert!(stdout.contains("4 design matrices"), "{stdout}");
    let names = func_files(&out, "_design.tsv");
    assert_eq!(
        names,
        [
            "sub-01/func/sub-01_task-choice_run-1_desc-gainlosslinear_design.tsv",
            "sub-01/func/sub-01_task-choice_run-2_desc-gainlosslinear_design.tsv",
            "sub-p02/func/sub-p02_task-choice_run-1_desc-gainlosslinear_design.tsv",
            "sub-p02/func/sub-p02_task-choice_run-2_desc-gainlosslinear_design.tsv",
        ]
    );
    let timing = Timing {
        tr: 2.0,
        scans: 70,
        bins: 16,
    };
    let mut expected_columns = vec!["choice", "outcome"];
    expected_columns.extend(MODULATORS);
    for name in &names {
        let path = out.join(name);
        let (header, rows) = read_tsv(&path);
        // One row per scan, one column per event type and modulator (this feature's layout).
        assert_eq!(header, expected_columns, "{name}");
        assert_eq!(rows.len(), 70, "{name}");
        let column = |c: &str| -> Vec<f64> {
            let k = header.iter().position(|h| h == c).unwrap();
            rows.iter()
                .map(|r| {
                    assert_eq!(r.len(), header.len());
                    let v: f64 = r[k].parse().unwrap();
                    assert!(v.is_finite());
                    v
                })
                .collect()
        };
        // The columns are the events file's events convolved: the choice events (duration =
        // response time) with amplitude 1, and the prediction errors (as written, centred) at
        // the outcome events, through the library's convolution (checked against scipy and the
        // definition in tests/suite/haemodynamic_response.rs).
        let events_path = out.join(name.replace("_design.tsv", "_events.tsv"));
        let (eh, events) = read_tsv(&events_path);
        let (kind, pe) = (col(&eh, "trial_type"), col(&eh, "prediction_error"));
        let regressor = |trial_type: &str, amplitude: &dyn Fn(&[String]) -> f64| -> Vec<Event> {
            events
                .iter()
                .filter(|r| r[kind] == trial_type)
                .map(|r| Event {
                    onset: r[0].parse().unwrap(),
                    duration: r[1].parse().unwrap(),
                    amplitude: amplitude(r),
                })
                .collect()
        };
        let hrf = DoubleGamma::CANONICAL;
        let choice = convolve(&regressor("choice", &|_| 1.0), &hrf, timing);
        let errors = convolve(
            &regressor("outcome", &|r| parse(&r[pe]).unwrap_or(0.0)),
            &hrf,
            timing,
        );
        for (got, want) in [
            (column("choice"), choice),
            (column("prediction_error"), errors),
        ] {
            for (g, w) in got.iter().zip(&want) {
                assert!((g - w).abs() <= 1e-12 * w.abs().max(1.0), "{name}: {g} {w}");
            }
        }
        // Nothing before the first event's response (h = 0 for t ≤ 0): scan 0 is t = 0.
        assert_eq!(column("choice")[0], 0.0);
        assert!(column("choice").iter().any(|&y| y > 0.1));

        let sidecar: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(path.with_extension("json")).unwrap())
                .unwrap();
        assert_eq!(sidecar["RepetitionTime"], 2.0);
        assert_eq!(sidecar["NumberOfVolumes"], 70);
        assert_eq!(sidecar["TimeGridBinsPerScan"], 16);
        // Parameters as commonly used (Friston et al. 1998; Glover 1999).
        let response = &sidecar["HaemodynamicResponse"];
        assert_eq!(response["PeakShape"], 6.0);
        assert_eq!(response["UndershootShape"], 16.0);
        assert_eq!(response["KernelLength"], 32.0);
        assert!(
            sidecar["ModulatorScaling"]
                .as_str()
                .unwrap()
                .contains("mean-centred")
        );
        for c in &header {
            let d = &sidecar["ColumnDescriptions"][c];
            assert!(
                d["LongName"].is_string() && d["Description"].is_string(),
                "{name}: {c}"
            );
        }
    }
}

#[test]
fn design_matrices_warn_about_events_after_the_last_scan() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("export");
    // 50 scans of 2 s end at 100 s; the orchard runs' events go on to about 117 s.
    let run = export_with(
        dir.path(),
        &out,
        &["--tr", "2", "--scans", "50", "--microtime-bins", "8"],
    );
    assert!(
        run.status.success(),
        "{}",
        String::from_utf8_lossy(&run.stderr)
    );
    let stderr = String::from_utf8_lossy(&run.stderr);
    assert!(
        stderr.contains("start after the last scan") && stderr.contains("more than --scans 50"),
        "{stderr}"
    );
    let func = out.join("sub-01/func");
    let (_, rows) = read_tsv(&func.join("sub-01_task-choice_run-1_desc-gainlosslinear_design.tsv"));
    assert_eq!(rows.len(), 50);
    let sidecar: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(
            func.join("sub-01_task-choice_run-1_desc-gainlosslinear_design.json"),
        )
        .unwrap(),
    )
    .unwrap();
    assert_eq!(sidecar["TimeGridBinsPerScan"], 8);
    // Trials at 102, 108 and 114 s: choice and outcome events after 100 s (orchard design).
    assert_eq!(sidecar["EventsAfterLastScan"], 6);
}

#[test]
fn tr_without_scans_or_a_bad_tr_is_an_error_and_writes_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("export");
    for (args, message) in [
        (&["--tr", "2"][..], "--tr needs --scans"),
        (&["--scans", "70"][..], "--scans needs --tr"),
        (
            &["--tr=0", "--scans", "70"][..],
            "expected a repetition time",
        ),
        (&["--tr", "2", "--scans", "0"][..], "--scans 0"),
        (&["--microtime-bins", "16"][..], "--microtime-bins needs"),
    ] {
        let run = export_with(dir.path(), &out, args);
        let stderr = String::from_utf8_lossy(&run.stderr);
        assert!(!run.status.success(), "{args:?}");
        assert!(stderr.contains(message), "{args:?}: {stderr}");
        assert!(!out.exists(), "{args:?}: nothing is written on error");
    }
}

#[test]
fn export_streamed_in_parts_gives_each_subject_its_own_latents() {
    // The trial table is read and exported a few hundred subjects at a time; a table of 600
    // subjects (the 40 demo participants, each copied 15 times under new labels with the same
    // estimates) spans several parts. Every copy must get exactly its original's latents and
    // events files, and the Parquet table (one row group per part) must hold the CSV's rows
    // (common practice: streaming changes nothing).
    let dir = tempfile::tempdir().unwrap();
    let demo = std::fs::read_to_string(common::demo_file("orchard_trials.csv")).unwrap();
    let generating = std::fs::read_to_string(common::demo_file("generating_values.csv")).unwrap();
    let (header, rows) = demo.split_once('\n').unwrap();
    let (names, values) = generating.split_once('\n').unwrap();
    let names: Vec<&str> = names.split(',').collect();
    let copies = 15;
    let mut data = format!("{header}\n");
    let mut parameters = String::from("subject,group,model,parameter,estimate\n");
    for copy in 0..copies {
        for row in rows.lines() {
            data.push_str(&format!("c{copy:02}{row}\n"));
        }
        for line in values.lines() {
            let cells: Vec<&str> = line.split(',').collect();
            for (name, value) in names.iter().zip(&cells).skip(2) {
                parameters.push_str(&format!(
                    "c{copy:02}{},{},gainloss-linear,{name},{value}\n",
                    cells[0], cells[1]
                ));
            }
        }
    }
    let data_path = dir.path().join("copies.csv");
    std::fs::write(&data_path, data).unwrap();
    let fits = dir.path().join("fits");
    std::fs::create_dir_all(&fits).unwrap();
    std::fs::write(fits.join("parameters.csv"), parameters).unwrap();
    // The original table with the original labels, in one part.
    let single_fits = dir.path().join("single-fits");
    std::fs::create_dir_all(&single_fits).unwrap();
    let single = std::fs::read_to_string(fits.join("parameters.csv"))
        .unwrap()
        .lines()
        .filter(|l| !l.starts_with('c') || l.starts_with("c00"))
        .map(|l| format!("{}\n", l.strip_prefix("c00").unwrap_or(l)))
        .collect::<String>();
    std::fs::write(single_fits.join("parameters.csv"), single).unwrap();
    let export = |fits: &Path, data: &Path, out: &Path| {
        let output = binary()
            .args(["export", "--model", "gainloss-linear", "--fits"])
            .arg(fits)
            .arg("--data")
            .arg(data)
            .arg("--out")
            .arg(out)
            .output()
            .unwrap();
        assert!(output.status.success(), "{output:?}");
        let csv = std::fs::read_to_string(out.join("latents.csv")).unwrap();
        let mut by_subject: HashMap<String, Vec<String>> = HashMap::new();
        for line in csv.lines().skip(1) {
            let (subject, rest) = line.split_once(',').unwrap();
            by_subject
                .entry(subject.to_string())
                .or_default()
                .push(rest.to_string());
        }
        (csv, by_subject)
    };
    let single_out = dir.path().join("single");
    let (_, originals) = export(
        &single_fits,
        &common::demo_file("orchard_trials.csv"),
        &single_out,
    );
    let out = dir.path().join("export");
    let (csv, by_subject) = export(&fits, &data_path, &out);
    let csv_header = csv.lines().next().unwrap();
    assert_eq!(by_subject.len(), 40 * copies);
    for (subject, rows) in &by_subject {
        let original = &subject[3..];
        assert_eq!(rows, &originals[original], "{subject} against {original}");
        let events = |s: &str| {
            let label = bids_label(s).unwrap();
            let name = format!("sub-{label}_task-choice_run-1_desc-gainlosslinear_events.tsv");
            std::fs::read_to_string(out.join(format!("sub-{label}/func/{name}"))).unwrap()
        };
        assert_eq!(
            events(subject),
            events(&format!("c00{original}")),
            "{subject}"
        );
    }
    use polars::prelude::SerReader;
    let frame = polars::prelude::ParquetReader::new(
        std::fs::File::open(out.join("latents.parquet")).unwrap(),
    )
    .finish()
    .unwrap();
    assert_eq!(frame.height(), csv.lines().count() - 1);
    let columns: Vec<String> = frame
        .get_column_names()
        .iter()
        .map(|c| c.to_string())
        .collect();
    assert_eq!(columns.join(","), csv_header);
    let subjects = frame.column("subject").unwrap().str().unwrap().clone();
    let trials = frame.column("trial").unwrap().i64().unwrap().clone();
    for (k, line) in csv.lines().skip(1).enumerate().step_by(997) {
        let cells: Vec<&str> = line.split(',').collect();
        assert_eq!(subjects.get(k), Some(cells[0]), "row {k}");
        assert_eq!(
            trials.get(k).map(|t| t.to_string()).as_deref(),
            Some(cells[3])
        );
    }
}
