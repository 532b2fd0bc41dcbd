//! Benchmark of per-subject fitting (a benchmark, not a test).
//!
//! Simulates subjects on the orchard design (300 trials, model `gainloss-linear`, generating
//! values inside the documented ranges), fits each with 10 starts on one thread, and prints as
//! its last line `seconds_per_subject=X likelihoods_per_second=Y` (Y counts likelihood-with-
//! gradient evaluations of one subject's 300 trials). Run with
//! `cargo run --release --example fit_speed`; another built-in model may be named as the
//! argument (for example `-- gainloss-wald-race`).

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use std::time::Instant;
use valuedrift::fit::{FitOptions, fit_subject};
use valuedrift::likelihood::SubjectLikelihood;
use valuedrift::model::load_model;
use valuedrift::simulate::orchard_participant;

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
            orchard_participant(&model, &format!("s{i:02}"), "bench", TRIALS, &mut rng)
                .expect("the model runs on the orchard design")
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
