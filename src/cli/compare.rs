//! `valuedrift compare`: model comparison across the subjects of a fit folder.

use crate::files::OutputSet;
use crate::group::selection::{BmsOptions, Evidence, Selection, assemble, select};
use crate::results::fit_folder::read_fit_summary;
use std::path::Path;

/// Everything `compare` needs, resolved from the command line.
pub struct CompareRun<'a> {
    /// Folder written by `valuedrift fit`.
    pub fits: &'a Path,
    /// Grouping column of fit_summary.csv.
    pub by: &'a str,
    /// Summary file name inside `fits` (fit_summary.csv or eb_fit_summary.csv).
    pub summary: &'a str,
    /// Output folder.
    pub out: &'a Path,
    /// Log evidence used for selection.
    pub evidence: Evidence,
    /// Monte Carlo samples for exceedance probabilities of more than two models.
    pub samples: usize,
    /// Seed of the Monte Carlo draws.
    pub seed: u64,
    /// Replace this command's earlier outputs (or an existing result set in another folder).
    pub replace: bool,
}

/// Reads `fits/<summary>` (by default fit_summary.csv), runs the comparison, writes `model_selection`,
/// `model_evidence` and `model_group_difference` (CSV and Parquet, all or nothing) and prints a
/// summary.
pub fn run(run: CompareRun<'_>) -> Result<(), Box<dyn std::error::Error>> {
    let selection = compare_and_write(&run)?;
    print_summary(&selection, run.samples);
    println!("outputs in {}", run.out.display());
    println!("{}", super::RESEARCH_CAUTION);
    Ok(())
}

/// The comparison of `run`, with its tables written (all or nothing).
pub fn compare_and_write(run: &CompareRun<'_>) -> Result<Selection, Box<dyn std::error::Error>> {
    let mut outputs = OutputSet::adding_to(run.out, run.fits, run.replace)?;
    let input = run.fits.join(run.summary);
    let rows = read_fit_summary(&input, run.by)?;
    let comparison = assemble(&input, &rows, run.evidence, run.by)?;
    for (subject, missing) in &comparison.dropped {
        eprintln!(
            "warning: subject '{subject}' left out: no fit of {}",
            missing.join(", ")
        );
    }
    if run.samples == 0 {
        return Err("--samples must be at least 1".into());
    }
    let options = BmsOptions {
        samples: run.samples,
        seed: run.seed,
        ..BmsOptions::default()
    };
    let selection = select(comparison, run.evidence, &options)
        .map_err(|e| format!("{}: {e}", input.display()))?;
    selection
        .selection_table()
        .stage_both(&mut outputs, run.out, "model_selection")?;
    selection
        .evidence_table()
        .stage_both(&mut outputs, run.out, "model_evidence")?;
    selection
        .difference_table()
        .stage_both(&mut outputs, run.out, "model_group_difference")?;
    outputs.commit()?;
    Ok(selection)
}

/// Prints per scope the expected frequencies, exceedance and protected exceedance
/// probabilities, omnibus risk and wins, then the between-group test.
pub fn print_summary(selection: &Selection, samples: usize) {
    let c = &selection.comparison;
    println!(
        "model comparison of {} subjects, {} models; log evidence used: {} \
         (random-effects selection: Stephan et al. 2009; protected exceedance and omnibus risk: \
         Rigoux et al. 2014)",
        c.subjects.len(),
        c.models.len(),
        selection.evidence.label()
    );
    for note in &c.notes {
        println!("note: {note}");
    }
    if c.models.len() > 2 {
        println!(
            "exceedance probabilities by Monte Carlo ({samples} draws, standard error at most {:.4})",
            0.5 / (samples as f64).sqrt()
        );
    } else {
        println!("exceedance probabilities exact (regularised incomplete beta)");
    }
    for (scope, bms) in &selection.scopes {
        let won = selection.subjects_won(scope);
        println!(
            "\n[{scope}] {} subjects, Bayesian omnibus risk {:.4}{}",
            bms.assignment.len(),
            bms.omnibus_risk,
            if bms.converged {
                ""
            } else {
                " (fixed point did not converge)"
            }
        );
        println!(
            "{:<28} {:>10} {:>10} {:>11} {:>11} {:>8}",
            "", "Dirichlet", "expected", "exceedance", "protected", "subjects"
        );
        println!(
            "{:<28} {:>10} {:>10} {:>11} {:>11} {:>8}",
            "model", "count", "frequency", "probability", "exceedance", "won"
        );
        for (k, model) in c.models.iter().enumerate() {
            println!(
                "{model:<28} {:>10.3} {:>10.4} {:>11.4} {:>11.4} {:>8}",
                bms.alpha[k],
                bms.expected_frequency[k],
                bms.exceedance[k],
                bms.protected_exceedance[k],
                won[k]
            );
        }
    }
    match &selection.difference {
        Some(d) => println!(
            "\ngroups {} share model frequencies with posterior probability {:.4} \
             (F same {:.3}, F different {:.3}; Rigoux et al. 2014)",
            d.groups.join(", "),
            d.probability_same,
            d.free_energy_same,
            d.free_energy_different
        ),
        None => println!("\none group only: no between-group test"),
    }
}
