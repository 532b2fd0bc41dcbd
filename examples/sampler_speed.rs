//! Benchmark of the exact first-passage sampler (a benchmark, not a test).
//!
//! Times `first_passage::sample` (a bound with its exact probability, then the decision time by
//! inverting the conditional distribution function) over a realistic mix of processes: drifts
//! −5..5, boundaries 0.5..3, starts 0.3..0.7, no across-trial variability, one draw per process
//! as in a simulation where every trial has its own drift. Each figure is the best of several
//! repetitions. Run with `cargo run --release --example sampler_speed`; the last line is
//! `ns_per_draw=X mean_decision_time=Y` (Y, the mean of the draws, only shows that they are
//! used).

use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::hint::black_box;
use std::time::Instant;
use valuedrift::first_passage::{DiffusionParams, sample};

const DRAWS: usize = 200_000;
const REPEATS: usize = 7;

fn main() {
    let mut rng = ChaCha8Rng::seed_from_u64(42);
    let processes: Vec<DiffusionParams> = (0..DRAWS)
        .map(|_| {
            let drift = rng.random_range(-5.0..5.0);
            let boundary = rng.random_range(0.5..3.0);
            let start = rng.random_range(0.3..0.7);
            DiffusionParams::new(drift, boundary, start, 0.0).expect("valid parameters")
        })
        .collect();
    let mut best = f64::INFINITY;
    let mut mean = 0.0;
    for repeat in 0..REPEATS {
        let mut draws = ChaCha8Rng::seed_from_u64(repeat as u64);
        let start = Instant::now();
        let total: f64 = processes
            .iter()
            .map(|p| sample(black_box(p), &mut draws).1)
            .sum();
        best = best.min(start.elapsed().as_nanos() as f64 / DRAWS as f64);
        mean = total / DRAWS as f64;
    }
    println!(
        "{DRAWS} draws, one per process (drift -5..5, boundary 0.5..3, start 0.3..0.7), best of \
         {REPEATS} rounds"
    );
    println!("ns_per_draw={best:.0} mean_decision_time={mean:.4}");
}
