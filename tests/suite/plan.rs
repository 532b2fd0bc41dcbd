//! The planning command: its recovery figures against a direct recovery computation on the same
//! design and seed (as tests/suite/parameter_recovery.rs computes it, with its thresholds), its
//! outputs independent of the number of threads, and its refusals of impossible plans.

use crate::common::{bin, contents, demo_file, pearson, succeed};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::path::Path;
use valuedrift::data::TrialTable;
use valuedrift::fit::{FitOptions, fit_subject};
use valuedrift::likelihood::SubjectLikelihood;
use valuedrift::model::load_model;
use valuedrift::plan::Plan;
use valuedrift::plan::cohort::{first_trials, participant_label, participant_rng};
use valuedrift::plan::spec::PlanSpec;
use valuedrift::plan::summaries::{EstimateKind, recovery};
use valuedrift::simulate::{SimulationSettings, orchard_design, simulate_subject};

/// Generating ranges of the reference model's recovery tests.
const RANGES: [(&str, f64, f64); 6] = crate::common::RECOVERY_RANGES;

const SEED: u64 = 20_261_201;

/// 30 participants (2 studies × 15) of the reference model on the orchard design at 150 and 300
/// trials: the plan's r per parameter equals r computed directly from `simulate_subject` and
/// `fit_subject` with the plan's documented streams (participant_rng of each label, values drawn
/// uniformly in model order), and at 300 trials meets the recovery test's thresholds (r ≥ 0.9
/// for value_scale, boundary and ndt, ≥ 0.75 for the others; the acceptance criteria).
#[test]
fn plan_recovery_equals_a_direct_recovery_computation() {
    let mut design_rng = ChaCha8Rng::seed_from_u64(SEED);
    let design: Vec<_> = (0..15)
        .map(|i| orchard_design(&format!("d{i:02}"), "design", 300, &mut design_rng))
        .collect();
    let population: String = RANGES
        .iter()
        .map(|(name, lo, hi)| format!("{name} = {{ uniform = [{lo}, {hi}] }}\n"))
        .collect();
    let text = format!(
        "design = \"in-memory\"\nmodels = [\"gainloss-linear\"]\nparticipants = [15]\n\
         trials = [150, 300]\nstudies = 2\nseed = {SEED}\nempirical_bayes = false\n\
         [population]\n{population}"
    );
    let spec = PlanSpec::parse(&text, Path::new("test-plan.toml")).unwrap();
    let model = load_model("gainloss-linear").unwrap();
    let table = TrialTable {
        subjects: design.clone(),
        present: Vec::new(),
    };
    let plan = Plan::new(
        spec,
        table,
        vec![load_model("gainloss-linear").unwrap()],
        None,
    )
    .unwrap();
    let studies = plan.run(0, &|| {}).unwrap();
    let rows = recovery(&plan, &studies);

    let options = FitOptions {
        seed: SEED,
        ..FitOptions::default()
    };
    for (t, trials) in [150usize, 300].into_iter().enumerate() {
        let mut truth = vec![Vec::new(); RANGES.len()];
        let mut estimate = vec![Vec::new(); RANGES.len()];
        for study in 0..2 {
            for j in 0..15 {
                let label = participant_label(&model.name, study, "all", j);
                let mut rng = participant_rng(SEED, &label);
                let values: Vec<f64> = model
                    .parameters
                    .iter()
                    .map(|p| match RANGES.iter().find(|r| r.0 == p.name) {
                        Some(&(_, lo, hi)) => rng.random_range(lo..=hi),
                        None => p.fixed.unwrap(),
                    })
                    .collect();
                let mut session = design[j % design.len()].clone();
                session.id = label;
                session.group = "all".into();
                let simulated = simulate_subject(
                    &model,
                    &values,
                    &session,
                    SimulationSettings::default(),
                    &mut rng,
                )
                .unwrap();
                let part = first_trials(&simulated, trials);
                let fit = fit_subject(
                    &SubjectLikelihood::new(&model, &part, None).unwrap(),
                    &options,
                );
                for (k, (name, _, _)) in RANGES.iter().enumerate() {
                    let slot = model
                        .parameters
                        .iter()
                        .position(|p| p.name == *name)
                        .unwrap();
                    truth[k].push(values[slot]);
                    estimate[k].push(fit.estimates[slot].estimate);
                }
            }
        }
        for (k, (name, _, _)) in RANGES.iter().enumerate() {
            let direct = pearson(&truth[k], &estimate[k]);
            let row = rows
                .iter()
                .find(|r| {
                    r.trials == trials && r.parameter == *name && r.kind == EstimateKind::PerSubject
                })
                .unwrap();
            let planned = row.r.unwrap();
            println!("{trials} trials, {name}: plan r = {planned:.4}, direct r = {direct:.4}");
            assert!(
                (planned - direct).abs() <= 1e-12,
                "{name} at {trials} trials: plan r {planned}, direct {direct}"
            );
            assert_eq!(row.n, 30);
            if t == 1 {
                let needed = if matches!(*name, "boundary" | "ndt" | "value_scale") {
                    0.9
                } else {
                    0.75
                };
                assert!(planned >= needed, "{name}: r = {planned:.3} < {needed}");
            }
        }
    }
}

fn write_plan(dir: &Path, body: &str) -> std::path::PathBuf {
    let path = dir.join("plan.toml");
    let design = demo_file("orchard_design.csv");
    std::fs::write(
        &path,
        format!("design = {:?}\n{body}", design.display().to_string()),
    )
    .unwrap();
    path
}

const SMALL_PLAN: &str = "models = [\"gainloss-linear\", \"gainloss-quadratic\"]
participants = [3, 4]
trials = [40, 80]
studies = 2
seed = 7
target_r = 0.5
groups = [\"steady\", \"effort-averse\"]
[difference]
parameter = \"effort_weight\"
shift = 0.5
[population]
gain_rate = { uniform = [0.1, 0.7] }
loss_rate = { uniform = [0.1, 0.7] }
effort_weight = { normal = { mean = 0.8, sd = 0.3 } }
value_scale = { uniform = [2.0, 8.0] }
boundary = { uniform = [1.0, 2.5] }
ndt = { uniform = [0.2, 0.5] }
";

/// A small plan run with one and with two threads writes byte-identical tables (determinism
/// for a seed whatever the thread count: the project's numerics standard), with one row per
/// generating model, design size, kind of estimate and parameter in the recovery table, a full
/// confusion matrix, and powers inside their Wilson intervals.
#[test]
fn plan_outputs_do_not_depend_on_threads() {
    let dir = tempfile::tempdir().unwrap();
    let plan = write_plan(dir.path(), SMALL_PLAN);
    let run = |threads: &str, out: &str| {
        let out = dir.path().join(out);
        succeed(
            bin()
                .args(["plan", "--plan"])
                .arg(&plan)
                .arg("--out")
                .arg(&out)
                .args(["--threads", threads]),
        );
        out
    };
    let one = run("1", "one");
    let two = run("2", "two");
    let (a, b) = (contents(&one), contents(&two));
    assert_eq!(a.keys().collect::<Vec<_>>(), b.keys().collect::<Vec<_>>());
    for (name, bytes) in &a {
        if name.to_string_lossy() == "plan.json" {
            continue; // its command line names the output folder
        }
        assert!(
            bytes == &b[name],
            "{} differs between 1 and 2 threads",
            name.display()
        );
    }
    let read = |name: &str| -> Vec<csv::StringRecord> {
        csv::Reader::from_path(one.join(name))
            .unwrap()
            .records()
            .map(Result::unwrap)
            .collect()
    };
    // 2 generating models × 2 design sizes × 2 kinds × 6 parameters.
    assert_eq!(read("plan_recovery.csv").len(), 48);
    // 2 design sizes × 2 generating × 2 selected.
    assert_eq!(read("plan_confusion.csv").len(), 8);
    let power = read("plan_power.csv");
    assert_eq!(power.len(), 8);
    for row in &power {
        let p: f64 = row[6].parse().unwrap();
        let (lo, hi): (f64, f64) = (row[7].parse().unwrap(), row[8].parse().unwrap());
        assert!(lo <= p && p <= hi && (0.0..=1.0).contains(&p), "{row:?}");
    }
    let record = std::fs::read_to_string(one.join("plan.json")).unwrap();
    assert!(record.contains("not diagnoses"));
    assert!(one.join("plan_estimates.parquet").exists());
}

/// Impossible plans are refused before any simulation, naming the file, the key or the model
/// and parameter, and what was expected (the project's input standard).
#[test]
fn impossible_plans_are_refused_with_their_reason() {
    let dir = tempfile::tempdir().unwrap();
    let cases = [
        (
            SMALL_PLAN.replace("studies = 2", "studies = 2\ncohorts = 3"),
            "cohorts",
        ),
        (
            SMALL_PLAN.replace("participants = [3, 4]", "participants = [1, 4]"),
            "`participants`",
        ),
        (
            SMALL_PLAN.replace("shift = 0.5", "shift = 40.0"),
            "effort_weight",
        ),
        (
            SMALL_PLAN.replace("trials = [40, 80]", "trials = [40, 800]"),
            "800",
        ),
        (
            SMALL_PLAN.replace("groups = [", "generating = [\"delta-linear\"]\ngroups = ["),
            "delta-linear",
        ),
        (
            SMALL_PLAN.replace(
                "boundary = { uniform = [1.0, 2.5] }",
                "boundary = { uniform = [0.1, 2.5] }",
            ),
            "boundary",
        ),
    ];
    for (body, expected) in cases {
        let plan = write_plan(dir.path(), &body);
        let out = dir.path().join("out");
        let output = bin()
            .args(["plan", "--plan"])
            .arg(&plan)
            .arg("--out")
            .arg(&out)
            .output()
            .unwrap();
        let message = String::from_utf8_lossy(&output.stderr);
        assert!(!output.status.success(), "accepted: {body}");
        assert!(
            message.contains(expected) && message.contains("plan.toml"),
            "expected `{expected}` and the file in: {message}"
        );
        assert!(!out.exists(), "a refused plan left output");
    }
}

/// On the published effort-offer study (tests/data/effort_offers_subset.csv: 60 participants of
/// Mehrhof & Nord 2025, MIT licence, see tests/data/effort_offers_README.md): a pilot fit's
/// estimates_wide.csv as the population file and the real offer sequences as the design. Every
/// simulated participant's generating values are one row of the pilot's estimates (drawn, not
/// invented), the rows the plan leaves out are exactly those with a value at or beyond a bound
/// of the model, and the plan runs end to end on the real design.
#[test]
fn plan_runs_on_the_published_design_with_a_pilot_population() {
    let dir = tempfile::tempdir().unwrap();
    let data = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/effort_offers_subset.csv");
    let pilot = dir.path().join("pilot");
    succeed(
        bin()
            .args([
                "fit",
                "--model",
                "offered-linear",
                "--starts",
                "2",
                "--data",
            ])
            .arg(&data)
            .arg("--out")
            .arg(&pilot),
    );
    let plan = dir.path().join("plan.toml");
    std::fs::write(
        &plan,
        format!(
            "design = {:?}\nmodels = [\"offered-linear\"]\nparticipants = [5]\ntrials = [40]\n\
             studies = 2\nempirical_bayes = false\npopulation_file = {:?}\n",
            data.display().to_string(),
            pilot.join("estimates_wide.csv").display().to_string()
        ),
    )
    .unwrap();
    let out = dir.path().join("out");
    let output = succeed(
        bin()
            .args(["plan", "--plan"])
            .arg(&plan)
            .arg("--out")
            .arg(&out),
    );
    let notes = String::from_utf8_lossy(&output.stderr);

    // The pilot's rows of the model, with the values the model estimates.
    let model = load_model("offered-linear").unwrap();
    let free: Vec<&valuedrift::model::params::ParameterSpec> =
        model.parameters.iter().filter(|p| p.is_free()).collect();
    let mut reader = csv::Reader::from_path(pilot.join("estimates_wide.csv")).unwrap();
    let header = reader.headers().unwrap().clone();
    let (mut inside, mut outside) = (Vec::new(), Vec::new());
    for (i, record) in reader.records().enumerate() {
        let record = record.unwrap();
        let values: Vec<f64> = free
            .iter()
            .map(|p| {
                let at = header.iter().position(|h| h == p.name).unwrap();
                record[at].parse().unwrap()
            })
            .collect();
        if free
            .iter()
            .zip(&values)
            .all(|(p, &x)| x > p.lower && x < p.upper)
        {
            inside.push(values);
        } else {
            outside.push(i + 2);
        }
    }
    if outside.is_empty() {
        assert!(
            !notes.contains("rows of the population file left out"),
            "{notes}"
        );
    } else {
        assert!(
            notes.contains(&format!("{:?}", outside)),
            "expected lines {outside:?} left out: {notes}"
        );
    }
    // Every simulated participant's generating values are a row of the pilot.
    let mut reader = csv::Reader::from_path(out.join("plan_estimates.csv")).unwrap();
    let header = reader.headers().unwrap().clone();
    let column = |name: &str| header.iter().position(|h| h == name).unwrap();
    let mut by_participant: std::collections::BTreeMap<String, Vec<(String, f64)>> =
        Default::default();
    for record in reader.records() {
        let record = record.unwrap();
        by_participant
            .entry(record[column("participant")].to_string())
            .or_default()
            .push((
                record[column("parameter")].to_string(),
                record[column("true_value")].parse().unwrap(),
            ));
    }
    assert_eq!(by_participant.len(), 10);
    for (participant, values) in &by_participant {
        let tuple: Vec<f64> = free
            .iter()
            .map(|p| values.iter().find(|(n, _)| *n == p.name).unwrap().1)
            .collect();
        assert!(
            inside.iter().any(|row| row == &tuple),
            "{participant}: generating values {tuple:?} are not a row of the pilot"
        );
    }
}
