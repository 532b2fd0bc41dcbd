//! The likelihood's fast path (adjoint pass on plain numbers) against its dual-number path
//! (`evaluate_reference`, forward-mode dual numbers): the same ln L and ln prior, and the same
//! gradient up to the order of its sums, on random θ for every built-in model and for models
//! with forgetting, a free initial value, lapses, a free start, across-trial variability, gaze
//! weighting, a response lock, a deadline and trimmed times. Reference: the dual-number path
//! (exact forward-mode derivatives, checked against central differences in likelihood.rs).
//! The fused kernel (src/likelihood/kernel.rs) against the generic fast path: the same bits of
//! ln L and gradient on random θ, and the gradient against the dual-number path and central
//! differences (common practice); models and data outside the kernel shown to fall back.

use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use valuedrift::data::Subject;
use valuedrift::likelihood::SubjectLikelihood;
use valuedrift::model::{Model, built_in_models, parse_model};
use valuedrift::simulate::{
    SimulationSettings, orchard_design, orchard_generating_values, simulate_subject,
};

/// Largest difference of the gradients allowed, relative to the largest gradient component:
/// rounding of sums taken in another order (common practice: a few hundred terms at 1e-16).
const GRADIENT_TOLERANCE: f64 = 1e-12;

/// Evaluates both paths at `draws` random θ (components uniform in [−2.5, 2.5]) and compares them;
/// returns how many points took the fast path.
fn compare(lik: &SubjectLikelihood<'_>, rng: &mut ChaCha8Rng, draws: usize) -> usize {
    let mut fast = 0;
    for _ in 0..draws {
        let theta: Vec<f64> = (0..lik.n_free())
            .map(|_| rng.random_range(-2.5..2.5))
            .collect();
        fast += usize::from(lik.takes_fast_path(&theta));
        let new = lik.evaluate(&theta);
        let old = lik.evaluate_reference(&theta);
        let name = &lik.model().name;
        let same = |a: f64, b: f64| a == b || (a - b).abs() <= 1e-12 * a.abs().max(b.abs());
        assert!(
            same(new.ln_likelihood, old.ln_likelihood),
            "{name} at {theta:?}: ln L {} vs {}",
            new.ln_likelihood,
            old.ln_likelihood
        );
        assert_eq!(new.ln_prior, old.ln_prior, "{name}");
        if !old.ln_likelihood.is_finite() {
            continue;
        }
        let scale = old.gradient.iter().fold(0.0f64, |m, g| m.max(g.abs()));
        for (j, (a, b)) in new.gradient.iter().zip(&old.gradient).enumerate() {
            assert!(
                (a - b).abs() <= GRADIENT_TOLERANCE * scale,
                "{name} at {theta:?}, parameter {j}: {a} vs {b} (largest component {scale})"
            );
        }
    }
    fast
}

/// A simulated orchard participant of `model` (offered rewards added for models without
/// learning; fixed parameters at their value).
fn participant(model: &Model, rng: &mut ChaCha8Rng) -> Subject {
    let mut design = orchard_design("p", "g", 120, rng);
    for (i, trial) in design.trials.iter_mut().enumerate() {
        trial.offers[0].reward = Some(0.1 * (i % 7) as f64);
        trial.offers[1].reward = Some(0.4);
    }
    let values: Vec<f64> = orchard_generating_values(model, rng).unwrap_or_else(|| {
        model
            .parameters
            .iter()
            .map(|p| p.fixed.unwrap_or(0.5))
            .collect()
    });
    simulate_subject(model, &values, &design, SimulationSettings::default(), rng).unwrap()
}

#[test]
fn fast_path_equals_the_dual_path_for_every_built_in_model() {
    let mut rng = ChaCha8Rng::seed_from_u64(14);
    for model in built_in_models() {
        if valuedrift::model::components::uses_numerical_engine(model.component_names[3]) {
            // No fast path (both evaluations take the same dual-number code), and each
            // evaluation is an engine solve: checked in numerical_passage.rs instead.
            continue;
        }
        let subject = participant(&model, &mut rng);
        let lik = SubjectLikelihood::new(&model, &subject, None).unwrap();
        let fast = compare(&lik, &mut rng, 25);
        // Every built-in two-bound diffusion model takes the fast path; races and softmax the
        // dual path.
        let diffusion = model.component_names[3] == "diffusion";
        assert_eq!(
            fast == 25,
            diffusion,
            "{}: fast path at {fast}/25",
            model.name
        );
    }
}

const RICH: &str = r#"
name = "rich"
[learning]
rule = "gain-loss"
forgetting = true
[cost]
shape = "COST"
[drift]
mapping = "MAPPING"
[choice]
stage = "diffusion"
[parameters]
gain_rate = { lower = 0.0, upper = 1.0, start = [0.1, 0.9] }
loss_rate = { lower = 0.0, upper = 1.0, start = [0.1, 0.9] }
forget_rate = { lower = 0.0, upper = 1.0, start = [0.05, 0.5] }
initial_value = { lower = -1.0, upper = 1.0, start = [0.0, 0.5] }
effort_weight = { lower = 0.0, upper = 5.0, start = [0.1, 3.0] }
value_scale = { lower = 0.0, upper = 20.0, start = [0.5, 10.0] }
boundary = { lower = 0.3, upper = 5.0, start = [0.5, 4.0] }
ndt = { lower = 0.0, upper = 0.3, start = [0.05, 0.25] }
start = { lower = 0.2, upper = 0.8, start = [0.3, 0.7] }
lapse = { lower = 0.0, upper = 0.2, start = [0.01, 0.1] }
drift_sd = { lower = 0.0, upper = 2.0, start = [0.1, 1.0] }
"#;

/// The rich model with a cost shape and a drift mapping (extra parameter lines appended).
fn rich(cost: &str, mapping: &str, extra: &str) -> Model {
    let text = RICH.replace("COST", cost).replace("MAPPING", mapping) + extra;
    parse_model(&text, "rich.toml").unwrap()
}

/// `subject` with a deadline's missing responses, trimmed times and gaze shares.
fn windowed(mut subject: Subject) -> Subject {
    for (i, trial) in subject.trials.iter_mut().enumerate() {
        match i % 11 {
            3 => {
                trial.choice = None;
                trial.rt = None;
                trial.outcome = None;
            }
            7 => trial.rt = None,
            _ => {}
        }
        let share = 0.2 + 0.6 * ((i % 5) as f64 / 4.0);
        let x = (i % 9) as f64 / 4.0 - 1.0;
        trial.covariates = vec![
            Some(format!("{share}")),
            Some(format!("{}", 1.0 - share)),
            Some(format!("{x}")),
        ];
    }
    subject.covariates = std::sync::Arc::from(["gaze_a", "gaze_b", "x"].map(String::from));
    subject
}

#[test]
fn fast_path_equals_the_dual_path_with_forgetting_lapses_windows_and_every_shape() {
    let mut rng = ChaCha8Rng::seed_from_u64(41);
    let reference = valuedrift::model::load_model("gainloss-linear").unwrap();
    let subject = windowed(participant(&reference, &mut rng));
    let gaze = "gaze_discount = { lower = 0.0, upper = 1.0, start = [0.1, 0.9] }\n";
    let bounded = "drift_max = { lower = 0.5, upper = 10.0, start = [1.0, 5.0] }\n";
    let mut models = Vec::new();
    for cost in ["linear", "quadratic", "hyperbolic", "exponential"] {
        models.push(rich(cost, "linear", ""));
    }
    models.push(rich("exponential", "gaze-weighted", gaze));
    models.push(rich("hyperbolic", "bounded", bounded));
    // A boundary by run and a value scale with a slope on the covariate x.
    let text = RICH
        .replace("COST", "quadratic")
        .replace("MAPPING", "linear")
        .replace(
            "boundary = { lower = 0.3, upper = 5.0, start = [0.5, 4.0] }",
            "boundary = { lower = 0.3, upper = 5.0, start = [0.5, 4.0], by = \"run\", levels = [\"1\", \"2\"] }",
        )
        .replace(
            "value_scale = { lower = 0.0, upper = 20.0, start = [0.5, 10.0] }",
            "value_scale = { lower = 0.0, upper = 20.0, start = [0.5, 10.0], slopes = { x = [-1.0, 1.0] } }",
        );
    // At most 12 free parameters: the lapse rate fixed.
    let text = text.replace(
        "lapse = { lower = 0.0, upper = 0.2, start = [0.01, 0.1] }",
        "lapse = { fixed = 0.02 }",
    );
    let varying = parse_model(&text, "varying.toml").unwrap();
    assert!(varying.varies());
    models.push(varying);
    for model in &models {
        for (deadline, lock) in [(None, None), (Some(4.0), None), (Some(4.0), Some(0.35))] {
            let lik = SubjectLikelihood::new(model, &subject, deadline)
                .unwrap()
                .with_lock(lock);
            let fast = compare(&lik, &mut rng, 12);
            assert_eq!(fast, 12, "{} takes the fast path", model.name);
        }
    }
}

#[test]
fn fast_path_equals_the_dual_path_with_across_trial_variability() {
    let mut rng = ChaCha8Rng::seed_from_u64(5);
    let text = std::fs::read_to_string(
        std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("tests/models/offered-full-diffusion.toml"),
    )
    .unwrap();
    let model = parse_model(&text, "offered-full-diffusion.toml").unwrap();
    let mut subject = participant(
        &valuedrift::model::load_model("offered-linear").unwrap(),
        &mut rng,
    );
    subject.trials.truncate(40);
    for trial in &mut subject.trials {
        // Times well after the widest non-decision range.
        trial.rt = trial.rt.map(|t| t + 0.5);
    }
    let lik = SubjectLikelihood::new(&model, &subject, None).unwrap();
    assert_eq!(compare(&lik, &mut rng, 8), 8);
}

/// Evaluates with and without the fused kernel at `draws` random θ (components uniform in
/// [−2.5, 2.5]): the same ln L, ln prior and gradient to the last bit (the kernel computes the
/// generic fast path's numbers in its order, see src/likelihood/kernel.rs), and the same ln L
/// from the value-only pass (`SubjectLikelihood::ln_likelihood`); then compares with
/// the dual-number path ([`compare`]). Returns how many points took the kernel.
fn compare_kernel(lik: &SubjectLikelihood<'_>, rng: &mut ChaCha8Rng, draws: usize) -> usize {
    let mut kernel = 0;
    for _ in 0..draws {
        let theta: Vec<f64> = (0..lik.n_free())
            .map(|_| rng.random_range(-2.5..2.5))
            .collect();
        kernel += usize::from(lik.takes_kernel(&theta));
        let fused = lik.evaluate(&theta);
        let generic = lik.evaluate_without_kernel(&theta);
        let name = &lik.model().name;
        let value = lik.ln_likelihood(&theta);
        assert_eq!(
            value.to_bits(),
            fused.ln_likelihood.to_bits(),
            "{name} at {theta:?}: ln L alone {value} vs {}",
            fused.ln_likelihood
        );
        assert_eq!(
            fused.ln_likelihood.to_bits(),
            generic.ln_likelihood.to_bits(),
            "{name} at {theta:?}: ln L {} vs {}",
            fused.ln_likelihood,
            generic.ln_likelihood
        );
        assert_eq!(
            fused.ln_prior.to_bits(),
            generic.ln_prior.to_bits(),
            "{name}"
        );
        let bits = |g: &[f64]| g.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
        assert_eq!(
            bits(&fused.gradient),
            bits(&generic.gradient),
            "{name} at {theta:?}: gradient {:?} vs {:?}",
            fused.gradient,
            generic.gradient
        );
    }
    // The dual-number path (independent forward-mode derivatives) on points of the same kind.
    compare(lik, rng, draws.min(5));
    kernel
}

/// `subject` with edge cases the kernel scores itself: every 13th trial without a response
/// (without a deadline it carries no information and does not learn), every 7th with its time
/// trimmed (scored by the absorption probability of its bound), every 5th with no effort on
/// option b (a zero partial derivative of the cost, skipped as the generic pass skips it).
fn edged(mut subject: Subject) -> Subject {
    for (i, trial) in subject.trials.iter_mut().enumerate() {
        if i % 13 == 4 {
            trial.choice = None;
            trial.rt = None;
            trial.outcome = None;
        } else if i % 7 == 2 {
            trial.rt = None;
        }
        if i % 5 == 1 {
            trial.offers[1].effort = 0.0;
        }
    }
    subject
}

/// The rich model without forgetting, its lapse rate given by `lapse` (a parameter line).
fn rich_without_forgetting(lapse: &str) -> Model {
    let text = RICH
        .replace("COST", "linear")
        .replace("MAPPING", "linear")
        .replace("forgetting = true\n", "")
        .replace(
            "forget_rate = { lower = 0.0, upper = 1.0, start = [0.05, 0.5] }\n",
            "",
        )
        .replace(
            "lapse = { lower = 0.0, upper = 0.2, start = [0.01, 0.1] }",
            lapse,
        );
    parse_model(&text, "rich-without-forgetting.toml").unwrap()
}

#[test]
fn fused_kernel_equals_the_generic_fast_path_to_the_last_bit() {
    let mut rng = ChaCha8Rng::seed_from_u64(1414);
    let reference = valuedrift::model::load_model("gainloss-linear").unwrap();
    let with_split = parse_model(
        &reference.text.replace(
            "rule = \"gain-loss\"",
            "rule = \"gain-loss\"\nsplit = \"outcome\"",
        ),
        "split.toml",
    )
    .unwrap();
    // A free initial value: its derivative is the sum of the values' adjoints at the start.
    let with_initial = parse_model(
        &(reference.text.clone()
            + "\n[parameters.initial_value]\nlower = -1.0\nupper = 1.0\nstart = [0.0, 0.5]\n"),
        "initial.toml",
    )
    .unwrap();
    assert_eq!(
        with_initial.free_slots().len(),
        reference.free_slots().len() + 1
    );
    let models = [
        valuedrift::model::load_model("delta-linear").unwrap(),
        with_split,
        with_initial,
        // A free start, drift_sd (across-trial drift variability), initial value and drift
        // intercept, the lapse rate fixed at zero.
        rich_without_forgetting(
            "lapse = { fixed = 0.0 }\n\
             drift_intercept = { lower = -2.0, upper = 2.0, start = [-0.5, 0.5] }",
        ),
    ];
    for model in std::iter::once(&reference).chain(&models) {
        for round in 0..3 {
            let subject = participant(&reference, &mut rng);
            let subject = if round == 0 { subject } else { edged(subject) };
            let lik = SubjectLikelihood::new(model, &subject, None).unwrap();
            let taken = compare_kernel(&lik, &mut rng, 10);
            assert_eq!(
                taken, 10,
                "{} (subject {round}) takes the kernel",
                model.name
            );
            // Central differences of the kernel's ln L (common practice).
            let theta: Vec<f64> = (0..lik.n_free()).map(|j| 0.4 - 0.3 * j as f64).collect();
            assert!(lik.takes_kernel(&theta));
            crate::common::assert_gradient(&lik, &theta, &model.name);
        }
    }
}

#[test]
fn fused_kernel_falls_back_to_the_generic_path_outside_its_combination() {
    let mut rng = ChaCha8Rng::seed_from_u64(1415);
    let reference = valuedrift::model::load_model("gainloss-linear").unwrap();
    let subject = participant(&reference, &mut rng);
    let theta = vec![0.3; reference.free_slots().len()];
    // Missing responses are scored by the kernel without a deadline; with one (the probability
    // of no bound by the deadline), and under a response lock, by the generic fast path.
    let mut missing = subject.clone();
    missing.trials[3].choice = None;
    missing.trials[3].rt = None;
    missing.trials[3].outcome = None;
    let without_deadline = SubjectLikelihood::new(&reference, &missing, None).unwrap();
    assert!(without_deadline.takes_kernel(&theta));
    let deadline = SubjectLikelihood::new(&reference, &missing, Some(4.0)).unwrap();
    let locked = SubjectLikelihood::new(&reference, &subject, None)
        .unwrap()
        .with_lock(Some(0.2));
    for lik in [&deadline, &locked] {
        assert!(!lik.takes_kernel(&theta) && lik.takes_fast_path(&theta));
        assert_eq!(compare_kernel(lik, &mut rng, 4), 0);
    }
    // A lapse rate above zero, forgetting, other cost shapes and mappings, a condition effect:
    // the generic fast path; races, softmax: the dual-number path.
    let mut others = vec![rich_without_forgetting(
        "lapse = { lower = 0.0, upper = 0.2, start = [0.01, 0.1] }",
    )];
    others.extend(
        ["linear", "exponential", "quadratic", "hyperbolic"]
            .iter()
            .map(|cost| rich(cost, "linear", "")),
    );
    let varying = reference.text.replace(
        "[parameters.boundary]\n",
        "[parameters.boundary]\nby = \"run\"\nlevels = [\"1\", \"2\"]\n",
    );
    others.push(parse_model(&varying, "varying.toml").unwrap());
    assert!(others.last().unwrap().varies());
    for name in [
        "gainloss-exponential",
        "gainloss-linear-bounded",
        "offered-linear",
        "gainloss-wald-race",
        "gainloss-linear-choices",
    ] {
        others.push(valuedrift::model::load_model(name).unwrap());
    }
    for model in &others {
        let subject = participant(model, &mut rng);
        let lik = SubjectLikelihood::new(model, &subject, None).unwrap();
        assert_eq!(
            compare_kernel(&lik, &mut rng, 4),
            0,
            "{} does not take the kernel",
            model.name
        );
    }
}
