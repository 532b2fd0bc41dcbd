//! Benchmark of memory against cohort size (a benchmark, not a test).
//!
//! Simulates an invented cohort on the orchard design (`gainloss-linear`, generating values
//! inside the documented ranges, fixed seed) and writes it as one CSV trial table; then runs the
//! release binary's `fit --model gainloss-linear --starts 2 --threads 2`, `export` and
//! `check --sims 20` on it as child processes and prints, per command and cohort size, the wall
//! time and the peak resident memory the kernel reports for the child (`wait4`, `ru_maxrss`). Cohort sizes are the
//! arguments (default `1000 10000`; 200 trials each):
//!
//! `cargo build --release && cargo run --release --example memory_scale -- 1000 10000`
//!
//! The last lines read `fit subjects=N peak_mb=M seconds=S`, and the same for `export` and
//! `check`. Parameters from valuedrift are research measurements, not diagnoses; the cohort
//! here is invented.

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use std::io::Write;
use std::path::Path;
use std::process::Command;
use valuedrift::model::load_model;
use valuedrift::simulate::orchard_participant;

#[path = "common/mod.rs"]
mod common;

const TRIALS: usize = 200;
/// Subjects simulated and written at a time (so that this program's own memory stays small).
const CHUNK: usize = 500;

fn main() {
    let sizes: Vec<usize> = std::env::args()
        .skip(1)
        .map(|a| a.parse().expect("cohort sizes as whole numbers"))
        .collect();
    let sizes = if sizes.is_empty() {
        vec![1000, 10_000]
    } else {
        sizes
    };
    let binary = common::release_binary();
    let dir = tempfile::tempdir().expect("a temporary folder");
    let mut lines = Vec::new();
    for &n in &sizes {
        let data = dir.path().join(format!("cohort_{n}.csv"));
        write_cohort(&data, n);
        let megabytes = std::fs::metadata(&data).map_or(0.0, |m| m.len() as f64 / 1e6);
        println!("cohort of {n} subjects x {TRIALS} trials: {megabytes:.0} MB of CSV");
        let fits = dir.path().join(format!("fits_{n}"));
        let (peak, seconds, _) = common::measure(
            Command::new(&binary)
                .args(["fit", "--model", "gainloss-linear", "--starts", "2"])
                .args(["--threads", "2", "--data"])
                .arg(&data)
                .arg("--out")
                .arg(&fits),
        );
        lines.push(format!(
            "fit subjects={n} peak_mb={peak:.1} seconds={seconds:.1}"
        ));
        let (peak, seconds, _) = common::measure(
            Command::new(&binary)
                .args(["export", "--model", "gainloss-linear", "--fits"])
                .arg(&fits)
                .arg("--data")
                .arg(&data)
                .arg("--out")
                .arg(dir.path().join(format!("export_{n}"))),
        );
        lines.push(format!(
            "export subjects={n} peak_mb={peak:.1} seconds={seconds:.1}"
        ));
        let (peak, seconds, _) = common::measure(
            Command::new(&binary)
                .args([
                    "check",
                    "--model",
                    "gainloss-linear",
                    "--sims",
                    "20",
                    "--fits",
                ])
                .arg(&fits)
                .arg("--data")
                .arg(&data)
                .arg("--out")
                .arg(dir.path().join(format!("check_{n}"))),
        );
        lines.push(format!(
            "check subjects={n} peak_mb={peak:.1} seconds={seconds:.1}"
        ));
        for line in &lines[lines.len() - 3..] {
            println!("{line}");
        }
    }
    println!("--");
    for line in lines {
        println!("{line}");
    }
}

/// Simulates `n` subjects of the invented orchard cohort and writes them to `path`.
fn write_cohort(path: &Path, n: usize) {
    let model = load_model("gainloss-linear").expect("a built-in model");
    let mut rng = ChaCha8Rng::seed_from_u64(2026);
    let mut file = std::io::BufWriter::new(std::fs::File::create(path).expect("a data file"));
    for first in (0..n).step_by(CHUNK) {
        let subjects = (first..(first + CHUNK).min(n))
            .map(|i| {
                orchard_participant(&model, &format!("p{i:05}"), "cohort", TRIALS, &mut rng)
                    .expect("the model runs on the orchard design")
            })
            .collect();
        common::write_subjects(&mut file, subjects, first == 0);
    }
    file.flush().expect("the data file is written");
}
