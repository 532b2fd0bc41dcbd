//! `valuedrift check`: the sampler against the closed-form expected response time, the type-7
//! quantile against its definition, self-consistency of the check on data simulated from known
//! parameters (and its failure at wrong ones), the per-option statistics (shares summing to 1,
//! quantiles of a hand-made example), and the command end to end with two and three options.

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use std::path::Path;
use std::process::Command;
use valuedrift::check::{
    CheckSettings, Factor, Key, Kind, Mode, Response, Statistic, SubjectCheck, check_subject,
    check_subjects, misfit, pooled, quantile_sorted, simulate_one_step_ahead,
};
use valuedrift::data::{Choice, Subject, Trial, TrialTable};
use valuedrift::likelihood::SubjectLikelihood;
use valuedrift::model::{Model, load_model};
use valuedrift::simulate::{SimulationSettings, orchard_design, simulate_subject};

/// learning_rate 0.3, effort_weight 1, value_scale 3, boundary 1.6, ndt 0.3 (delta-linear);
/// fixed parameters at their value; `boundary_factor` scales the boundary.
fn natural(model: &Model, boundary_factor: f64) -> Vec<f64> {
    model
        .parameters
        .iter()
        .map(|p| match p.name.as_str() {
            "learning_rate" => 0.3,
            "effort_weight" => 1.0,
            "value_scale" => 3.0,
            "boundary" => 1.6 * boundary_factor,
            "ndt" => 0.3,
            _ => p.fixed.unwrap(),
        })
        .collect()
}

fn orchard_subjects(model: &Model, n: usize, trials: usize, seed: u64) -> Vec<Subject> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    (0..n)
        .map(|i| {
            let design = orchard_design(&format!("s{i}"), "sim", trials, &mut rng);
            simulate_subject(
                model,
                &natural(model, 1.0),
                &design,
                SimulationSettings::default(),
                &mut rng,
            )
            .expect("the design suits the model")
        })
        .collect()
}

/// Law of large numbers: over many one-step-ahead replicates (the check's own code path: choice
/// stage → first-passage sampler), the mean simulated response time of a trial lies within 4
/// standard errors of the engine's closed-form expected response time (Grasman, Wagenmakers &
/// van der Maas 2009, plus ndt), for the trials with the smallest, a middle and the
/// largest |drift|; and the share of choices of a against the probability of the upper bound.
/// A 4-SE tolerance fails by chance with probability about 6e-5 per comparison.
#[test]
fn expected_response_time_matches_the_mean_of_simulated_trials() {
    let model = load_model("delta-linear").unwrap();
    let subject = &orchard_subjects(&model, 1, 40, 3)[0];
    let values = natural(&model, 1.0);
    let traces = SubjectLikelihood::new(&model, subject, None)
        .unwrap()
        .trace(&values);
    let mut rng = ChaCha8Rng::seed_from_u64(11);
    let n = 5000;
    let replicates: Vec<Subject> = (0..n)
        .map(|_| simulate_one_step_ahead(&model, &values, subject, &traces, (None, None), &mut rng))
        .collect();
    let mut order: Vec<usize> = (0..traces.len()).collect();
    order.sort_by(|&i, &j| {
        traces[i].signal[0]
            .abs()
            .total_cmp(&traces[j].signal[0].abs())
    });
    for &i in &[order[0], order[order.len() / 2], order[order.len() - 1]] {
        let expected = traces[i].expected_times.unwrap().1;
        let rts: Vec<f64> = replicates.iter().map(|r| r.trials[i].rt.unwrap()).collect();
        let mean = rts.iter().sum::<f64>() / n as f64;
        let sd = (rts.iter().map(|t| (t - mean).powi(2)).sum::<f64>() / (n as f64 - 1.0)).sqrt();
        let se = sd / (n as f64).sqrt();
        assert!(
            (mean - expected).abs() < 4.0 * se,
            "drift {}: simulated mean {mean} vs expected {expected} (SE {se})",
            traces[i].signal[0]
        );
        // Likewise the share of choices of a against the closed-form probability of the upper
        // bound, P = (1 − e^(−2vaw))/(1 − e^(−2va)) (Cox & Miller 1965), binomial SE.
        let p = traces[i].probabilities[0];
        let share = replicates
            .iter()
            .filter(|r| r.trials[i].choice == Some(valuedrift::data::Choice::A))
            .count() as f64
            / n as f64;
        let se = (p * (1.0 - p) / n as f64).sqrt().max(1e-4);
        assert!(
            (share - p).abs() < 4.0 * se,
            "drift {}: simulated share of a {share} vs P(a) {p} (SE {se})",
            traces[i].signal[0]
        );
    }
}

/// Hyndman & Fan (1996) type 7 (numpy's default "linear"), by hand from its definition
/// h = (n − 1)p, Q = x[⌊h⌋] + (h − ⌊h⌋)(x[⌊h⌋+1] − x[⌊h⌋]) (0-based) on x = 1, 2, 3, 4, 10:
/// p = 0.3: h = 1.2 → 2 + 0.2·1 = 2.2; p = 0.9: h = 3.6 → 4 + 0.6·6 = 7.6; p = 0.5: 3;
/// p = 0 and 1: the extremes; p = 0.025 on 1..=40 (h = 0.975): 1 + 0.975 = 1.975.
#[test]
fn quantiles_follow_hyndman_and_fan_type_7() {
    let x = [1.0, 2.0, 3.0, 4.0, 10.0];
    for (p, q) in [(0.3, 2.2), (0.9, 7.6), (0.5, 3.0), (0.0, 1.0), (1.0, 10.0)] {
        let got = quantile_sorted(&x, p).unwrap();
        assert!((got - q).abs() < 1e-12, "p = {p}: {got} vs {q}");
    }
    let forty: Vec<f64> = (1..=40).map(f64::from).collect();
    assert!((quantile_sorted(&forty, 0.025).unwrap() - 1.975).abs() < 1e-12);
    assert_eq!(quantile_sorted(&[5.0], 0.7), Some(5.0));
    assert_eq!(quantile_sorted(&[], 0.5), None);
    assert_eq!(quantile_sorted(&x, 1.5), None);
}

fn fraction_inside(checks: &[SubjectCheck]) -> (f64, usize) {
    let all: Vec<_> = checks.iter().flat_map(|c| c.statistics.clone()).collect();
    let m = misfit(&all);
    (1.0 - m.fraction_outside.unwrap(), m.n_statistics)
}

/// Self-consistency (the defining property of a predictive check, common practice): data
/// simulated from the model at known parameters, checked at those same parameters, fall inside
/// their own 95 % simulation bands at about the nominal rate (we ask ≥ 85 %; discrete
/// proportions and inclusive bands make coverage at or above 95 % on average), in both modes;
/// doubling the boundary makes the misfit clearly worse, so the check can fail.
#[test]
fn data_from_the_model_fall_inside_their_own_bands_and_wrong_parameters_do_not() {
    let model = load_model("delta-linear").unwrap();
    let subjects = orchard_subjects(&model, 4, 160, 5);
    let settings = CheckSettings {
        sims: 60,
        seed: 9,
        deadline: None,
        lock: None,
        condition: None,
    };
    let right = vec![natural(&model, 1.0); subjects.len()];
    let checks = check_subjects(&model, &right, &subjects, &settings, &|| {}).unwrap();
    assert!(checks.iter().all(|c| c.mode == Mode::Free));
    let (inside, n) = fraction_inside(&checks);
    assert!(n > 100, "only {n} statistics");
    assert!(inside >= 0.85, "free mode: {inside} of {n} inside");
    let right_z = misfit(
        &checks
            .iter()
            .flat_map(|c| c.statistics.clone())
            .collect::<Vec<_>>(),
    )
    .rms_z
    .unwrap();

    // Without potential outcomes the check conditions on the observed history.
    let observed_only: Vec<Subject> = subjects
        .iter()
        .map(|s| {
            let mut s = s.clone();
            for t in &mut s.trials {
                for o in &mut t.offers {
                    o.outcome_if = None;
                }
            }
            s
        })
        .collect();
    let ahead = check_subjects(&model, &right, &observed_only, &settings, &|| {}).unwrap();
    assert!(ahead.iter().all(|c| c.mode == Mode::OneStepAhead));
    let (inside_ahead, n_ahead) = fraction_inside(&ahead);
    assert!(
        inside_ahead >= 0.85,
        "one step ahead: {inside_ahead} of {n_ahead} inside"
    );

    let wrong = vec![natural(&model, 2.0); subjects.len()];
    let bad = check_subjects(&model, &wrong, &subjects, &settings, &|| {}).unwrap();
    let (inside_bad, _) = fraction_inside(&bad);
    let bad_z = misfit(
        &bad.iter()
            .flat_map(|c| c.statistics.clone())
            .collect::<Vec<_>>(),
    )
    .rms_z
    .unwrap();
    assert!(
        inside_bad < inside - 0.2 && bad_z > 2.0 * right_z,
        "boundary doubled: inside {inside_bad} (right {inside}), rms z {bad_z} (right {right_z})"
    );
    // Pooled statistics exist for both factors and average the subjects.
    let pooled = pooled(&checks);
    assert!(pooled.iter().any(|s| s.observed.is_some()));
}

/// Deterministic for a given seed whatever the thread count (the project's rule).
#[test]
fn results_do_not_depend_on_the_thread_count() {
    let model = load_model("delta-linear").unwrap();
    let subjects = orchard_subjects(&model, 3, 60, 2);
    let estimates = vec![natural(&model, 1.0); subjects.len()];
    let settings = CheckSettings {
        sims: 12,
        seed: 4,
        deadline: Some(2.5),
        lock: None,
        condition: None,
    };
    let run = |threads: usize| {
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap()
            .install(|| check_subjects(&model, &estimates, &subjects, &settings, &|| {}).unwrap())
    };
    assert_eq!(run(1), run(2));
}

// ---------------------------------------------------------------------------------------------
// End to end

fn binary() -> Command {
    Command::new(env!("CARGO_BIN_EXE_valuedrift"))
}

/// A trial table of `subjects` and a parameters.csv giving each of them `values` under the
/// model called `name`.
fn write_inputs(
    dir: &Path,
    model: &Model,
    subjects: Vec<Subject>,
    values: &[f64],
) -> (std::path::PathBuf, std::path::PathBuf) {
    let mut params = String::from("subject,group,model,parameter,estimate\n");
    for s in &subjects {
        for (p, x) in model.parameters.iter().zip(values) {
            params.push_str(&format!("{},sim,{},{},{x}\n", s.id, model.name, p.name));
        }
    }
    let fits = dir.join("fits");
    std::fs::create_dir(&fits).unwrap();
    std::fs::write(fits.join("parameters.csv"), params).unwrap();
    let table = TrialTable {
        subjects,
        present: Vec::new(),
    };
    let mut bytes = Vec::new();
    valuedrift::results::trials_table(&table)
        .write_csv(&mut bytes)
        .unwrap();
    let data = dir.join("trials.csv");
    std::fs::write(&data, bytes).unwrap();
    (fits, data)
}

/// Trial table of three simulated subjects and a parameters.csv at the generating values.
fn inputs(dir: &Path) -> (std::path::PathBuf, std::path::PathBuf) {
    let model = load_model("delta-linear").unwrap();
    let subjects = orchard_subjects(&model, 3, 60, 8);
    write_inputs(dir, &model, subjects, &natural(&model, 1.0))
}

fn check_with(model: &str, fits: &Path, data: &Path, out: &Path) -> std::process::Output {
    binary()
        .args(["check", "--model", model, "--sims", "15"])
        .arg("--fits")
        .arg(fits)
        .arg("--data")
        .arg(data)
        .arg("--out")
        .arg(out)
        .output()
        .unwrap()
}

fn check(fits: &Path, data: &Path, out: &Path) -> std::process::Output {
    check_with("delta-linear", fits, data, out)
}

/// The texts of an SVG file's `<text>` elements, trimmed.
fn svg_texts(path: &Path) -> Vec<String> {
    let svg = std::fs::read_to_string(path).unwrap();
    svg.split("<text")
        .skip(1)
        .filter_map(|t| {
            let body = &t[t.find('>')? + 1..];
            Some(body[..body.find("</text>")?].trim().to_string())
        })
        .collect()
}

/// The legend under every figure names the marks (common practice for a figure: every mark
/// explained), and figures of times name the quantile colours and the unit of time.
fn assert_legend(path: &Path, with_quantiles: bool) {
    let texts = svg_texts(path);
    for entry in [
        "observed",
        "predicted 95 % band (2.5–97.5 % of replicate datasets)",
        "predicted mean",
    ] {
        assert!(texts.iter().any(|t| t == entry), "{path:?}: no {entry:?}");
    }
    if with_quantiles {
        for entry in ["response-time quantile:", ".1", ".3", ".5", ".7", ".9"] {
            assert!(texts.iter().any(|t| t == entry), "{path:?}: no {entry:?}");
        }
        assert!(texts.iter().any(|t| t == "response time (s)"), "{path:?}");
    }
}

#[test]
fn check_writes_tables_and_figures_and_malformed_input_writes_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let (fits, data) = inputs(dir.path());
    let out = dir.path().join("out");
    let run = check(&fits, &data, &out);
    let stdout = String::from_utf8_lossy(&run.stdout);
    assert!(
        run.status.success(),
        "{}",
        String::from_utf8_lossy(&run.stderr)
    );
    assert!(
        stdout
            .trim_end()
            .ends_with(valuedrift::cli::RESEARCH_CAUTION)
    );
    for stem in ["check_choices", "check_quantiles", "check_misfit"] {
        for ext in ["csv", "parquet"] {
            assert!(out.join(format!("{stem}.{ext}")).is_file(), "{stem}.{ext}");
        }
    }
    for svg in [
        "check_choices.svg",
        "check_rt_quantiles.svg",
        "check_options.svg",
    ] {
        let text = std::fs::read_to_string(out.join(svg)).unwrap();
        assert!(text.contains("<svg") && text.contains("</svg>"), "{svg}");
        assert_legend(&out.join(svg), svg != "check_choices.svg");
    }
    // Effort bins are labelled by the effort they hold: each pooled effort bin's value in the
    // table (bin_low = bin_high, one bin per orchard effort level) is a tick label.
    let choices = std::fs::read_to_string(out.join("check_choices.csv")).unwrap();
    let header: Vec<&str> = choices.lines().next().unwrap().split(',').collect();
    let column = |name: &str| header.iter().position(|h| *h == name).unwrap();
    let ticks = svg_texts(&out.join("check_choices.svg"));
    let effort_bins: Vec<Vec<&str>> = choices
        .lines()
        .map(|l| l.split(',').collect::<Vec<_>>())
        .filter(|c| c[0] == "pooled" && c[column("factor")] == "effort_of_better_option")
        .collect();
    assert!(effort_bins.len() >= 2, "{choices}");
    for cells in &effort_bins {
        let (lo, hi) = (cells[column("bin_low")], cells[column("bin_high")]);
        assert_eq!(lo, hi, "one effort level per bin");
        let level: f64 = lo.parse().unwrap();
        assert!(
            ticks.iter().any(|t| t.parse::<f64>() == Ok(level)),
            "effort {level} not among the tick labels {ticks:?}"
        );
    }
    assert!(
        ticks
            .iter()
            .any(|t| t.starts_with("effort of the better option"))
    );
    // The shares of sides a and b, pooled, sum to 1 (arithmetic: every response chose a side).
    let shares: Vec<f64> = choices
        .lines()
        .map(|l| l.split(',').collect::<Vec<_>>())
        .filter(|c| c[0] == "pooled" && c[column("kind")] == "choice_share")
        .map(|c| c[column("observed")].parse().unwrap())
        .collect();
    assert_eq!(shares.len(), 2, "{choices}");
    assert!(
        (shares.iter().sum::<f64>() - 1.0).abs() < 1e-12,
        "{shares:?}"
    );
    let misfit = std::fs::read_to_string(out.join("check_misfit.csv")).unwrap();
    assert_eq!(misfit.lines().count(), 4, "{misfit}"); // header + 3 subjects
    // Figures of the worst-fitting subject (first row of the misfit table) name it.
    let worst = misfit.lines().nth(1).unwrap().split(',').next().unwrap();
    for svg in [
        "check_worst1_choices.svg",
        "check_worst1_rt_quantiles.svg",
        "check_worst1_options.svg",
    ] {
        let text = std::fs::read_to_string(out.join(svg)).unwrap();
        assert!(text.contains(&format!("subject {worst} ")), "{svg}");
    }
    let quantiles = std::fs::read_to_string(out.join("check_quantiles.csv")).unwrap();
    assert!(quantiles.lines().any(|l| l.starts_with("pooled,")));
    assert!(quantiles.lines().next().unwrap().contains("predicted_low"));

    // Fewer replicates than the fewest that give a band (MIN_REPLICATES = 10) are refused
    // before anything is simulated or written (common practice: a 95 % band needs replicates).
    let few = dir.path().join("few");
    let refused = binary()
        .args(["check", "--model", "delta-linear", "--sims", "5"])
        .arg("--fits")
        .arg(&fits)
        .arg("--data")
        .arg(&data)
        .arg("--out")
        .arg(&few)
        .output()
        .unwrap();
    assert!(!refused.status.success());
    assert!(String::from_utf8_lossy(&refused.stderr).contains("--sims 5"));
    assert!(!few.exists());

    // A malformed response time: the error names file, line and column; nothing is written.
    let text = std::fs::read_to_string(&data).unwrap();
    let header: Vec<&str> = text.lines().next().unwrap().split(',').collect();
    let rt = header.iter().position(|h| *h == "rt").unwrap();
    let mut lines: Vec<String> = text.lines().map(String::from).collect();
    let mut cells: Vec<String> = lines[3].split(',').map(String::from).collect();
    cells[rt] = "fast".into();
    lines[3] = cells.join(",");
    let bad = dir.path().join("bad.csv");
    std::fs::write(&bad, lines.join("\n") + "\n").unwrap();
    let bad_out = dir.path().join("bad_out");
    let run = check(&fits, &bad, &bad_out);
    let err = String::from_utf8_lossy(&run.stderr);
    assert!(!run.status.success());
    assert!(
        err.contains("bad.csv") && err.contains("line 4") && err.contains("rt"),
        "{err}"
    );
    assert!(!bad_out.exists() || std::fs::read_dir(&bad_out).unwrap().next().is_none());

    // Missing fits: named, nothing written.
    let run = check(&dir.path().join("nowhere"), &data, &bad_out);
    assert!(!run.status.success());
    assert!(String::from_utf8_lossy(&run.stderr).contains("parameters.csv"));
    assert!(!bad_out.exists() || std::fs::read_dir(&bad_out).unwrap().next().is_none());
}

// ---------------------------------------------------------------------------------------------
// Per-option statistics

fn three_arm_model() -> Model {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/models/three-arm-wald-race.toml");
    load_model(path.to_str().unwrap()).unwrap()
}

/// gain_rate 0.4, loss_rate 0.2, value_scale 2, drift_intercept 1, threshold 1.5, ndt 0.25.
fn race_values(model: &Model) -> Vec<f64> {
    model
        .parameters
        .iter()
        .map(|p| match p.name.as_str() {
            "gain_rate" => 0.4,
            "loss_rate" => 0.2,
            "value_scale" => 2.0,
            "drift_intercept" => 1.0,
            "threshold" => 1.5,
            "ndt" => 0.25,
            _ => p.fixed.unwrap(),
        })
        .collect()
}

/// A three-option learning design of `n` trials: arms paying 1 with probabilities 0.7, 0.5 and
/// 0.3, every arm offered on every trial, on sides that rotate from trial to trial (arm k on
/// side (k + i) mod 3) so that a side is not an arm; each offer with its would-be outcome.
fn three_option_design(id: &str, n: i64, rng: &mut ChaCha8Rng) -> Subject {
    use rand::RngExt;
    let trials = (0..n)
        .map(|i| Trial {
            trial: i + 1,
            run: String::new(),
            offers: (0..3)
                .map(|side| {
                    let arm = (side + 3 - (i % 3) as usize) % 3;
                    let p = [0.7, 0.5, 0.3][arm];
                    valuedrift::data::Offer {
                        option: arm,
                        effort: 0.0,
                        reward: None,
                        outcome_if: Some(f64::from(u8::from(rng.random::<f64>() < p))),
                    }
                })
                .collect(),
            choice: None,
            rt: None,
            outcome: None,
            onset: None,
            outcome_onset: None,
            covariates: Vec::new(),
        })
        .collect();
    Subject {
        id: id.into(),
        group: "sim".into(),
        options: vec!["arm1".into(), "arm2".into(), "arm3".into()],
        trials,
        covariates: std::sync::Arc::from([]),
    }
}

fn three_option_subjects(model: &Model, n: usize, trials: i64, seed: u64) -> Vec<Subject> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    (0..n)
        .map(|i| {
            let design = three_option_design(&format!("r{i}"), trials, &mut rng);
            let settings = SimulationSettings::default();
            simulate_subject(model, &race_values(model), &design, settings, &mut rng).unwrap()
        })
        .collect()
}

/// The choice shares of one dataset: observed (`None`) or replicate r.
fn shares_of(statistics: &[Statistic], replicate: Option<usize>) -> Vec<Option<f64>> {
    statistics
        .iter()
        .filter(|s| s.key.factor == Factor::Option && s.key.kind == Kind::ChoiceShare)
        .map(|s| match replicate {
            None => s.observed,
            Some(r) => s.replicates[r],
        })
        .collect()
}

/// Arithmetic: every response chose exactly one side, so the shares of the sides sum to 1 in
/// the observed dataset and in every replicate, for two options (diffusion) and for three
/// (Wiener race); pooled shares, means over subjects of vectors that sum to 1, sum to 1 too.
#[test]
fn choice_shares_of_every_dataset_sum_to_one() {
    let diffusion = load_model("delta-linear").unwrap();
    let race = three_arm_model();
    let cases = [
        (
            &diffusion,
            orchard_subjects(&diffusion, 2, 60, 21),
            natural(&diffusion, 1.0),
            2,
        ),
        (
            &race,
            three_option_subjects(&race, 2, 60, 22),
            race_values(&race),
            3,
        ),
    ];
    for (model, subjects, values, sides) in cases {
        let settings = CheckSettings {
            sims: 12,
            seed: 5,
            deadline: None,
            lock: None,
            condition: None,
        };
        let estimates = vec![values; subjects.len()];
        let checks = check_subjects(model, &estimates, &subjects, &settings, &|| {}).unwrap();
        let sum = |shares: Vec<Option<f64>>| {
            assert_eq!(shares.len(), sides, "{}: one share per side", model.name);
            shares.iter().map(|s| s.unwrap()).sum::<f64>()
        };
        for check in &checks {
            for replicate in std::iter::once(None).chain((0..settings.sims).map(Some)) {
                let total = sum(shares_of(&check.statistics, replicate));
                assert!(
                    (total - 1.0).abs() < 1e-12,
                    "{} {} replicate {replicate:?}: shares sum to {total}",
                    model.name,
                    check.subject
                );
            }
        }
        let pooled = pooled(&checks);
        for replicate in std::iter::once(None).chain((0..settings.sims).map(Some)) {
            let total = sum(shares_of(&pooled, replicate));
            assert!(
                (total - 1.0).abs() < 1e-12,
                "{} pooled: {total}",
                model.name
            );
        }
    }
}

/// Hyndman & Fan (1996) type 7, by hand from h = (n − 1)p, Q = x[⌊h⌋] + (h − ⌊h⌋)(x[⌊h⌋+1] −
/// x[⌊h⌋]) (0-based), on a hand-made three-option subject of 16 trials:
/// - side a chosen 6 times, times 0.9 0.5 1.2 0.7 2.0 0.6 → sorted 0.5 0.6 0.7 0.9 1.2 2.0,
///   h = 5p: Q(.1) = 0.5 + 0.5·0.1 = 0.55, Q(.3) = 0.6 + 0.5·0.1 = 0.65, Q(.5) = 0.7 + 0.5·0.2
///   = 0.8, Q(.7) = 0.9 + 0.5·0.3 = 1.05, Q(.9) = 1.2 + 0.5·0.8 = 1.6;
/// - side b chosen 5 times, times 1.4 0.8 3.0 1.0 1.1 → sorted 0.8 1.0 1.1 1.4 3.0, h = 4p:
///   Q(.1) = 0.8 + 0.4·0.2 = 0.88, Q(.3) = 1.0 + 0.2·0.1 = 1.02, Q(.5) = 1.1, Q(.7) = 1.1 +
///   0.8·0.3 = 1.34, Q(.9) = 1.4 + 0.6·1.6 = 2.36;
/// - side c chosen 4 times: fewer than the 5 times a quantile needs (MIN_RTS), so none;
/// - one trial without response, left out of the shares: 6/15, 5/15, 4/15.
#[test]
fn per_option_quantiles_are_type_7_quantiles_of_the_responses_choosing_each_side() {
    let model = three_arm_model();
    let mut rng = ChaCha8Rng::seed_from_u64(1);
    let mut subject = three_option_design("hand", 16, &mut rng);
    let responses: [(Option<usize>, f64); 16] = [
        (Some(0), 0.9),
        (Some(1), 1.4),
        (Some(2), 0.7),
        (Some(0), 0.5),
        (Some(1), 0.8),
        (None, 0.0),
        (Some(0), 1.2),
        (Some(2), 1.3),
        (Some(1), 3.0),
        (Some(0), 0.7),
        (Some(2), 0.9),
        (Some(1), 1.0),
        (Some(0), 2.0),
        (Some(2), 1.6),
        (Some(1), 1.1),
        (Some(0), 0.6),
    ];
    for (trial, (side, rt)) in subject.trials.iter_mut().zip(responses) {
        trial.choice = side.map(Choice);
        trial.rt = side.map(|_| rt);
        trial.outcome = trial.chosen().and_then(|o| o.outcome_if);
        for offer in &mut trial.offers {
            offer.outcome_if = None; // one step ahead: the observed history is kept
        }
    }
    let settings = CheckSettings {
        sims: 10,
        seed: 2,
        deadline: None,
        lock: None,
        condition: None,
    };
    let check = check_subject(&model, &race_values(&model), &subject, &settings, 0).unwrap();
    assert_eq!(check.mode, Mode::OneStepAhead);
    let find = |bin: usize, kind: Kind| {
        let key = Key {
            factor: Factor::Option,
            bin,
            kind,
        };
        check
            .statistics
            .iter()
            .find(|s| s.key == key)
            .unwrap_or_else(|| panic!("no statistic {key:?}"))
    };
    let quantile = |bin: usize, q: f64| {
        find(
            bin,
            Kind::RtQuantile {
                response: Response::All,
                quantile: q,
            },
        )
    };
    let expected = [[0.55, 0.65, 0.8, 1.05, 1.6], [0.88, 1.02, 1.1, 1.34, 2.36]];
    for (bin, values) in expected.iter().enumerate() {
        for (&q, &value) in valuedrift::check::RT_QUANTILES.iter().zip(values) {
            let s = quantile(bin, q);
            let got = s.observed.unwrap();
            assert!(
                (got - value).abs() < 1e-12,
                "side {bin} q {q}: {got} vs {value}"
            );
            assert_eq!(s.n_observed, [6, 5][bin]);
        }
    }
    for q in valuedrift::check::RT_QUANTILES {
        assert_eq!(quantile(2, q).observed, None);
        assert_eq!(quantile(2, q).n_observed, 4);
    }
    for (bin, k) in [6.0, 5.0, 4.0].into_iter().enumerate() {
        let share = find(bin, Kind::ChoiceShare);
        assert!((share.observed.unwrap() - k / 15.0).abs() < 1e-12);
        assert_eq!(share.n_observed, 15);
    }
}

/// The share of the last side is fixed by the others (shares sum to 1), so the misfit summary
/// counts the shares of every side but the last: two mirrored shares of a two-option task,
/// both outside their bands, count once (arithmetic).
#[test]
fn misfit_counts_the_shares_of_every_side_but_the_last() {
    let share = |bin: usize, observed: f64, replicates: Vec<f64>| Statistic {
        key: Key {
            factor: Factor::Option,
            bin,
            kind: Kind::ChoiceShare,
        },
        bin_range: None,
        n_observed: 100,
        observed: Some(observed),
        replicates: replicates.into_iter().map(Some).collect(),
    };
    let a: Vec<f64> = (0..20).map(|r| 0.5 + 0.001 * r as f64).collect();
    let b: Vec<f64> = a.iter().map(|x| 1.0 - x).collect();
    let m = misfit(&[share(0, 0.7, a), share(1, 0.3, b)]);
    assert_eq!(m.n_statistics, 1);
    assert_eq!(m.fraction_outside, Some(1.0));
}

/// End to end with three options and a racing accumulator per option: the check writes the
/// shares of sides a, b and c and the quantiles of the responses choosing each, and a figure of
/// them with its legend and the sides as tick labels.
#[test]
fn check_runs_end_to_end_with_a_three_option_race() {
    let dir = tempfile::tempdir().unwrap();
    let model = three_arm_model();
    let subjects = three_option_subjects(&model, 3, 90, 31);
    let (fits, data) = write_inputs(dir.path(), &model, subjects, &race_values(&model));
    let out = dir.path().join("out");
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/models/three-arm-wald-race.toml");
    let run = check_with(path.to_str().unwrap(), &fits, &data, &out);
    assert!(
        run.status.success(),
        "{}",
        String::from_utf8_lossy(&run.stderr)
    );
    let choices = std::fs::read_to_string(out.join("check_choices.csv")).unwrap();
    let header: Vec<&str> = choices.lines().next().unwrap().split(',').collect();
    let column = |name: &str| header.iter().position(|h| *h == name).unwrap();
    let sides: Vec<String> = choices
        .lines()
        .map(|l| l.split(',').collect::<Vec<_>>())
        .filter(|c| c[0] == "pooled" && c[column("kind")] == "choice_share")
        .map(|c| c[column("side")].to_string())
        .collect();
    assert_eq!(sides, ["a", "b", "c"]);
    let quantiles = std::fs::read_to_string(out.join("check_quantiles.csv")).unwrap();
    for side in ["a", "b", "c"] {
        let rows = quantiles
            .lines()
            .filter(|l| l.starts_with("pooled,") && l.contains(",option,"))
            .filter(|l| l.contains(&format!(",{side},")) && l.contains(",all,"))
            .count();
        assert_eq!(rows, 5, "side {side}: one row per quantile\n{quantiles}");
    }
    for stem in ["check_choices", "check_quantiles", "check_misfit"] {
        assert!(
            out.join(format!("{stem}.parquet")).is_file(),
            "{stem}.parquet"
        );
    }
    let figure = out.join("check_options.svg");
    assert_legend(&figure, true);
    let texts = svg_texts(&figure);
    for label in ["a", "b", "c", "option side chosen", "share of responses"] {
        assert!(
            texts.iter().any(|t| t == label),
            "no {label:?} in {texts:?}"
        );
    }
}
