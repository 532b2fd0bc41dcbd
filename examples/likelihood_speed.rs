//! Benchmark of one subject's log-likelihood against the first-passage density alone (a
//! benchmark, not a test).
//!
//! Simulates one participant of the orchard design (300 trials, model `gainloss-linear` by
//! default, generating values drawn as in `fit_speed`), takes each trial's drift at the
//! generating values, and times, in nanoseconds per trial:
//! (a) `density`: ln f(rt, bound | drift, boundary, ndt) of the first-passage engine alone on the
//!     same trials' drifts and times;
//! (b) `density_gradient`: the same with its partial derivatives;
//! (c) `likelihood_gradient`: [`SubjectLikelihood::evaluate`], ln L with its full gradient with
//!     respect to the free parameters (learning recursion, costs, drift and choice stage; the
//!     fused kernel where the model takes it);
//! (d) `generic_gradient`: the same by the generic fast path without the fused kernel
//!     ([`SubjectLikelihood::evaluate_without_kernel`]);
//! (e) `reference_gradient`: the same by the general dual-number path, which every model can
//!     take ([`SubjectLikelihood::evaluate_reference`]).
//! The first line says whether the model takes the fused kernel; the last line is
//! `ns_per_trial density=A density_gradient=B likelihood_gradient=C generic_gradient=D
//! reference_gradient=E ratio=C/A`. Each figure is the fastest of several rounds (the machine is
//! shared); run with `cargo run --release --example likelihood_speed`, or name another built-in
//! model as the argument.

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use std::hint::black_box;
use std::time::Instant;
use valuedrift::first_passage::{Bound, DiffusionParams, ln_density, ln_density_with_gradient};
use valuedrift::likelihood::SubjectLikelihood;
use valuedrift::model::load_model;
use valuedrift::simulate::{
    SimulationSettings, orchard_design, orchard_generating_values, simulate_subject,
};

const TRIALS: usize = 300;
const ROUNDS: usize = 7;
const REPEATS: usize = 400;

/// Fastest of [`ROUNDS`] rounds of [`REPEATS`] calls of `work`, in nanoseconds per trial.
fn ns_per_trial(mut work: impl FnMut() -> f64) -> f64 {
    let mut best = f64::INFINITY;
    for _ in 0..ROUNDS {
        let start = Instant::now();
        let mut sink = 0.0;
        for _ in 0..REPEATS {
            sink += work();
        }
        black_box(sink);
        best = best.min(start.elapsed().as_secs_f64() * 1e9 / (REPEATS * TRIALS) as f64);
    }
    best
}

/// The benchmark's random stream (the seed of `fit_speed`).
fn seeded() -> ChaCha8Rng {
    ChaCha8Rng::seed_from_u64(7)
}

fn main() {
    let argument = std::env::args().nth(1);
    let name = argument.as_deref().unwrap_or("gainloss-linear");
    let (model, mut rng) = (load_model(name).expect("a built-in model"), seeded());
    let design = orchard_design("s00", "bench", TRIALS, &mut rng);
    let values: Vec<f64> = orchard_generating_values(&model, &mut rng).expect("orchard ranges");
    let settings = SimulationSettings::default();
    let subject = simulate_subject(&model, &values, &design, settings, &mut rng)
        .expect("the model runs on the orchard design");
    let lik = SubjectLikelihood::new(&model, &subject, None).expect("binds");
    let free: Vec<f64> = model
        .free_slots()
        .iter()
        .map(|&slot| values[slot])
        .collect();
    let theta = lik.unconstrained(&free);
    let natural = lik.natural(&theta);
    // Each trial's drift, bound and time at the generating values, for the density alone.
    let value_of = |parameter: &str| {
        model
            .parameters
            .iter()
            .position(|p| p.name == parameter)
            .map_or(0.0, |slot| natural[slot])
    };
    let base = DiffusionParams::new(0.0, value_of("boundary"), 0.5, value_of("ndt"))
        .expect("valid diffusion");
    let trials: Vec<(DiffusionParams, Bound, f64)> = lik
        .trace(&natural)
        .iter()
        .zip(&subject.trials)
        .filter_map(|(trace, trial)| {
            let bound = match trial.choice?.index() {
                0 => Bound::Upper,
                _ => Bound::Lower,
            };
            Some((base.with_drift(trace.decision_signal()), bound, trial.rt?))
        })
        .collect();
    let scale = TRIALS as f64 / trials.len() as f64;
    let density = scale
        * ns_per_trial(|| {
            trials
                .iter()
                .map(|(p, bound, rt)| ln_density(*rt, *bound, black_box(p)))
                .sum()
        });
    let density_gradient = scale
        * ns_per_trial(|| {
            trials
                .iter()
                .map(|(p, bound, rt)| {
                    let (ln_f, g) = ln_density_with_gradient(*rt, *bound, black_box(p));
                    ln_f + g.drift
                })
                .sum()
        });
    let likelihood_gradient = ns_per_trial(|| {
        let e = lik.evaluate(black_box(&theta));
        e.ln_likelihood + e.gradient[0]
    });
    let generic_gradient = ns_per_trial(|| {
        let e = lik.evaluate_without_kernel(black_box(&theta));
        e.ln_likelihood + e.gradient[0]
    });
    let reference_gradient = ns_per_trial(|| {
        let e = lik.evaluate_reference(black_box(&theta));
        e.ln_likelihood + e.gradient[0]
    });
    println!(
        "{name}: {} trials ({} with a response time), {} free parameters, fastest of {ROUNDS} \
         rounds of {REPEATS} evaluations; fused kernel taken: {}",
        TRIALS,
        trials.len(),
        lik.n_free(),
        lik.takes_kernel(&theta)
    );
    println!(
        "ns_per_trial density={density:.1} density_gradient={density_gradient:.1} \
         likelihood_gradient={likelihood_gradient:.1} generic_gradient={generic_gradient:.1} \
         reference_gradient={reference_gradient:.1} \
         ratio={:.2}",
        likelihood_gradient / density
    );
}
