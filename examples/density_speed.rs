//! Benchmark of the first-passage log-density (a benchmark, not a test).
//!
//! Times, in one run, `ln_density` over a realistic mix of inputs (fast and slow response times,
//! both bounds, drifts −5..5, boundaries 0.5..3, starts 0.3..0.7, no across-trial variability),
//! the same with the analytic gradient, and a plain loop of `f64::exp` over the same count. Each
//! figure is the best of several repetitions. Run with
//! `cargo run --release --example density_speed`; the last line is
//! `ns_per_density=X ns_per_exp=Y ratio_to_exp=Z ratio_gradient=W`.

use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::hint::black_box;
use std::time::Instant;
use valuedrift::first_passage::{Bound, DiffusionParams, ln_density, ln_density_with_gradient};

/// Distinct inputs (about 1 MB, as a subject's trials would be in cache during a fit) and the
/// number of passes over them.
const DISTINCT: usize = 1 << 13;
const PASSES: usize = 128;
const COUNT: usize = DISTINCT * PASSES;
const REPEATS: usize = 9;

fn ns_per_item(body: &mut dyn FnMut() -> f64) -> f64 {
    let start = Instant::now();
    black_box(body());
    start.elapsed().as_nanos() as f64 / COUNT as f64
}

/// Best time per item of each body; the bodies alternate within every repetition so that a
/// change of machine load affects all of them alike.
fn best_interleaved<const N: usize>(mut bodies: [&mut dyn FnMut() -> f64; N]) -> [f64; N] {
    let mut best = [f64::INFINITY; N];
    for _ in 0..REPEATS {
        for (slot, body) in best.iter_mut().zip(bodies.iter_mut()) {
            *slot = slot.min(ns_per_item(*body));
        }
    }
    best
}

fn main() {
    let mut rng = ChaCha8Rng::seed_from_u64(42);
    let inputs: Vec<(f64, Bound, DiffusionParams)> = (0..DISTINCT)
        .map(|_| {
            let drift = rng.random_range(-5.0..5.0);
            let boundary = rng.random_range(0.5..3.0);
            let start = rng.random_range(0.3..0.7);
            let ndt = rng.random_range(0.15..0.4);
            // Decision times log-uniform from 0.05 s to 4 s: fast and slow responses.
            let decision: f64 = (rng.random_range(0.05f64.ln()..4.0f64.ln())).exp();
            let bound = if rng.random::<bool>() {
                Bound::Upper
            } else {
                Bound::Lower
            };
            (
                ndt + decision,
                bound,
                DiffusionParams::new(drift, boundary, start, ndt).unwrap(),
            )
        })
        .collect();
    let exponents: Vec<f64> = inputs.iter().map(|(rt, _, p)| -rt * p.boundary()).collect();

    let mut density = || {
        (0..PASSES)
            .map(|_| {
                inputs
                    .iter()
                    .map(|(rt, bound, p)| ln_density(black_box(*rt), *bound, p))
                    .sum::<f64>()
            })
            .sum()
    };
    let mut gradient = || {
        (0..PASSES)
            .map(|_| {
                inputs
                    .iter()
                    .map(|(rt, bound, p)| {
                        let (ln_f, g) = ln_density_with_gradient(black_box(*rt), *bound, p);
                        ln_f + g.drift + g.boundary + g.start + g.ndt
                    })
                    .sum::<f64>()
            })
            .sum()
    };
    let mut exp = || {
        (0..PASSES)
            .map(|_| exponents.iter().map(|&x| black_box(x).exp()).sum::<f64>())
            .sum()
    };
    let [ns_density, ns_gradient, ns_exp] =
        best_interleaved([&mut density, &mut gradient, &mut exp]);
    println!(
        "evaluations: {COUNT} ({DISTINCT} distinct inputs x {PASSES} passes; best of {REPEATS} repetitions)"
    );
    println!(
        "ln_density: {ns_density:.2} ns; with gradient: {ns_gradient:.2} ns; f64::exp: {ns_exp:.2} ns"
    );
    println!(
        "ns_per_density={ns_density:.2} ns_per_exp={ns_exp:.2} ratio_to_exp={:.2} ratio_gradient={:.2}",
        ns_density / ns_exp,
        ns_gradient / ns_density
    );
}
