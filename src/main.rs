//! The `valuedrift` command: parses arguments, runs one command, prints the error chain.

use clap::Parser;
use std::process::ExitCode;

fn main() -> ExitCode {
    let cli = valuedrift::cli::Cli::parse();
    match valuedrift::cli::run(cli) {
        Ok(()) => ExitCode::SUCCESS,
        Err(error) => {
            eprintln!("error: {error}");
            let mut source = error.source();
            while let Some(cause) = source {
                eprintln!("  caused by: {cause}");
                source = cause.source();
            }
            ExitCode::FAILURE
        }
    }
}
