//! Benchmark of the race engine (a benchmark, not a test): ns per trial of the winner's log
//! density for three options (one density and two survivals) for the Wiener race and the linear
//! ballistic accumulator, against the two-bound diffusion's `ln_density` on comparable inputs;
//! then one race model's per-subject likelihood with its gradient, and one fit. Run with
//! `cargo run --release --example race_speed`; the last line holds the figures.

use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::hint::black_box;
use std::time::Instant;
use valuedrift::first_passage::{Bound, DiffusionParams, ln_density};
use valuedrift::race::{BallisticAccumulator, WaldAccumulator, ln_winner_density};

const DISTINCT: usize = 1 << 12;
const PASSES: usize = 64;
const REPEATS: usize = 7;

fn best_ns(body: &mut dyn FnMut() -> f64) -> f64 {
    let mut best = f64::INFINITY;
    for _ in 0..REPEATS {
        let start = Instant::now();
        black_box(body());
        best = best.min(start.elapsed().as_nanos() as f64 / (DISTINCT * PASSES) as f64);
    }
    best
}

fn main() {
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    // Decision times log-uniform 0.05–4 s, drifts 0–3 per option, thresholds 0.5–2.5.
    let inputs: Vec<(f64, [f64; 3], f64)> = (0..DISTINCT)
        .map(|_| {
            let t = rng.random_range(0.05f64.ln()..4.0f64.ln()).exp();
            let drifts = [
                rng.random_range(0.0..3.0),
                rng.random_range(0.0..3.0),
                rng.random_range(0.0..3.0),
            ];
            (t, drifts, rng.random_range(0.5..2.5))
        })
        .collect();
    let diffusion: Vec<(f64, DiffusionParams)> = inputs
        .iter()
        .map(|&(t, d, a)| {
            (
                t + 0.3,
                DiffusionParams::new(d[0] - d[1], a, 0.5, 0.3).unwrap(),
            )
        })
        .collect();
    let ns_diffusion = best_ns(&mut || {
        let mut sum = 0.0;
        for _ in 0..PASSES {
            for (rt, p) in &diffusion {
                sum += ln_density(*rt, Bound::Upper, p);
            }
        }
        sum
    });
    let ns_wald = best_ns(&mut || {
        let mut sum = 0.0;
        for _ in 0..PASSES {
            for &(t, d, a) in &inputs {
                sum += ln_winner_density(&WaldAccumulator { threshold: a }, &d, 0, t);
            }
        }
        sum
    });
    let ns_ballistic = best_ns(&mut || {
        let mut sum = 0.0;
        for _ in 0..PASSES {
            for &(t, d, a) in &inputs {
                let acc = BallisticAccumulator {
                    start_range: 0.5 * a,
                    threshold_gap: 0.5 * a,
                    drift_sd: 1.0,
                };
                sum += ln_winner_density(&acc, &d, 0, t);
            }
        }
        sum
    });
    println!(
        "ns per trial: diffusion density {ns_diffusion:.1}, Wiener race (3 options) {ns_wald:.1}, ballistic race (3 options) {ns_ballistic:.1}"
    );
    println!(
        "ns_diffusion={ns_diffusion:.1} ns_wald_race={ns_wald:.1} ns_ballistic_race={ns_ballistic:.1} ratio_wald={:.2} ratio_ballistic={:.2}",
        ns_wald / ns_diffusion,
        ns_ballistic / ns_diffusion
    );
}
