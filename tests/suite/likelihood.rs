//! The per-subject likelihood against hand computation and against the first-passage engine.

use crate::common;

use valuedrift::data::{Choice, Subject, Trial};
use valuedrift::first_passage::{Bound, DiffusionParams, ln_density};
use valuedrift::likelihood::SubjectLikelihood;
use valuedrift::model::load_model;

fn trial(
    n: i64,
    a: usize,
    b: usize,
    effort: (f64, f64),
    choice: Choice,
    rt: f64,
    outcome: Option<f64>,
) -> Trial {
    Trial {
        trial: n,
        run: String::new(),
        offers: vec![common::offer(a, effort.0), common::offer(b, effort.1)],
        choice: Some(choice),
        rt: Some(rt),
        outcome,
        onset: None,
        outcome_onset: None,
        covariates: Vec::new(),
    }
}

/// Five trials over options x (0), y (1) and z (2).
fn worked_subject() -> Subject {
    Subject {
        id: "w1".into(),
        group: "g".into(),
        options: vec!["x".into(), "y".into(), "z".into()],
        trials: vec![
            trial(1, 0, 1, (0.2, 0.6), Choice::A, 0.61, Some(1.0)),
            trial(2, 0, 1, (0.4, 0.4), Choice::B, 0.93, Some(0.0)),
            trial(3, 1, 2, (0.8, 0.2), Choice::A, 0.72, Some(1.0)),
            trial(4, 0, 2, (0.6, 0.2), Choice::A, 0.55, None),
            trial(5, 2, 0, (0.2, 0.4), Choice::B, 1.20, Some(0.0)),
        ],
        covariates: std::sync::Arc::from([]),
    }
}

/// Natural values in the model's parameter order for gain 0.5, loss 0.2, k 0.5, scale 3,
/// boundary 1.5, ndt 0.3 (fixed start 0.5, initial value 0).
fn natural(model: &valuedrift::model::Model) -> Vec<f64> {
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

#[test]
fn learning_recursion_matches_a_hand_computed_example() {
    // Hand computation (arithmetic below) of the gain/loss delta rule of the reference model:
    // d = r − Q(s); Q(s) += (gain if d > 0 else loss)·d; values used for a choice are those
    // before its outcome; no outcome, no update.
    // t1: Q = (x 0, y 0, z 0); chose x, r = 1: d = 1 → Q(x) = 0 + 0.5·1 = 0.5
    // t2: offer x (0.5) vs y (0); chose y, r = 0: d = 0 → Q(y) stays 0
    // t3: offer y (0) vs z (0); chose y, r = 1: d = 1 → Q(y) = 0.5
    // t4: offer x (0.5) vs z (0); chose x, no outcome: no update
    // t5: offer z (0) vs x (0.5); chose x (b), r = 0: d = −0.5 → Q(x) = 0.5 − 0.2·0.5 = 0.4
    let model = load_model("gainloss-linear").unwrap();
    let subject = worked_subject();
    let lik = SubjectLikelihood::new(&model, &subject, None).unwrap();
    let trace = lik.trace(&natural(&model));
    let values: Vec<(f64, f64)> = trace.iter().map(|t| (t.values[0], t.values[1])).collect();
    assert_eq!(
        values,
        vec![(0.0, 0.0), (0.5, 0.0), (0.0, 0.0), (0.5, 0.0), (0.0, 0.5)]
    );
    let errors: Vec<Option<f64>> = trace.iter().map(|t| t.prediction_error).collect();
    assert_eq!(
        errors,
        vec![Some(1.0), Some(0.0), Some(1.0), None, Some(-0.5)]
    );
    // SV = Q − k·E with k = 0.5: trial 2, SV_a = 0.5 − 0.2 = 0.3, SV_b = 0 − 0.2 = −0.2.
    assert!((trace[1].subjective_values[0] - 0.3).abs() < 1e-15);
    assert!((trace[1].subjective_values[1] + 0.2).abs() < 1e-15);
    // drift = 3·(0.3 − (−0.2)) = 1.5
    assert!((trace[1].signal[0] - 1.5).abs() < 1e-14);
}

#[test]
fn log_likelihood_is_the_sum_of_engine_log_densities() {
    // ln L = Σ ln f(rt, bound | drift = scale·ΔSV, boundary, start 0.5, ndt), choosing a at the
    // upper bound (the model's definition), computed here trial by trial with the engine.
    let model = load_model("gainloss-linear").unwrap();
    let subject = worked_subject();
    let lik = SubjectLikelihood::new(&model, &subject, None).unwrap();
    let values = natural(&model);
    let trace = lik.trace(&values);
    let mut expected = 0.0;
    for (t, tr) in subject.trials.iter().zip(&trace) {
        let drift = 3.0 * (tr.subjective_values[0] - tr.subjective_values[1]);
        let p = DiffusionParams::new(drift, 1.5, 0.5, 0.3).unwrap();
        let bound = if t.choice == Some(Choice::A) {
            Bound::Upper
        } else {
            Bound::Lower
        };
        expected += ln_density(t.rt.unwrap(), bound, &p);
    }
    let free: Vec<f64> = model.free_slots().iter().map(|&s| values[s]).collect();
    let theta = lik.unconstrained(&free);
    let got = lik.evaluate(&theta).ln_likelihood;
    assert!((got - expected).abs() < 1e-10, "{got} vs {expected}");
}

/// `subject` with offered magnitudes on every trial, so that every built-in model applies.
fn with_rewards(mut s: Subject) -> Subject {
    for (i, t) in s.trials.iter_mut().enumerate() {
        t.offers[0].reward = Some(0.2 * i as f64);
        t.offers[1].reward = Some(0.5);
    }
    s
}

/// Central differences, step 1e-6 (common practice), against the forward-mode gradient of every
/// built-in model at θ_j = offset − slope·j. The leaky model is left to
/// numerical_passage.rs: these θ give drifts of ±50 to ±80, where its per-drift solves are far
/// outside their stated accuracy (densities below e^-200, not resolved by the grid).
fn assert_gradient_matches_central_differences(subject: &Subject, offset: f64, slope: f64) {
    for model in valuedrift::model::built_in_models() {
        if model.name == "gainloss-leaky" {
            continue;
        }
        let lik = SubjectLikelihood::new(&model, subject, None).unwrap();
        let theta: Vec<f64> = (0..lik.n_free())
            .map(|j| offset - slope * j as f64)
            .collect();
        let e = lik.evaluate(&theta);
        for j in 0..theta.len() {
            let h = 1e-6;
            let mut up = theta.clone();
            let mut down = theta.clone();
            up[j] += h;
            down[j] -= h;
            let numeric =
                (lik.evaluate(&up).ln_likelihood - lik.evaluate(&down).ln_likelihood) / (2.0 * h);
            assert!(
                (numeric - e.gradient[j]).abs() < 1e-5 * numeric.abs().max(1.0),
                "{} parameter {j}: analytic {} numeric {numeric}",
                model.name,
                e.gradient[j]
            );
        }
    }
}

#[test]
fn gradient_matches_central_differences_for_every_built_in_model() {
    assert_gradient_matches_central_differences(&with_rewards(worked_subject()), 0.3, 0.17);
}

#[test]
fn forgetting_and_a_free_initial_value_follow_the_hand_computation() {
    // One learning rate α = 0.5, forgetting φ = 0.2 towards initial value Q0 = 0.1 (hand
    // arithmetic): start Q = (0.1, 0.1, 0.1)
    // t1 chose x, r = 1: Q(x) = 0.1 + 0.5·0.9 = 0.55; y, z: 0.1 + 0.2·(0.1 − 0.1) = 0.1
    // t2 chose y, r = 0: Q(y) = 0.1 − 0.5·0.1 = 0.05; x: 0.55 + 0.2·(0.1 − 0.55) = 0.46
    // t3 offers y (0.05) and z (0.1).
    let text = r#"
name = "delta-forgetting"
[learning]
rule = "delta"
forgetting = true
[cost]
shape = "none"
[drift]
mapping = "linear"
[choice]
stage = "diffusion"
[parameters.learning_rate]
fixed = 0.5
[parameters.forget_rate]
fixed = 0.2
[parameters.initial_value]
lower = -1.0
upper = 1.0
start = [0.0, 0.2]
[parameters.value_scale]
fixed = 3.0
[parameters.boundary]
fixed = 1.5
[parameters.ndt]
fixed = 0.3
"#;
    let model = valuedrift::model::parse_model(text, "inline").unwrap();
    let subject = worked_subject();
    let lik = SubjectLikelihood::new(&model, &subject, None).unwrap();
    let natural: Vec<f64> = model
        .parameters
        .iter()
        .map(|p| {
            if p.name == "initial_value" {
                0.1
            } else {
                p.fixed.unwrap()
            }
        })
        .collect();
    let trace = lik.trace(&natural);
    let close = |a: f64, b: f64| (a - b).abs() < 1e-12;
    assert!(close(trace[0].values[0], 0.1) && close(trace[0].values[1], 0.1));
    assert!(close(trace[1].values[0], 0.55) && close(trace[1].values[1], 0.1));
    assert!(
        close(trace[2].values[0], 0.05) && close(trace[2].values[1], 0.1),
        "{:?}",
        trace[2]
    );
    assert!(
        close(trace[3].values[0], 0.46 + 0.2 * (0.1 - 0.46)),
        "x decays again on t3: {:?}",
        trace[3]
    );
    // The free initial value gets an exact gradient too (central differences, common practice).
    let theta = lik.unconstrained(&[0.1]);
    let e = lik.evaluate(&theta);
    let h = 1e-6;
    let numeric = (lik.evaluate(&[theta[0] + h]).ln_likelihood
        - lik.evaluate(&[theta[0] - h]).ln_likelihood)
        / (2.0 * h);
    assert!((numeric - e.gradient[0]).abs() < 1e-5 * numeric.abs().max(1.0));
}

/// The worked subject with the times of trials 2 and 5 set aside (as trimming does).
fn trimmed_subject() -> Subject {
    let mut s = worked_subject();
    s.trials[1].rt = None;
    s.trials[4].rt = None;
    s
}

#[test]
fn a_trimmed_time_leaves_the_choice_scored_by_the_absorption_probability() {
    // A choice without its time counts as ln P(bound) (Feller 1968: the absorption probability
    // (1 − e^(−2vaw)) / (1 − e^(−2va)) at the upper bound); the trial's time does not count; its
    // outcome still updates the values (the participant saw it), so every later trial's values
    // equal those of the untrimmed subject. P is recomputed here with the closed form, apart from
    // the engine's code path used by the likelihood.
    let model = load_model("gainloss-linear").unwrap();
    let full = worked_subject();
    let trimmed = trimmed_subject();
    let values = natural(&model);
    let trace_full = SubjectLikelihood::new(&model, &full, None)
        .unwrap()
        .trace(&values);
    let lik = SubjectLikelihood::new(&model, &trimmed, None).unwrap();
    let trace = lik.trace(&values);
    let mut expected = 0.0;
    for ((t, tr), tr_full) in trimmed.trials.iter().zip(&trace).zip(&trace_full) {
        assert_eq!(
            tr.values[0], tr_full.values[0],
            "trial {}: learning unchanged",
            t.trial
        );
        assert_eq!(
            tr.values[1], tr_full.values[1],
            "trial {}: learning unchanged",
            t.trial
        );
        let drift = 3.0 * (tr.subjective_values[0] - tr.subjective_values[1]);
        let (a, w) = (1.5, 0.5);
        let p_upper = (1.0 - (-2.0 * drift * a * w).exp()) / (1.0 - (-2.0 * drift * a).exp());
        let bound = if t.choice == Some(Choice::A) {
            Bound::Upper
        } else {
            Bound::Lower
        };
        let ln_trial = match (t.rt, bound) {
            (Some(rt), _) => {
                ln_density(rt, bound, &DiffusionParams::new(drift, a, w, 0.3).unwrap())
            }
            (None, Bound::Upper) => p_upper.ln(),
            (None, Bound::Lower) => (1.0 - p_upper).ln(),
        };
        let got = tr.ln_likelihood.expect("every response counts");
        assert!(
            (got - ln_trial).abs() < 1e-10,
            "trial {}: {got} vs {ln_trial}",
            t.trial
        );
        expected += ln_trial;
    }
    let free: Vec<f64> = model.free_slots().iter().map(|&s| values[s]).collect();
    let got = lik.evaluate(&lik.unconstrained(&free)).ln_likelihood;
    assert!((got - expected).abs() < 1e-10, "{got} vs {expected}");
}

#[test]
fn gradient_with_trimmed_times_matches_central_differences() {
    // As for the timed trials: the gradient through the absorption probability's analytic
    // derivatives, for every built-in model (lapse-free and otherwise).
    assert_gradient_matches_central_differences(&with_rewards(trimmed_subject()), 0.25, 0.15);
}

#[test]
fn a_subject_whose_every_time_was_trimmed_is_refused_by_time_models_only() {
    // With no time left, a model of response times has nothing to bound its non-decision time
    // by; a choices-only model still fits the choices.
    let mut subject = worked_subject();
    for t in &mut subject.trials {
        t.rt = None;
    }
    let timed = load_model("gainloss-linear").unwrap();
    let err = SubjectLikelihood::new(&timed, &subject, None)
        .err()
        .expect("refused");
    assert!(err.message.contains("none of the 5 responses"), "{err}");
    let choices = load_model("gainloss-linear-choices").unwrap();
    assert!(SubjectLikelihood::new(&choices, &subject, None).is_ok());
}
