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
use crate::results::TableParts;
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

/// Reads, computes and writes every output (nothing is written on error). The trial table is
/// read a part at a time and each subject's latents, events files and design matrices are
/// written as soon as they are computed, so memory does not grow with the number of subjects.
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
    let fitted = run.input.load_labels()?;
    let model = &fitted.model;
    let labels = bids_labels(&fitted.subjects)?;
    let has_onsets = fitted.present.iter().any(|c| c == "onset");
    let with_outcomes = fitted.present.iter().any(|c| c == "outcome_onset");
    let hrf = DoubleGamma::CANONICAL;
    let varying = crate::exports::varying_parameter_names(model);
    let mut latents_file = TableParts::stage(&mut outputs, out, "latents")?;
    let mut written = Written::default();
    let progress = Progress::new(
        "exporting: latents, events and design files of subjects",
        fitted.subjects.len(),
    );
    fitted.for_each_part(&run.input.data, &mut |part| {
        let mut rows = Vec::new();
        for (k, subject) in &part {
            let subject_rows = latents(model, subject, &fitted.estimates[*k])?;
            if has_onsets {
                let events = events_files(
                    model,
                    subject,
                    &labels[*k],
                    run.task,
                    &subject_rows,
                    run.scale,
                    with_outcomes,
                );
                for f in &events {
                    stage_pair(&mut outputs, out, &f.stem, &f.sidecar, &|w| f.write_tsv(w))?;
                    written.skipped_choice += f.skipped_choice;
                    written.skipped_outcome += f.skipped_outcome;
                    if let Some(timing) = run.timing {
                        let d = design_file(f, &hrf, timing, run.scale, with_outcomes);
                        stage_pair(&mut outputs, out, &d.stem, &d.sidecar, &|w| d.write_tsv(w))?;
                        written.designs.push(DesignNote::of(&d));
                    }
                }
                written.events += events.len();
            }
            rows.extend(subject_rows);
            progress.inc();
        }
        if !rows.is_empty() {
            written.trials += rows.len();
            latents_file.write(&latents_table(&rows, &varying))?;
        }
        Ok(())
    })?;
    progress.finish();
    latents_file.finish()?;
    if written.events > 0 {
        // The files a BIDS derivative dataset has at its root besides the subjects' folders.
        for (name, value) in [
            (
                "dataset_description.json",
                dataset_description(model, super::RESEARCH_CAUTION),
            ),
            ("participants.json", participants_sidecar()),
        ] {
            outputs.stage(&out.join(name), |w| serde_json::to_writer_pretty(w, &value))?;
        }
        outputs.stage(&out.join("participants.tsv"), |w| {
            participants_table(&fitted.subjects, &labels).write_delimited(w, b'\t')
        })?;
        let readme = dataset_readme(model, super::RESEARCH_CAUTION);
        for (name, text) in [("README", readme.as_str()), (".bidsignore", BIDS_IGNORE)] {
            outputs.stage(&out.join(name), |w| w.write_all(text.as_bytes()))?;
        }
    }
    outputs.commit()?;
    println!(
        "latents of {} trials ({} subjects, model {}) in {}",
        written.trials,
        fitted.subjects.len(),
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
            written.events,
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
            report_designs(&written.designs, timing, &hrf, out);
        }
        let (choice, outcome) = (written.skipped_choice, written.skipped_outcome);
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

/// Stages a TSV file and its JSON sidecar (an events file or a design matrix).
fn stage_pair(
    outputs: &mut OutputSet,
    out: &Path,
    stem: &str,
    sidecar: &serde_json::Value,
    fill: &dyn Fn(&mut dyn std::io::Write) -> std::io::Result<()>,
) -> Result<(), crate::files::OutputError> {
    outputs.stage(&out.join(format!("{stem}.tsv")), fill)?;
    outputs.stage(&out.join(format!("{stem}.json")), |w| {
        serde_json::to_writer_pretty(w, sidecar)
    })
}

/// What an export wrote, for its summary.
#[derive(Default)]
struct Written {
    trials: usize,
    events: usize,
    skipped_choice: usize,
    skipped_outcome: usize,
    designs: Vec<DesignNote>,
}

/// What the summary says of one design matrix (the matrix itself is written and dropped).
struct DesignNote {
    stem: String,
    events_end: f64,
    events_after_last_scan: usize,
    zero_columns: Vec<String>,
}

impl DesignNote {
    fn of(d: &DesignFile) -> Self {
        DesignNote {
            stem: d.stem.clone(),
            events_end: d.events_end,
            events_after_last_scan: d.events_after_last_scan,
            zero_columns: d.zero_columns.clone(),
        }
    }
}

/// Prints what was written and warns (stderr) about runs whose events outlast the scans and
/// about columns that are zero at every scan.
fn report_designs(designs: &[DesignNote], timing: Timing, hrf: &DoubleGamma, out: &Path) {
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
