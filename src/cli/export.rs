//! `valuedrift export`: per-trial latent variables of a fitted model (tidy table), BIDS
//! events files with parametric modulators and, given the scan timing, design matrices of the
//! events convolved with the haemodynamic response, for imaging analyses.

use crate::exports::hrf::{DesignFile, DoubleGamma, Timing, design_file};
use crate::exports::{
    BIDS_IGNORE, Scale, bids_label, bids_labels, dataset_description, dataset_readme, events_files,
    latents, latents_table, participants_sidecar, participants_table,
};
use crate::files::OutputSet;
use crate::progress::Progress;
use std::path::Path;

/// Everything `export` needs, resolved from the command line.
pub struct ExportRun<'a> {
    /// Fit folder, trial table, model, output folder, column mapping and estimates.
    pub input: &'a super::FittedRun,
    /// Scaling of the modulators in the events files.
    pub scale: Scale,
    /// Scan timing for design matrices (None: no design matrices).
    pub timing: Option<Timing>,
    /// BIDS task label for the file names.
    pub task: &'a str,
}

/// The scan timing from `--tr`, `--scans` and `--microtime-bins`: both of the first two or
/// neither; TR a finite number of seconds > 0, scans and bins ≥ 1.
pub fn timing(
    tr: Option<f64>,
    scans: Option<usize>,
    bins: Option<usize>,
) -> Result<Option<Timing>, String> {
    let (tr, scans) = match (tr, scans) {
        (Some(tr), Some(scans)) => (tr, scans),
        (None, None) => {
            return match bins {
                Some(_) => Err("--microtime-bins needs --tr and --scans".into()),
                None => Ok(None),
            };
        }
        (Some(_), None) => {
            return Err("--tr needs --scans (the number of volumes of each run)".into());
        }
        (None, Some(_)) => {
            return Err("--scans needs --tr (the repetition time in seconds)".into());
        }
    };
    if !(tr.is_finite() && tr > 0.0) {
        return Err(format!(
            "--tr {tr}: expected a repetition time in seconds > 0"
        ));
    }
    if scans == 0 {
        return Err("--scans 0: expected a number of volumes ≥ 1".into());
    }
    let bins = bins.unwrap_or(Timing::DEFAULT_BINS);
    if bins == 0 {
        return Err("--microtime-bins 0: expected a number of bins per scan ≥ 1".into());
    }
    Ok(Some(Timing { tr, scans, bins }))
}

/// Reads, computes and writes every output at once (nothing is written on error).
pub fn run(run: ExportRun<'_>) -> Result<(), Box<dyn std::error::Error>> {
    let out = run.input.out.as_path();
    if bids_label(run.task).as_deref() != Some(run.task) {
        return Err(format!(
            "--task {}: expected a BIDS label (letters and digits only, e.g. orchard)",
            run.task
        )
        .into());
    }
    let mut outputs = OutputSet::create(out, run.input.replace.replace)?;
    let (table, model, estimates) = run.input.load()?;
    let labels = bids_labels(&table.subjects)?;
    let has_onsets = table.has_column("onset");
    let with_outcomes = table.has_column("outcome_onset");
    let mut all = Vec::new();
    let mut events = Vec::new();
    let progress = Progress::new("exporting: latents of subjects", table.subjects.len());
    for ((subject, natural), label) in table.subjects.iter().zip(&estimates).zip(&labels) {
        let rows = latents(&model, subject, natural)?;
        progress.inc();
        if has_onsets {
            events.extend(events_files(
                &model,
                subject,
                label,
                run.task,
                &rows,
                run.scale,
                with_outcomes,
            ));
        }
        all.extend(rows);
    }
    progress.finish();
    let hrf = DoubleGamma::CANONICAL;
    let designs: Vec<DesignFile> = match run.timing {
        Some(timing) if has_onsets => events
            .iter()
            .map(|e| design_file(e, &hrf, timing, run.scale, with_outcomes))
            .collect(),
        _ => Vec::new(),
    };
    latents_table(&all, &crate::exports::varying_parameter_names(&model)).stage_both(
        &mut outputs,
        out,
        "latents",
    )?;
    if !events.is_empty() {
        // The files a BIDS derivative dataset has at its root besides the subjects' folders.
        for (name, value) in [
            (
                "dataset_description.json",
                dataset_description(&model, super::RESEARCH_CAUTION),
            ),
            ("participants.json", participants_sidecar()),
        ] {
            outputs.stage(&out.join(name), |w| serde_json::to_writer_pretty(w, &value))?;
        }
        outputs.stage(&out.join("participants.tsv"), |w| {
            participants_table(&table.subjects, &labels).write_delimited(w, b'\t')
        })?;
        let readme = dataset_readme(&model, super::RESEARCH_CAUTION);
        for (name, text) in [("README", readme.as_str()), (".bidsignore", BIDS_IGNORE)] {
            outputs.stage(&out.join(name), |w| w.write_all(text.as_bytes()))?;
        }
    }
    {
        // Each events file and design matrix: a TSV and its JSON sidecar.
        type Fill<'f> = &'f dyn Fn(&mut dyn std::io::Write) -> std::io::Result<()>;
        let mut stage_pair = |stem: &str, sidecar: &serde_json::Value, fill: Fill<'_>| {
            outputs.stage(&out.join(format!("{stem}.tsv")), fill)?;
            outputs.stage(&out.join(format!("{stem}.json")), |w| {
                serde_json::to_writer_pretty(w, sidecar)
            })
        };
        let files = Progress::new(
            "exporting: events and design files",
            events.len() + designs.len(),
        );
        for f in &events {
            stage_pair(&f.stem, &f.sidecar, &|w| f.write_tsv(w))?;
            files.inc();
        }
        for f in &designs {
            stage_pair(&f.stem, &f.sidecar, &|w| f.write_tsv(w))?;
            files.inc();
        }
        files.finish();
    }
    outputs.commit()?;
    println!(
        "latents of {} trials ({} subjects, model {}) in {}",
        all.len(),
        table.subjects.len(),
        model.name,
        out.join("latents.csv").display()
    );
    if !has_onsets {
        println!(
            "the trial table has no onset column: no events files written (events need onsets)"
        );
    } else {
        println!(
            "{} events files (modulators {}) in the BIDS derivative dataset {} \
             (sub-<label>/func/)",
            events.len(),
            match run.scale {
                Scale::Center => "mean-centred per run",
                Scale::Zscore => "z-scored per run (sd with n − 1)",
                Scale::None => "raw",
            },
            out.display()
        );
        if !with_outcomes {
            println!("the trial table has no outcome_onset column: no outcome events written");
        }
        if let Some(timing) = run.timing {
            report_designs(&designs, timing, &hrf, out);
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
    if run.timing.is_some() && !has_onsets {
        println!("no design matrices written either (the haemodynamic regressors need onsets)");
    }
    println!("{}", super::RESEARCH_CAUTION);
    Ok(())
}

/// Prints what was written and warns (stderr) about runs whose events outlast the scans and
/// about columns that are zero at every scan.
fn report_designs(designs: &[DesignFile], timing: Timing, hrf: &DoubleGamma, out: &Path) {
    println!(
        "{} design matrices ({} scans of TR {} s, {} microtime bins per scan; canonical double \
         gamma, peak {:.3} s, sampled at the start of each scan) in {}",
        designs.len(),
        timing.scans,
        timing.tr,
        timing.bins,
        hrf.peak_time(),
        out.display()
    );
    for d in designs {
        let volumes = (d.events_end / timing.tr - 1e-9).ceil();
        if volumes > timing.scans as f64 {
            eprintln!(
                "warning: {}: the events last until {} s, {} volumes at TR {} s, more than \
                 --scans {} ({} s); {} events start after the last scan and are left out, \
                 and events running past it are cut there",
                d.stem,
                d.events_end,
                volumes,
                timing.tr,
                timing.scans,
                timing.end(),
                d.events_after_last_scan,
            );
        }
        if !d.zero_columns.is_empty() {
            eprintln!(
                "warning: {}: column(s) {} are zero at every scan (no events or no variation \
                 within the scans); a GLM cannot estimate them",
                d.stem,
                d.zero_columns.join(", ")
            );
        }
    }
}
