//! `valuedrift export`: per-trial latent variables of a fitted model (tidy table) and BIDS
//! events files with parametric modulators, for imaging analyses.

use crate::data::{ColumnMap, read_trials};
use crate::exports::{
    Scale, bids_labels, events_files, labels_table, latents, latents_table, read_estimates,
};
use crate::files::OutputSet;
use crate::model::load_model;
use std::path::Path;

/// Everything `export` needs, resolved from the command line.
pub struct ExportRun<'a> {
    /// Folder holding parameters.csv from `valuedrift fit`.
    pub fits: &'a Path,
    /// Trial table.
    pub data: &'a Path,
    /// Model name or file.
    pub model: &'a str,
    /// Output folder.
    pub out: &'a Path,
    /// Scaling of the modulators in the events files.
    pub scale: Scale,
    /// Column mapping of the trial table (canonical=file pairs).
    pub columns: &'a str,
}

/// Reads, computes and writes every output at once (nothing is written on error).
pub fn run(run: ExportRun<'_>) -> Result<(), Box<dyn std::error::Error>> {
    let columns = ColumnMap::parse(run.columns).map_err(|e| format!("--columns: {e}"))?;
    let table = read_trials(run.data, &columns)?;
    let model = load_model(run.model.trim())?;
    let estimates = read_estimates(&run.fits.join("parameters.csv"), &model, &table.subjects)?;
    let labels = bids_labels(&table.subjects)?;
    let has_onsets = table.has_column("onset");
    let with_outcomes = table.has_column("outcome_onset");
    let mut all = Vec::new();
    let mut events = Vec::new();
    for ((subject, natural), label) in table.subjects.iter().zip(&estimates).zip(&labels) {
        let rows = latents(&model, subject, natural)?;
        if has_onsets {
            events.extend(events_files(
                &model,
                subject,
                label,
                &rows,
                run.scale,
                with_outcomes,
            ));
        }
        all.extend(rows);
    }
    let mut outputs = OutputSet::new();
    latents_table(&all).stage_both(&mut outputs, run.out, "latents")?;
    if has_onsets {
        outputs.stage(&run.out.join("subject_labels.tsv"), |w| {
            labels_table(&table.subjects, &labels).write_delimited(w, b'\t')
        })?;
    }
    for file in &events {
        outputs.stage(&run.out.join(format!("{}.tsv", file.stem)), |w| {
            file.write_tsv(w)
        })?;
        outputs.stage(&run.out.join(format!("{}.json", file.stem)), |w| {
            serde_json::to_writer_pretty(w, &file.sidecar)
        })?;
    }
    outputs.commit()?;
    println!(
        "latents of {} trials ({} subjects, model {}) in {}",
        all.len(),
        table.subjects.len(),
        model.name,
        run.out.join("latents.csv").display()
    );
    if !has_onsets {
        println!(
            "the trial table has no onset column: no events files written (events need onsets)"
        );
    } else {
        println!(
            "{} events files (modulators {}) in {}",
            events.len(),
            match run.scale {
                Scale::Center => "mean-centred per run",
                Scale::Zscore => "z-scored per run (sd with n − 1)",
                Scale::None => "raw",
            },
            run.out.display()
        );
        if !with_outcomes {
            println!("the trial table has no outcome_onset column: no outcome events written");
        }
        let choice: usize = events.iter().map(|e| e.skipped_choice).sum();
        let outcome: usize = events.iter().map(|e| e.skipped_outcome).sum();
        if choice + outcome > 0 {
            println!(
                "skipped {choice} choice events without onset and {outcome} outcome events \
                 without outcome_onset (events need onsets)"
            );
        }
    }
    println!("{}", super::RESEARCH_CAUTION);
    Ok(())
}
