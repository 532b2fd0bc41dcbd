//! Fitting behaviour that researchers rely on: the same results on any number of threads, priors
//! acting as priors, deadlines entering the likelihood.

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use valuedrift::data::TrialTable;
use valuedrift::fit::{FitOptions, fit_table};
use valuedrift::likelihood::SubjectLikelihood;
use valuedrift::model::{load_model, parse_model};
use valuedrift::simulate::{SimulationSettings, orchard_design, simulate_subject};

fn simulated_table(n_subjects: usize, n_trials: usize, deadline: Option<f64>) -> TrialTable {
    let model = load_model("gainloss-linear").unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(99);
    let values: Vec<f64> = model
        .parameters
        .iter()
        .map(|p| match p.name.as_str() {
            "gain_rate" => 0.4,
            "loss_rate" => 0.3,
            "effort_weight" => 0.8,
            "value_scale" => 4.0,
            "boundary" => 1.6,
            "ndt" => 0.3,
            _ => p.fixed.unwrap(),
        })
        .collect();
    let settings = SimulationSettings {
        deadline,
        ..SimulationSettings::default()
    };
    let subjects = (0..n_subjects)
        .map(|i| {
            let design = orchard_design(&format!("d{i}"), "g", n_trials, &mut rng);
            simulate_subject(&model, &values, &design, settings, &mut rng)
                .expect("the design suits the model")
        })
        .collect();
    TrialTable {
        subjects,
        present: vec!["group".into(), "option_a".into(), "outcome".into()],
    }
}

#[test]
fn results_do_not_depend_on_the_number_of_threads() {
    // Determinism for a given seed regardless of scheduling (the project's stated guarantee).
    let table = simulated_table(6, 120, None);
    let models = vec![
        load_model("gainloss-linear").unwrap(),
        load_model("delta-linear").unwrap(),
    ];
    let options = FitOptions {
        starts: 3,
        ..FitOptions::default()
    };
    let (one, _) = fit_table(&models, &table, &options, 1, &|| {}).unwrap();
    let (two, _) = fit_table(&models, &table, &options, 2, &|| {}).unwrap();
    assert_eq!(one.len(), 12);
    assert_eq!(one, two);
}

#[test]
fn a_strong_prior_dominates_the_estimate() {
    // With a normal prior of sd 0.005 the MAP estimate stays within a few prior sds of its mean
    // (the posterior mode of a nearly degenerate prior; common practice).
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/models/gainloss-linear.toml"
    ))
    .unwrap()
    .replace(
        "description = \"boundary separation (decision caution), unit noise\"",
        "description = \"boundary\"\nprior = { family = \"normal\", mean = 2.5, sd = 0.005 }",
    );
    let model = parse_model(&text, "test-prior.toml").unwrap();
    assert!(model.parameter("boundary").unwrap().prior.is_some());
    let table = simulated_table(1, 150, None);
    let (fits, _) = fit_table(&[model], &table, &FitOptions::default(), 1, &|| {}).unwrap();
    let boundary = fits[0]
        .estimates
        .iter()
        .find(|e| e.name == "boundary")
        .unwrap()
        .estimate;
    assert!(
        (boundary - 2.5).abs() < 0.02,
        "MAP boundary {boundary} (generating 1.6, prior 2.5)"
    );
    assert!(fits[0].log_prior != 0.0);
}

#[test]
fn trials_without_response_enter_only_with_a_deadline() {
    // P(no response) = P(no bound reached by the deadline) (definition of the deadline
    // likelihood); without a deadline such trials carry no information.
    let table = simulated_table(1, 200, Some(0.9));
    let subject = &table.subjects[0];
    let missing = subject.trials.iter().filter(|t| t.choice.is_none()).count();
    assert!(
        missing > 5,
        "the deadline should censor some trials ({missing})"
    );
    let model = load_model("gainloss-linear").unwrap();
    let with = SubjectLikelihood::new(&model, subject, Some(0.9)).unwrap();
    let without = SubjectLikelihood::new(&model, subject, None).unwrap();
    assert_eq!(with.n_observations(), subject.trials.len());
    assert_eq!(without.n_observations(), subject.trials.len() - missing);
    let theta = vec![0.2; with.n_free()];
    let (a, b) = (with.evaluate(&theta), without.evaluate(&theta));
    assert!(
        a.ln_likelihood < b.ln_likelihood,
        "censored trials add log-probabilities below 0"
    );
    // Gradient of the censored terms against central differences (common practice).
    for j in 0..theta.len() {
        let h = 1e-6;
        let mut up = theta.clone();
        let mut down = theta.clone();
        up[j] += h;
        down[j] -= h;
        let numeric =
            (with.evaluate(&up).ln_likelihood - with.evaluate(&down).ln_likelihood) / (2.0 * h);
        assert!(
            (numeric - a.gradient[j]).abs() < 1e-5 * numeric.abs().max(1.0),
            "parameter {j}: {} vs {numeric}",
            a.gradient[j]
        );
    }
}

#[test]
fn a_subject_fits_the_same_alone_and_inside_a_larger_file() {
    // Starts come from the seed and the subject's label, not its row position (the issue's
    // requirement; a fit must not change because other participants were added to the file).
    let table = simulated_table(4, 120, None);
    let models = vec![load_model("gainloss-linear").unwrap()];
    let options = FitOptions {
        starts: 3,
        ..FitOptions::default()
    };
    let (all, _) = fit_table(&models, &table, &options, 1, &|| {}).unwrap();
    let last = TrialTable {
        subjects: vec![table.subjects[3].clone()],
        present: table.present.clone(),
    };
    let (alone, _) = fit_table(&models, &last, &options, 1, &|| {}).unwrap();
    assert_eq!(alone[0], all[3]);
}

#[test]
fn a_parameter_without_effect_is_flagged_not_reported_as_converged() {
    // Efforts equal on both sides make the effort weight multiply zero (SV_a − SV_b does not
    // depend on it: a fact of the trade, common practice), so the likelihood is flat in it.
    let mut table = simulated_table(1, 160, None);
    for t in &mut table.subjects[0].trials {
        t.offers[0].effort = 0.0;
        t.offers[1].effort = 0.0;
    }
    let model = load_model("gainloss-linear").unwrap();
    let lik = SubjectLikelihood::new(&model, &table.subjects[0], None).unwrap();
    let fit = valuedrift::fit::fit_subject(&lik, &FitOptions::default());
    assert!(!fit.converged, "{}", fit.status);
    assert!(
        fit.status.contains("flat in effort_weight"),
        "{}",
        fit.status
    );
}

#[test]
fn a_participant_who_picks_the_worse_option_is_flagged_value_blind() {
    // Choices that run against the offered values: with value_scale ≥ 0 the best the model can
    // do is a value sensitivity of zero, where the choice probability no longer depends on the
    // offer (every trial 1/2 for an unbiased start: Cox & Miller 1965, absorption probability
    // at zero drift) and the effort weight is not identified.
    let mut table = simulated_table(1, 160, None);
    let model = load_model("offered-linear").unwrap();
    for (i, t) in table.subjects[0].trials.iter_mut().enumerate() {
        // Equal efforts, so no effort weight can turn the value difference around.
        t.offers[0].effort = 0.5;
        t.offers[1].effort = 0.5;
        t.offers[0].reward = Some(1.0 + (i % 4) as f64);
        t.offers[1].reward = Some(4.0 - (i % 4) as f64);
        let a_better = t.offers[0].reward > t.offers[1].reward;
        t.choice = Some(if a_better {
            valuedrift::data::Choice::B
        } else {
            valuedrift::data::Choice::A
        });
    }
    let lik = SubjectLikelihood::new(&model, &table.subjects[0], None).unwrap();
    let fit = valuedrift::fit::fit_subject(&lik, &FitOptions::default());
    assert!(!fit.converged, "{}", fit.status);
    assert!(fit.status.contains("value-blind"), "{}", fit.status);
}
