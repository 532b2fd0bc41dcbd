//! Writes the demo study's design and generating values to demo-data/ (fixed seed).
//!
//! The study is our own invention: two cohorts ("steady" and "low-drive", 20 participants each)
//! perform the orchard task of `valuedrift::simulate::orchard_design` (240 trials in two runs).
//! Run `cargo run --release --example make_demo_data`, then produce the trials with
//! `valuedrift simulate` (the command is printed at the end).

use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use valuedrift::data::TrialTable;
use valuedrift::results::trials_table;
use valuedrift::simulate::orchard_design;

const SEED: u64 = 20_261_201;
const TRIALS: usize = 240;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut rng = ChaCha8Rng::seed_from_u64(SEED);
    let mut subjects = Vec::new();
    let mut values =
        String::from("subject,group,gain_rate,loss_rate,effort_weight,value_scale,boundary,ndt\n");
    for i in 0..40 {
        let group = if i < 20 { "steady" } else { "low-drive" };
        let id = format!("sub-{:02}", i + 1);
        subjects.push(orchard_design(&id, group, TRIALS, &mut rng));
        // The invented hypothesis of the demo: the low-drive cohort learns less from gains
        // than from losses and weighs effort more; the steady cohort the reverse.
        let (gain, loss, effort, boundary) = if group == "steady" {
            (
                rng.random_range(0.35..0.6),
                rng.random_range(0.15..0.35),
                rng.random_range(0.3..0.8),
                rng.random_range(1.2..2.0),
            )
        } else {
            (
                rng.random_range(0.1..0.25),
                rng.random_range(0.35..0.6),
                rng.random_range(0.8..1.5),
                rng.random_range(1.0..1.8),
            )
        };
        let scale: f64 = rng.random_range(3.0..7.0);
        let ndt: f64 = rng.random_range(0.25..0.45);
        values.push_str(&format!(
            "{id},{group},{gain:.3},{loss:.3},{effort:.3},{scale:.3},{boundary:.3},{ndt:.3}\n"
        ));
    }
    let table = TrialTable {
        subjects,
        present: Vec::new(),
    };
    let mut design = Vec::new();
    trials_table(&table).write_csv(&mut design)?;
    std::fs::write("demo-data/orchard_design.csv", design)?;
    std::fs::write("demo-data/generating_values.csv", values)?;
    println!(
        "wrote demo-data/orchard_design.csv and demo-data/generating_values.csv; now run\n  \
         cargo run --release -- simulate --model gainloss-linear --params demo-data/generating_values.csv \
         --design demo-data/orchard_design.csv --out demo-data/orchard_trials.csv --seed {SEED}"
    );
    Ok(())
}
