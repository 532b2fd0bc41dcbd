//! Benchmark of the collapsing-bound models (a benchmark, not a test).
//!
//! Simulates one 300-trial orchard participant (every trial its own drift from learning) for
//! `gainloss-collapse-linear` (or the model named as the argument) and one for the closed-form
//! `gainloss-linear` (seed 7, generating values from `orchard_generating_values`), and prints:
//! 1. the time of one log-likelihood with its gradient for each (fastest of 5 rounds) and their
//!    ratio;
//! 2. the time of a whole subject fit (`fit_subject`, default options: 10 starts) of the
//!    numerical model, on this thread, with its number of likelihood evaluations.
//!
//! Run with `cargo run --release --example collapse_speed [-- model]`. The last line reads
//! `likelihood_seconds=A closed_form_seconds=B ratio=A/B fit_seconds=C evaluations=D`.

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use std::hint::black_box;
use std::time::Instant;
use valuedrift::fit::{FitOptions, fit_subject_with_work};
use valuedrift::likelihood::SubjectLikelihood;
use valuedrift::model::{Model, load_model};
use valuedrift::simulate::{
    SimulationSettings, orchard_design, orchard_generating_values, simulate_subject,
};

const TRIALS: usize = 300;
const ROUNDS: usize = 5;

/// A simulated participant of `model` with its generating θ.
fn participant(model: &Model) -> (valuedrift::data::Subject, Vec<f64>) {
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let design = orchard_design("s00", "bench", TRIALS, &mut rng);
    let natural = orchard_generating_values(model, &mut rng).expect("orchard ranges");
    let subject = simulate_subject(
        model,
        &natural,
        &design,
        SimulationSettings::default(),
        &mut rng,
    )
    .expect("the model runs on the orchard design");
    let free: Vec<f64> = model.free_slots().iter().map(|&s| natural[s]).collect();
    (subject, free)
}

/// Fastest of [`ROUNDS`] rounds of `repeats` likelihood-with-gradient evaluations, in seconds
/// per evaluation.
fn seconds_per_evaluation(lik: &SubjectLikelihood<'_>, theta: &[f64], repeats: usize) -> f64 {
    let mut best = f64::INFINITY;
    for _ in 0..ROUNDS {
        let start = Instant::now();
        for k in 0..repeats {
            let mut t = theta.to_vec();
            t[0] += 1e-9 * k as f64;
            black_box(lik.evaluate(&t).ln_likelihood);
        }
        best = best.min(start.elapsed().as_secs_f64() / repeats as f64);
    }
    best
}

fn main() {
    let name = std::env::args()
        .nth(1)
        .unwrap_or_else(|| "gainloss-collapse-linear".into());
    let model = load_model(&name).expect("a built-in model");
    let closed = load_model("gainloss-linear").expect("built in");
    let (subject, free) = participant(&model);
    let (closed_subject, closed_free) = participant(&closed);
    let lik = SubjectLikelihood::new(&model, &subject, None).unwrap();
    let closed_lik = SubjectLikelihood::new(&closed, &closed_subject, None).unwrap();
    let theta = lik.unconstrained(&free);
    let closed_theta = closed_lik.unconstrained(&closed_free);
    let numerical = seconds_per_evaluation(&lik, &theta, 20);
    let closed_form = seconds_per_evaluation(&closed_lik, &closed_theta, 400);
    println!(
        "{TRIALS} trials: ln L with gradient {name} {numerical:.5} s, gainloss-linear \
         {closed_form:.6} s, ratio {:.0}",
        numerical / closed_form
    );
    let options = FitOptions::default();
    let start = Instant::now();
    let (fit, work) = fit_subject_with_work(&lik, &options);
    let fit_seconds = start.elapsed().as_secs_f64();
    println!(
        "fit of one subject ({} starts, 1 thread): {fit_seconds:.2} s, {} evaluations, ln L {:.3}, \
         converged {}",
        options.starts,
        work.total(),
        fit.log_likelihood,
        fit.converged
    );
    println!("evaluations by stage: {work}");
    println!(
        "likelihood_seconds={numerical:.5} closed_form_seconds={closed_form:.6} ratio={:.0} \
         fit_seconds={fit_seconds:.2} evaluations={}",
        numerical / closed_form,
        work.total()
    );
}
