//! Command-line interface: argument definitions and dispatch to one small function per command.

mod density;
mod engine_table;

use clap::{Parser, Subcommand};
use std::path::PathBuf;

/// Caution printed in the help of every command.
pub const RESEARCH_CAUTION: &str = "Parameters from valuedrift are research measurements, not diagnoses: \
it is not a clinical or diagnostic instrument. De-identify participant data before analysis and \
follow your ethics approval.";

/// valuedrift: reinforcement-learning drift-diffusion models of reward-versus-effort choice,
/// fitted to choices and response times.
#[derive(Debug, Parser)]
#[command(name = "valuedrift", version, about, after_help = RESEARCH_CAUTION)]
pub struct Cli {
    /// The command to run.
    #[command(subcommand)]
    pub command: Command,
}

/// The commands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Show what the first-passage engine computes for a few parameter sets: log-density,
    /// distribution function, bound probability, mean decision time (closed form, Grasman et al.
    /// 2009) against the mean of exact samples.
    #[command(after_help = RESEARCH_CAUTION)]
    Demo {
        /// Number of exact samples per parameter set.
        #[arg(long, default_value_t = 20_000)]
        samples: usize,
        /// Seed of the sampler.
        #[arg(long, default_value_t = 20_261_201)]
        seed: u64,
    },
    /// Log-density and distribution function of the Wiener first-passage time for each row of a
    /// CSV file (Navarro & Fuss 2009; Blurton, Kesselmeier & Gondan 2012, 2017).
    ///
    /// Input columns: rt (seconds), bound (upper|lower), drift, boundary, start (0..1 from the
    /// lower bound), ndt; optional drift_sd, start_range, ndt_range. Unit within-trial noise
    /// (s = 1): multiply drift, boundary and drift_sd stated for s = 0.1 by 10. Output: the same
    /// rows and columns plus log_density and cdf (defective distribution at rt for that bound).
    #[command(after_help = RESEARCH_CAUTION)]
    Density {
        /// CSV file to read.
        #[arg(long)]
        input: PathBuf,
        /// CSV file to write (written atomically); standard output when omitted.
        #[arg(long)]
        output: Option<PathBuf>,
    },
}

/// Runs the parsed command.
pub fn run(cli: Cli) -> Result<(), Box<dyn std::error::Error>> {
    match cli.command {
        Command::Demo { samples, seed } => engine_table::run(samples, seed),
        Command::Density { input, output } => density::run(&input, output.as_deref()),
    }
}
