//! A short table of the engine's figures for a few parameter sets (the demo until the fitting
//! pipeline arrives).

use crate::first_passage::{
    Bound, DiffusionParams, bound_probability, cdf, ln_density, mean_decision_time, sample,
};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

/// Prints, per parameter set, exact figures next to the average of `samples` exact draws.
pub fn run(samples: usize, seed: u64) -> Result<(), Box<dyn std::error::Error>> {
    let sets = [
        (1.0, 1.5, 0.5, 0.3, 0.0),
        (-2.0, 2.0, 0.4, 0.25, 0.0),
        (3.0, 1.0, 0.6, 0.2, 1.0),
        (0.0, 3.0, 0.5, 0.35, 0.0),
    ];
    println!(
        "First-passage engine, unit noise (s = 1); {samples} exact samples per set, seed {seed}."
    );
    println!(
        "{:>6} {:>6} {:>5} {:>5} {:>5} | {:>9} {:>9} | {:>8} {:>8} | {:>12} {:>10}",
        "drift",
        "bound",
        "start",
        "ndt",
        "sd",
        "P(upper)",
        "sampled",
        "mean_dt",
        "sampled",
        "ln f(up,1s)",
        "F(up,1s)"
    );
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    for (v, a, w, ndt, sd) in sets {
        let p = DiffusionParams::new(v, a, w, ndt)?.with_variability(sd, 0.0, 0.0)?;
        let (mut n_upper, mut total_dt) = (0usize, 0.0);
        for _ in 0..samples {
            let (b, rt) = sample(&p, &mut rng);
            n_upper += usize::from(b == Bound::Upper);
            total_dt += rt - ndt;
        }
        let mean_closed = if sd == 0.0 {
            format!("{:8.4}", mean_decision_time(&p))
        } else {
            format!("{:>8}", "-")
        };
        println!(
            "{v:6.2} {a:6.2} {w:5.2} {ndt:5.2} {sd:5.2} | {:9.5} {:9.5} | {mean_closed} {:8.4} | {:12.6} {:10.6}",
            bound_probability(Bound::Upper, &p),
            n_upper as f64 / samples as f64,
            total_dt / samples as f64,
            ln_density(1.0, Bound::Upper, &p),
            cdf(1.0, Bound::Upper, &p),
        );
    }
    println!("The fitting demo arrives with the model and fitting commands.");
    println!("{}", super::RESEARCH_CAUTION);
    Ok(())
}
