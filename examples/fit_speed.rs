//! Benchmark of per-subject fitting (a benchmark, not a test).
//!
//! Simulates subjects on the orchard design (300 trials, model `gainloss-linear`, generating
//! values inside the documented ranges), fits each with 10 starts on one thread, and prints as
//! its last line `seconds_per_subject=X likelihoods_per_second=Y` (Y counts likelihood-with-
//! gradient evaluations of one subject's 300 trials). Run with
//! `cargo run --release --example fit_speed`; another built-in model may be named as the
//! argument (for example `-- gainloss-wald-race`).

use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::time::Instant;
use valuedrift::fit::{FitOptions, fit_subject};
use valuedrift::likelihood::SubjectLikelihood;
use valuedrift::model::load_model;
use valuedrift::simulate::{SimulationSettings, orchard_design, simulate_subject};

const SUBJECTS: usize = 8;
const TRIALS: usize = 300;

fn main() {
    let name = std::env::args()
        .nth(1)
        .unwrap_or_else(|| "gainloss-linear".into());
    let model = load_model(&name).expect("a built-in model");
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let subjects: Vec<_> = (0..SUBJECTS)
        .map(|i| {
            let design = orchard_design(&format!("s{i:02}"), "bench", TRIALS, &mut rng);
            let values: Vec<f64> = model
                .parameters
                .iter()
                .map(|p| match p.name.as_str() {
                    "gain_rate" | "loss_rate" => rng.random_range(0.1..0.7),
                    "effort_weight" => rng.random_range(0.2..1.5),
                    "value_scale" => rng.random_range(2.0..8.0),
                    "boundary" => rng.random_range(1.0..2.5),
                    "ndt" => rng.random_range(0.2..0.5),
                    "drift_intercept" => rng.random_range(0.5..1.5),
                    "threshold" => rng.random_range(1.0..2.0),
                    "start_range" => rng.random_range(0.3..1.0),
                    "threshold_gap" => rng.random_range(0.2..0.8),
                    _ => p.fixed.expect("other parameters are fixed"),
                })
                .collect();
            simulate_subject(
                &model,
                &values,
                &design,
                SimulationSettings::default(),
                &mut rng,
            )
            .expect("the design suits the model")
        })
        .collect();
    let options = FitOptions::default();
    // Likelihood evaluations per second on its own.
    let lik = SubjectLikelihood::new(&model, &subjects[0], None).unwrap();
    let theta = vec![0.1; lik.n_free()];
    let evaluations = 2000;
    let start = Instant::now();
    let mut sink = 0.0;
    for k in 0..evaluations {
        let mut t = theta.clone();
        t[0] += 1e-9 * k as f64;
        sink += lik.evaluate(&t).ln_likelihood;
    }
    let per_second = evaluations as f64 / start.elapsed().as_secs_f64();
    let start = Instant::now();
    for subject in &subjects {
        let lik = SubjectLikelihood::new(&model, subject, None).unwrap();
        let fit = fit_subject(&lik, &options);
        sink += fit.log_likelihood;
        println!(
            "{}: ln L = {:.2}, starts at best {}/{}, converged {}",
            fit.subject, fit.log_likelihood, fit.starts_at_best, fit.starts, fit.converged
        );
    }
    let per_subject = start.elapsed().as_secs_f64() / SUBJECTS as f64;
    assert!(sink.is_finite());
    println!(
        "{SUBJECTS} subjects x {TRIALS} trials of model {name}, {} starts, 1 thread",
        options.starts
    );
    println!("seconds_per_subject={per_subject:.3} likelihoods_per_second={per_second:.0}");
}
