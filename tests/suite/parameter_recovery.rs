//! Parameter recovery for the reference model: subjects simulated with known values must be
//! fitted back. Thresholds from the acceptance criteria; the design is the orchard task
//! of `valuedrift::simulate`. Fixed seed.

use crate::common::{draw_values, pearson};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use valuedrift::fit::{FitOptions, fit_subject};
use valuedrift::likelihood::SubjectLikelihood;
use valuedrift::model::load_model;
use valuedrift::simulate::{SimulationSettings, orchard_design, simulate_subject};

/// Generating ranges of the reference model's recovery tests.
const RANGES: [(&str, f64, f64); 6] = crate::common::RECOVERY_RANGES;

#[test]
fn reference_model_parameters_are_recovered() {
    let model = load_model("gainloss-linear").unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(20_261_201);
    let options = FitOptions::default();
    let mut truth = vec![Vec::new(); RANGES.len()];
    let mut estimate = vec![Vec::new(); RANGES.len()];
    let (mut covered, mut intervals) = (0, 0);
    for i in 0..30 {
        let design = orchard_design(&format!("r{i:02}"), "sim", 300, &mut rng);
        let values = draw_values(&model, &RANGES, &mut rng);
        let subject = simulate_subject(
            &model,
            &values,
            &design,
            SimulationSettings::default(),
            &mut rng,
        )
        .expect("the design suits the model");
        let lik = SubjectLikelihood::new(&model, &subject, None).unwrap();
        let fit = fit_subject(&lik, &options);
        for (k, (name, _, _)) in RANGES.iter().enumerate() {
            let slot = model
                .parameters
                .iter()
                .position(|p| p.name == *name)
                .unwrap();
            let e = &fit.estimates[slot];
            truth[k].push(values[slot]);
            estimate[k].push(e.estimate);
            if let Some((lo, hi)) = e.interval {
                intervals += 1;
                covered += usize::from(lo <= values[slot] && values[slot] <= hi);
            }
        }
    }
    let mut report = Vec::new();
    for (k, (name, _, _)) in RANGES.iter().enumerate() {
        let r = pearson(&truth[k], &estimate[k]);
        report.push(format!("{name}: r = {r:.3}"));
        let needed = if matches!(*name, "boundary" | "ndt" | "value_scale") {
            0.9
        } else {
            0.75
        };
        assert!(
            r >= needed,
            "{name}: r = {r:.3} < {needed}; {}",
            report.join(", ")
        );
    }
    let coverage = covered as f64 / intervals as f64;
    println!(
        "{}; coverage {covered}/{intervals} = {coverage:.3}",
        report.join(", ")
    );
    assert!(
        intervals >= 170,
        "only {intervals} of 180 intervals were computed"
    );
    assert!(
        (0.88..=0.99).contains(&coverage),
        "95 % interval coverage {coverage:.3}"
    );
}
