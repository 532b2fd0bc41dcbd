//! `valuedrift demo`: the main job on the embedded demo study.

use super::fit::{FitRun, Hierarchical, print_diagnostics, print_group_summary, print_summary};
use crate::data::ColumnMap;
use crate::fit::{EmOptions, FitOptions};
use crate::group::selection::{BmsOptions, Evidence};
use crate::model::built_in_models;
use std::collections::BTreeMap;
use std::path::Path;

/// The demo study's trials (simulated with `valuedrift simulate`, see demo-data/README.md).
const TRIALS: &str = include_str!("../../demo-data/orchard_trials.csv");
/// The model that generated them.
const REFERENCE: &str = "gainloss-linear";
/// The values that generated them.
const GENERATING: &str = include_str!("../../demo-data/generating_values.csv");

fn median(mut xs: Vec<f64>) -> f64 {
    xs.sort_by(f64::total_cmp);
    let n = xs.len();
    if n == 0 {
        f64::NAN
    } else if n % 2 == 1 {
        xs[n / 2]
    } else {
        0.5 * (xs[n / 2 - 1] + xs[n / 2])
    }
}

/// Folder of the demo's predictive check of the reference model, inside the output folder.
pub const CHECK_FOLDER: &str = "check";
/// The demo's HTML report, inside the output folder.
pub const REPORT: &str = "report.html";

/// Fits every built-in model but the races to the demo study, prints the summary and writes the outputs: the
/// fit, the comparison and the contrast are written into one staging folder that replaces `out`
/// as a whole (an existing non-empty `out` only with `replace`).
pub fn run(
    out: &Path,
    threads: usize,
    replace: bool,
    command_line: &[String],
) -> Result<(), Box<dyn std::error::Error>> {
    let mut outputs = crate::files::OutputSet::create(out, replace)?;
    let staging = outputs.staging_dir()?.to_path_buf();
    let dir = tempfile::tempdir()?;
    let data = dir.path().join("demo_trials.csv");
    std::fs::write(&data, TRIALS)?;
    // The demo weighs the cost-weighting hypotheses; the racing accumulators (made for three
    // or more options, slower to fit) and the numerical-engine stages (collapsing bounds,
    // urgency, leak) are left to their own tests and examples.
    let names: Vec<String> = built_in_models()
        .into_iter()
        .filter(|m| m.signal() != crate::model::components::Signal::DriftPerOption)
        .filter(|m| !crate::model::components::uses_numerical_engine(m.component_names[3]))
        .map(|m| m.name)
        .collect();
    println!(
        "valuedrift demo: the orchard study (invented): 2 cohorts x 20 participants x 240 trials,"
    );
    println!(
        "choosing between plots that differ in harvest probability and effort; {} models.",
        names.len()
    );
    let start = std::time::Instant::now();
    let fitted = super::fit::run(
        FitRun {
            data: &data,
            models: &names,
            out: &staging,
            replace: false,
            options: FitOptions::default(),
            threads,
            columns: ColumnMap::default(),
            hierarchical: Some(Hierarchical {
                per_group: true,
                em: EmOptions::default(),
                models: vec![REFERENCE.to_string()],
                covariates: Vec::new(),
                centred: true,
            }),
            screen: crate::data::ScreenSettings::default(),
            shard: None,
            journal: None,
            from_shards: None,
        },
        command_line,
    )?;
    println!("fitted in {:.1} s", start.elapsed().as_secs_f64());
    println!();
    print_summary(&fitted);
    print_diagnostics(&fitted.fits, &fitted.models, out);
    print_group_summary(&fitted.groups);
    println!();
    let compare = super::compare::CompareRun {
        fits: &staging,
        by: "group",
        summary: &crate::results::fit_folder::SUMMARY.csv(),
        out: &staging,
        evidence: Evidence::Bic,
        samples: BmsOptions::default().samples,
        seed: 1,
        replace: false,
    };
    let selection = super::compare::compare_and_write(&compare)?;
    super::compare::print_summary(&selection, compare.samples);
    println!();
    println!("{REFERENCE}: per-subject estimates, low-drive against steady");
    let rows = super::contrast::contrast_and_write(
        &staging,
        REFERENCE,
        "group",
        &staging,
        crate::results::EstimateSource::PerSubject,
        false,
    )?;
    super::contrast::print_summary(&rows);

    // Per-cohort medians of the reference model's estimates beside the generating values.
    let mut generating: BTreeMap<(String, String), Vec<f64>> = BTreeMap::new();
    let mut lines = GENERATING.lines();
    let header: Vec<&str> = lines.next().unwrap_or("").split(',').collect();
    for line in lines {
        let cells: Vec<&str> = line.split(',').collect();
        for (k, name) in header.iter().enumerate().skip(2) {
            if let Some(x) = cells.get(k).and_then(|c| c.parse::<f64>().ok()) {
                generating
                    .entry((cells[1].to_string(), name.to_string()))
                    .or_default()
                    .push(x);
            }
        }
    }
    println!();
    println!(
        "{REFERENCE}, per cohort: median of per-subject estimates / empirical-Bayes group median (median of the generating values)"
    );
    let groups = fitted.group_labels.clone();
    print!("{:<16}", "parameter");
    for g in &groups {
        print!(" {g:>26}");
    }
    println!();
    for name in header.iter().skip(2) {
        print!("{name:<16}");
        for g in &groups {
            let estimates: Vec<f64> = fitted
                .fits
                .iter()
                .filter(|f| f.model == REFERENCE && &f.group == g)
                .filter_map(|f| {
                    f.estimates
                        .iter()
                        .find(|e| e.name == *name)
                        .map(|e| e.estimate)
                })
                .collect();
            let group_median = fitted
                .groups
                .iter()
                .find(|s| s.model == REFERENCE && &s.scope == g)
                .and_then(|s| s.parameters.iter().find(|p| p.name == *name))
                .map_or(f64::NAN, |p| p.natural_median);
            let truth = generating
                .get(&(g.clone(), name.to_string()))
                .cloned()
                .unwrap_or_default();
            print!(
                " {:>26}",
                format!(
                    "{:.3} / {:.3} ({:.3})",
                    median(estimates),
                    group_median,
                    median(truth)
                )
            );
        }
        println!();
    }
    println!();
    let check_dir = staging.join(CHECK_FOLDER);
    super::check::run(super::check::CheckRun {
        input: &super::FittedRun {
            fits: staging.clone(),
            data: data.clone(),
            model: REFERENCE.to_string(),
            out: check_dir.clone(),
            columns: String::new(),
            reading: super::input::ReadingArgs {
                choice_codes: String::new(),
                missing: String::new(),
            },
            estimates: super::EstimatesArg {
                estimates: crate::results::EstimateSource::PerSubject,
            },
            replace: super::ReplaceArg { replace: false },
        },
        settings: crate::check::CheckSettings {
            sims: 100,
            seed: 1,
            deadline: None,
            lock: None,
            condition: None,
        },
        by: None,
        shard: None,
        from_shards: None,
        command_line,
    })?;
    let report = crate::report::build(
        &crate::report::ReportInputs {
            fits: Some(staging.clone()),
            check: Some(check_dir),
            plan: None,
        },
        super::RESEARCH_CAUTION,
    )?;
    std::fs::write(staging.join(REPORT), report)?;
    outputs.commit()?;
    println!();
    println!(
        "report of the whole run (open in a browser): {}",
        out.join(REPORT).display()
    );
    println!("outputs in {}", out.display());
    println!("{}", super::RESEARCH_CAUTION);
    Ok(())
}
