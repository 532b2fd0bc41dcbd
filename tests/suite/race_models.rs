//! Racing accumulators (a Wiener race and the linear ballistic accumulator) and the
//! gaze-weighted drift: samplers against the closed-form distribution functions
//! (Kolmogorov–Smirnov), choice probabilities against the quadrature of the winner densities,
//! the gaze mapping against its published special case, gradients of the race likelihood with
//! a lock and a deadline against central differences, and recovery on a three-option learning
//! task.

use crate::common;

use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::path::Path;
use std::sync::Arc;
use valuedrift::data::{Choice, Subject, Trial};
use valuedrift::fit::{FitOptions, fit_subject};
use valuedrift::likelihood::SubjectLikelihood;
use valuedrift::model::{load_model, parse_model};
use valuedrift::race::{
    Accumulator, BallisticAccumulator, WaldAccumulator, ln_choice_probability, ln_never,
    ln_none_by, sample_race,
};
use valuedrift::simulate::{SimulationSettings, simulate_subject};

/// Critical value of the one-sample Kolmogorov–Smirnov statistic at α = 0.001 for large n:
/// K_{0.999} = 1.9495/√n (Kolmogorov's limiting distribution; Smirnov 1948 tables).
const KS_999: f64 = 1.9495;

/// The largest distance between the empirical distribution of `draws` and `cdf`.
fn ks_distance(mut draws: Vec<f64>, cdf: impl Fn(f64) -> f64) -> f64 {
    draws.sort_by(f64::total_cmp);
    let n = draws.len() as f64;
    draws
        .iter()
        .enumerate()
        .map(|(i, &t)| {
            let f = cdf(t);
            (f - i as f64 / n).abs().max((f - (i + 1) as f64 / n).abs())
        })
        .fold(0.0, f64::max)
}

/// Draws of a race checked against its closed forms: the decision time of the responses by
/// KS against (1 − S(t))/(1 − P(never)), where S(t) = Π_j S_j(t) (the race's
/// survival; Logan et al. 2014), and each option's share within 4 standard errors of P(k)
/// from the quadrature of its winner density.
fn check_sampler<A: Accumulator<f64>>(accumulator: &A, drifts: &[f64], seed: u64, what: &str) {
    const DRAWS: usize = 8_000;
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut times = Vec::with_capacity(DRAWS);
    let mut wins = vec![0usize; drifts.len()];
    while times.len() < DRAWS {
        if let Some((k, t)) = sample_race(accumulator, drifts, &mut rng) {
            times.push(t);
            wins[k] += 1;
        }
    }
    let never = ln_never(accumulator, drifts).exp();
    let d = ks_distance(times, |t| {
        (1.0 - ln_none_by(accumulator, drifts, t).exp()) / (1.0 - never)
    });
    assert!(
        d < KS_999 / (DRAWS as f64).sqrt(),
        "{what}: KS distance {d:.4} at drifts {drifts:?}"
    );
    for (k, &won) in wins.iter().enumerate() {
        let p = ln_choice_probability(accumulator, drifts, k, 0.0).exp() / (1.0 - never);
        let se = (p * (1.0 - p) / DRAWS as f64).sqrt();
        let share = won as f64 / DRAWS as f64;
        assert!(
            (share - p).abs() < 4.0 * se + 1e-12,
            "{what}: option {k} won {share:.4}, P = {p:.4} (se {se:.4}) at drifts {drifts:?}"
        );
    }
}

#[test]
fn race_samplers_follow_their_closed_forms() {
    for (i, (threshold, drifts)) in [
        (1.0, vec![1.5, 0.5]),
        (2.0, vec![0.8, 1.0, 1.2]),
        (0.6, vec![-0.5, 0.0, 2.0, 0.3]),
        (1.5, vec![-0.8, -0.3]),
    ]
    .into_iter()
    .enumerate()
    {
        check_sampler(
            &WaldAccumulator { threshold },
            &drifts,
            100 + i as u64,
            "Wiener race",
        );
    }
    for (i, (a, gap, s, drifts)) in [
        (0.5, 0.4, 1.0, vec![2.0, 1.0]),
        (1.0, 0.2, 0.7, vec![1.0, 1.2, 0.4]),
        (0.3, 1.0, 1.5, vec![-0.5, 0.5, 3.0, 0.0]),
        (2.0, 0.5, 1.0, vec![-0.5, -1.0]),
    ]
    .into_iter()
    .enumerate()
    {
        let accumulator = BallisticAccumulator {
            start_range: a,
            threshold_gap: gap,
            drift_sd: s,
        };
        check_sampler(&accumulator, &drifts, 200 + i as u64, "ballistic race");
    }
}

#[test]
fn choice_probabilities_and_never_arriving_sum_to_one() {
    // Σ_k P(k) + P(no accumulator ever arrives) = 1: the winner densities and the defective
    // mass partition the outcomes (Brown & Heathcote 2008, eq. 3; Logan et al. 2014).
    let wald = WaldAccumulator { threshold: 1.3 };
    let ballistic = BallisticAccumulator {
        start_range: 0.8,
        threshold_gap: 0.6,
        drift_sd: 1.1,
    };
    for drifts in [
        vec![1.0, 0.5],
        vec![2.0, -1.0, 0.3],
        vec![-0.4, -0.2, -0.9, -0.1],
        vec![0.0, 0.0, 0.0],
        vec![6.0, 5.5],
    ] {
        let total = |acc: &dyn Fn(usize) -> f64, never: f64| {
            (0..drifts.len()).map(acc).sum::<f64>() + never
        };
        let w = total(
            &|k| ln_choice_probability(&wald, &drifts, k, 0.0).exp(),
            ln_never(&wald, &drifts).exp(),
        );
        let b = total(
            &|k| ln_choice_probability(&ballistic, &drifts, k, 0.0).exp(),
            ln_never(&ballistic, &drifts).exp(),
        );
        // A Wiener accumulator at drift 0 arrives surely but its tail falls like t^−½, so a
        // race of zero drifts keeps mass beyond the quadrature's far end (1e12 times its
        // scale); the others are complete to rounding.
        let wald_tolerance = if drifts.iter().all(|&v| v <= 0.0) {
            1e-4
        } else {
            1e-11
        };
        assert!(
            (w - 1.0).abs() < wald_tolerance,
            "Wiener race {drifts:?}: {w}"
        );
        assert!((b - 1.0).abs() < 1e-11, "ballistic race {drifts:?}: {b}");
    }
}

/// A two-option trial with gaze shares in the columns gaze_a and gaze_b.
fn gaze_trial(n: i64, option_a: usize, effort: (f64, f64), gaze_a: f64, rt: f64) -> Trial {
    Trial {
        trial: n,
        run: String::new(),
        offers: vec![
            common::offer(option_a, effort.0),
            common::offer(1 - option_a, effort.1),
        ],
        choice: Some(if n % 2 == 0 { Choice::A } else { Choice::B }),
        rt: Some(rt),
        outcome: Some(f64::from(u8::from(n % 3 == 0))),
        onset: None,
        outcome_onset: None,
        covariates: vec![Some(format!("{gaze_a}")), Some(format!("{}", 1.0 - gaze_a))],
    }
}

fn gaze_subject() -> Subject {
    Subject {
        id: "g1".into(),
        group: String::new(),
        options: vec!["left".into(), "right".into()],
        trials: (0..12)
            .map(|i| {
                gaze_trial(
                    i,
                    (i % 2) as usize,
                    (0.2 + 0.05 * i as f64, 0.6 - 0.03 * i as f64),
                    0.3 + 0.04 * i as f64,
                    0.6 + 0.05 * i as f64,
                )
            })
            .collect(),
        covariates: Arc::from(["gaze_a".to_string(), "gaze_b".to_string()]),
    }
}

fn with_mapping(mapping: &str, extra: &str) -> String {
    format!(
        r#"
name = "gaze-test"
[learning]
rule = "delta"
[cost]
shape = "linear"
[drift]
mapping = "{mapping}"
[choice]
stage = "diffusion"
[parameters.learning_rate]
lower = 0.0
upper = 1.0
start = [0.1, 0.9]
[parameters.effort_weight]
lower = 0.0
upper = 5.0
start = [0.1, 4.0]
[parameters.value_scale]
lower = 0.0
upper = 20.0
start = [0.5, 10.0]
[parameters.boundary]
lower = 0.3
upper = 5.0
start = [0.5, 4.0]
[parameters.ndt]
lower = 0.0
upper = 0.5
start = [0.05, 0.4]
{extra}"#
    )
}

/// The gaze-weighted model with a free gaze_discount.
fn gaze_model() -> valuedrift::model::Model {
    parse_model(
        &with_mapping(
            "gaze-weighted",
            "[parameters.gaze_discount]\nlower = 0.0\nupper = 1.0\nstart = [0.1, 0.9]\n",
        ),
        "gaze.toml",
    )
    .unwrap()
}

#[test]
fn gaze_weighting_with_a_discount_of_one_is_the_linear_mapping() {
    // θ = 1: A_k = SV_k·(g_k + 1·(1 − g_k)) = SV_k, the plain linear drift (Thomas et al. 2019,
    // whose θ = 1 is "no gaze bias").
    let subject = gaze_subject();
    let linear = parse_model(&with_mapping("linear", ""), "linear.toml").unwrap();
    let gaze = parse_model(
        &with_mapping("gaze-weighted", "[parameters.gaze_discount]\nfixed = 1.0\n"),
        "gaze.toml",
    )
    .unwrap();
    let a = SubjectLikelihood::new(&linear, &subject, None).unwrap();
    let b = SubjectLikelihood::new(&gaze, &subject, None).unwrap();
    let theta = [0.2, -0.4, 0.1, 0.3, -0.5];
    let (ea, eb) = (a.evaluate(&theta), b.evaluate(&theta));
    assert_eq!(ea.ln_likelihood, eb.ln_likelihood);
    assert_eq!(ea.gradient, eb.gradient);
}

#[test]
fn gaze_weighted_drift_follows_the_hand_computation() {
    // Hand arithmetic of the fixation-share form (Thomas et al. 2019): values 0 (nothing
    // learned yet), so SV = −k·E; with k = 1, E = (0.2, 0.6), g_a = 0.3, θ = 0.5, scale 2:
    // A_a = −0.2·(0.3 + 0.5·0.7) = −0.13, A_b = −0.6·(0.7 + 0.5·0.3) = −0.51,
    // drift = 2·(−0.13 + 0.51) = 0.76.
    let subject = Subject {
        trials: vec![gaze_trial(0, 0, (0.2, 0.6), 0.3, 0.9)],
        ..gaze_subject()
    };
    let model = gaze_model();
    let lik = SubjectLikelihood::new(&model, &subject, None).unwrap();
    let natural: Vec<f64> = model
        .parameters
        .iter()
        .map(|p| match p.name.as_str() {
            "learning_rate" => 0.3,
            "effort_weight" => 1.0,
            "value_scale" => 2.0,
            "boundary" => 1.5,
            "ndt" => 0.2,
            "gaze_discount" => 0.5,
            _ => p.fixed.unwrap(),
        })
        .collect();
    let trace = lik.trace(&natural);
    assert!(
        (trace[0].signal[0] - 0.76).abs() < 1e-15,
        "{:?}",
        trace[0].signal
    );
    let theta = vec![0.1; lik.n_free()];
    common::assert_gradient(&lik, &theta, "gaze-weighted drift");
}

#[test]
fn gaze_shares_outside_zero_to_one_are_named() {
    let mut subject = gaze_subject();
    subject.trials[3].covariates[0] = Some("1.4".into());
    let model = gaze_model();
    let message = SubjectLikelihood::new(&model, &subject, None)
        .err()
        .expect("a share of 1.4 is refused")
        .to_string();
    assert!(
        message.contains("trial 3") && message.contains("gaze_a") && message.contains("0 to 1"),
        "{message}"
    );
}

/// A three-arm learning design: every arm on every trial in a shuffled order, arms paying 1
/// with probabilities 0.8, 0.5 and 0.2, reversed halfway.
fn three_arm_subject(id: &str, n_trials: i64, rng: &mut ChaCha8Rng) -> Subject {
    let trials = (0..n_trials)
        .map(|i| {
            let mut arms = [0usize, 1, 2];
            for k in (1..3).rev() {
                arms.swap(k, rng.random_range(0..=k));
            }
            let offers = arms
                .iter()
                .map(|&arm| {
                    let p = [0.8, 0.5, 0.2][arm];
                    let p = if i < n_trials / 2 { p } else { 1.0 - p };
                    valuedrift::data::Offer {
                        outcome_if: Some(f64::from(u8::from(rng.random::<f64>() < p))),
                        ..common::offer(arm, 0.0)
                    }
                })
                .collect();
            Trial {
                trial: i + 1,
                run: String::new(),
                offers,
                choice: None,
                rt: None,
                outcome: None,
                onset: None,
                outcome_onset: None,
                covariates: Vec::new(),
            }
        })
        .collect();
    Subject {
        id: id.into(),
        group: String::new(),
        options: vec!["arm1".into(), "arm2".into(), "arm3".into()],
        trials,
        covariates: Arc::from([]),
    }
}

#[test]
fn race_gradients_with_a_lock_a_deadline_and_trimmed_times_match_central_differences() {
    let mut rng = ChaCha8Rng::seed_from_u64(41);
    for name in ["gainloss-wald-race", "gainloss-ballistic-race"] {
        let model = load_model(name).unwrap();
        let design = three_arm_subject("s", 40, &mut rng);
        let values: Vec<f64> = model
            .parameters
            .iter()
            .map(|p| match p.name.as_str() {
                "gain_rate" => 0.4,
                "loss_rate" => 0.2,
                "effort_weight" => 0.5,
                "value_scale" => 2.0,
                "drift_intercept" => 1.0,
                "threshold" => 1.5,
                "start_range" => 0.6,
                "threshold_gap" => 0.5,
                "ndt" => 0.25,
                _ => p.fixed.unwrap(),
            })
            .collect();
        let settings = SimulationSettings {
            deadline: Some(0.9),
            ..SimulationSettings::default()
        };
        let mut data = simulate_subject(&model, &values, &design, settings, &mut rng).unwrap();
        // Trim the time of a few responses (scored by choice alone).
        for t in data.trials.iter_mut().step_by(7) {
            t.rt = None;
        }
        let missing = data.trials.iter().filter(|t| t.choice.is_none()).count();
        assert!(missing > 0, "{name}: the deadline removed no response");
        let lik = SubjectLikelihood::new(&model, &data, Some(0.9)).unwrap();
        let theta: Vec<f64> = (0..lik.n_free()).map(|j| 0.2 - 0.1 * j as f64).collect();
        common::assert_gradient(&lik, &theta, &format!("{name} with a deadline"));
        let locked = lik.clone().with_lock(Some(0.4));
        common::assert_gradient(&locked, &theta, &format!("{name} with a lock"));
    }
}

/// Generating values drawn uniformly per parameter (ranges chosen as a plausible three-arm
/// cohort, common practice for recovery studies), in the model's parameter order.
fn race_truth(model: &valuedrift::model::Model, rng: &mut ChaCha8Rng) -> Vec<f64> {
    model
        .parameters
        .iter()
        .map(|p| match p.name.as_str() {
            "gain_rate" | "loss_rate" => rng.random_range(0.1..0.7),
            "value_scale" => rng.random_range(1.0..4.0),
            "drift_intercept" => rng.random_range(0.5..1.5),
            "threshold" => rng.random_range(1.0..2.0),
            "start_range" => rng.random_range(0.3..1.0),
            "threshold_gap" => rng.random_range(0.2..0.8),
            "ndt" => rng.random_range(0.2..0.4),
            _ => p.fixed.expect("a fixed parameter"),
        })
        .collect()
}

fn test_model(name: &str) -> valuedrift::model::Model {
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/models")
        .join(format!("{name}.toml"));
    load_model(path.to_str().unwrap()).unwrap()
}

/// Simulates `n` subjects of the three-arm task from `model` (sequentially, one generator, so
/// the data do not depend on the thread count), returning generating values and data.
fn simulate_three_arm(
    model: &valuedrift::model::Model,
    n: usize,
    trials: i64,
    rng: &mut ChaCha8Rng,
) -> Vec<(Vec<f64>, Subject)> {
    (0..n)
        .map(|s| {
            let design = three_arm_subject(&format!("s{s}"), trials, rng);
            let values = race_truth(model, rng);
            let data =
                simulate_subject(model, &values, &design, SimulationSettings::default(), rng)
                    .unwrap();
            (values, data)
        })
        .collect()
}

#[test]
fn a_three_option_wiener_race_is_recovered() {
    // 30 subjects × 300 trials of a three-arm learning task (arms paying 1 with probabilities
    // 0.8, 0.5, 0.2, reversed halfway). Target (the issue's; common practice for recovery
    // studies): r ≥ 0.85 for both learning rates and the value scale.
    use rayon::prelude::*;
    let wald = test_model("three-arm-wald-race");
    let mut rng = ChaCha8Rng::seed_from_u64(2026);
    let cohort = simulate_three_arm(&wald, 30, 300, &mut rng);
    let options = FitOptions {
        starts: 4,
        ..FitOptions::default()
    };
    let estimates: Vec<Vec<f64>> = cohort
        .par_iter()
        .map(|(_, data)| {
            let fit = fit_subject(
                &SubjectLikelihood::new(&wald, data, None).unwrap(),
                &options,
            );
            fit.estimates.iter().map(|e| e.estimate).collect()
        })
        .collect();
    for (k, name) in ["gain_rate", "loss_rate", "value_scale"].iter().enumerate() {
        let t: Vec<f64> = cohort.iter().map(|(v, _)| v[k]).collect();
        let e: Vec<f64> = estimates.iter().map(|v| v[k]).collect();
        let r = common::pearson(&t, &e);
        println!("three-arm Wiener race: {name}: r = {r:.3}");
        assert!(r >= 0.85, "{name}: r = {r:.3}");
    }
}

#[test]
#[ignore = "about 3 minutes on 2 cores; run with `cargo test --release --test suite told_apart -- --ignored --nocapture`"]
fn the_wiener_race_and_the_ballistic_race_are_told_apart() {
    // Model recovery: 10 subjects × 300 trials of the three-arm task from each race, each data
    // set fitted with both. Asserted: data from the Wiener race are attributed to it by BIC for
    // most subjects (common practice for model-recovery studies). Printed, not asserted: the
    // same for data from the ballistic race, which measured 5 of 10 here (the ballistic race
    // with one more free parameter mimics the Wiener race on these data; README).
    use rayon::prelude::*;
    let wald = test_model("three-arm-wald-race");
    let ballistic = test_model("three-arm-ballistic-race");
    let mut rng = ChaCha8Rng::seed_from_u64(2027);
    let options = FitOptions {
        starts: 3,
        ..FitOptions::default()
    };
    let mut wins = [[0usize; 2]; 2];
    for (g, generating) in [&wald, &ballistic].into_iter().enumerate() {
        let cohort = simulate_three_arm(generating, 10, 300, &mut rng);
        let winners: Vec<usize> = cohort
            .par_iter()
            .map(|(_, data)| {
                let bic = |m: &valuedrift::model::Model| {
                    fit_subject(&SubjectLikelihood::new(m, data, None).unwrap(), &options).bic
                };
                usize::from(bic(&ballistic) < bic(&wald))
            })
            .collect();
        for w in winners {
            wins[g][w] += 1;
        }
    }
    println!(
        "model recovery by BIC (rows: data from the Wiener race, the ballistic race; columns: winner): {wins:?}"
    );
    assert!(wins[0][0] > wins[0][1], "Wiener race data: {:?}", wins[0]);
}

#[test]
fn race_latents_give_every_option_its_drift() {
    // The linear mapping per accumulator, v_k = drift_intercept + value_scale·SV_k (the
    // stage's equation), exported as drift_a, drift_b, drift_c; `drift` (the two-bound
    // diffusion's single drift) stays empty.
    let wald = test_model("three-arm-wald-race");
    let mut rng = ChaCha8Rng::seed_from_u64(5);
    let (values, data) = simulate_three_arm(&wald, 1, 40, &mut rng).remove(0);
    let rows = valuedrift::exports::latents(&wald, &data, &values).unwrap();
    let at = |name: &str| {
        let k = wald.parameters.iter().position(|p| p.name == name).unwrap();
        values[k]
    };
    for row in &rows {
        assert_eq!(row.option_drifts.len(), 3);
        assert!(row.drift.is_none());
        for (k, drift) in row.option_drifts.iter().enumerate() {
            let expected = at("drift_intercept") + at("value_scale") * row.subjective_values[k];
            assert!((drift - expected).abs() < 1e-12, "{drift} vs {expected}");
        }
    }
    let table = valuedrift::exports::latents_table(&rows, &[]);
    for side in ["a", "b", "c"] {
        let name = format!("drift_{side}");
        assert!(
            table.columns.iter().any(|(n, _)| *n == name),
            "no column {name}"
        );
    }
}

#[test]
fn a_race_runs_through_fit_check_and_export_on_three_option_data() {
    // The command line end to end on a three-option table written by the crate's table writer
    // (common practice: every command accepts what the others write).
    let wald = test_model("three-arm-wald-race");
    let mut rng = ChaCha8Rng::seed_from_u64(11);
    let subjects: Vec<Subject> = simulate_three_arm(&wald, 4, 120, &mut rng)
        .into_iter()
        .map(|(_, s)| s)
        .collect();
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("three_arms.csv");
    let table = valuedrift::data::TrialTable {
        subjects,
        present: vec!["option_a".into(), "option_b".into(), "outcome".into()],
    };
    let mut file = std::fs::File::create(&data).unwrap();
    valuedrift::results::trials_table(&table)
        .write_csv(&mut file)
        .unwrap();
    let model = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/models/three-arm-wald-race.toml");
    let fits = dir.path().join("fits");
    common::succeed(
        common::bin()
            .args(["fit", "--starts", "3", "--data"])
            .arg(&data)
            .arg("--model")
            .arg(&model)
            .arg("--out")
            .arg(&fits),
    );
    let checked = dir.path().join("check");
    common::succeed(
        common::bin()
            .args(["check", "--sims", "20", "--fits"])
            .arg(&fits)
            .arg("--data")
            .arg(&data)
            .arg("--model")
            .arg(&model)
            .arg("--out")
            .arg(&checked),
    );
    let exported = dir.path().join("export");
    common::succeed(
        common::bin()
            .args(["export", "--fits"])
            .arg(&fits)
            .arg("--data")
            .arg(&data)
            .arg("--model")
            .arg(&model)
            .arg("--out")
            .arg(&exported),
    );
    let latents = common::contents(&exported)
        .into_iter()
        .find(|(p, _)| p.to_string_lossy().ends_with("latents.csv"))
        .map(|(_, bytes)| String::from_utf8(bytes).unwrap())
        .expect("a latents.csv");
    let header = latents.lines().next().unwrap();
    for side in ["a", "b", "c"] {
        assert!(header.contains(&format!("drift_{side}")), "{header}");
    }
    let statistics = common::contents(&checked);
    assert!(
        statistics
            .keys()
            .any(|p| p.to_string_lossy().ends_with(".csv")),
        "check wrote no table: {:?}",
        statistics.keys().collect::<Vec<_>>()
    );
}
