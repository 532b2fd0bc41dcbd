//! `valuedrift plan`: recovery, model recovery and power of a design, by simulation.

use crate::files::OutputSet;
use crate::plan::population::ValuesFile;
use crate::plan::spec::PlanSpec;
use crate::plan::{Plan, summaries, tables};
use crate::progress::Progress;
use std::path::{Path, PathBuf};

/// File names of the plan's outputs (each also as .parquet, but the run record).
pub const RECOVERY: &str = "plan_recovery";
/// Per-subject confusion matrix.
pub const CONFUSION: &str = "plan_confusion";
/// Group-level model recovery.
pub const MODEL_RECOVERY: &str = "plan_model_recovery";
/// Power per design size and participants per group.
pub const POWER: &str = "plan_power";
/// Trials needed for the target recovery.
pub const TRIALS_NEEDED: &str = "plan_trials_needed";
/// Every simulated participant's generating values and estimates.
pub const ESTIMATES: &str = "plan_estimates";
/// The run record.
pub const RECORD: &str = "plan.json";

/// A path of the plan file, relative to the plan file's folder unless absolute.
fn beside(plan: &Path, path: &Path) -> PathBuf {
    if path.is_absolute() {
        path.to_path_buf()
    } else {
        plan.parent().unwrap_or(Path::new(".")).join(path)
    }
}

/// A model name, or a model file relative to the plan file.
fn model_reference(plan: &Path, name: &str) -> String {
    let relative = beside(plan, Path::new(name));
    if name.ends_with(".toml") || relative.exists() {
        relative.display().to_string()
    } else {
        name.to_string()
    }
}

/// Reads the plan file, its design, models and population file, and checks them together.
pub fn load(plan_path: &Path) -> Result<Plan, Box<dyn std::error::Error>> {
    let spec = PlanSpec::read(plan_path)?;
    let design_path = beside(plan_path, &spec.design);
    let design = super::input::read_table(&design_path, &crate::data::ColumnMap::default())?;
    let mut candidates = Vec::new();
    for name in &spec.models {
        candidates.push(crate::model::load_model(&model_reference(plan_path, name))?);
    }
    let values_file = match &spec.population_file {
        Some(p) => Some(ValuesFile::read(&beside(plan_path, p))?),
        None => None,
    };
    Plan::new(spec, design, candidates, values_file)
        .map_err(|e| format!("{}: {e}", plan_path.display()).into())
}

/// Everything the plan computed.
pub struct PlanResults {
    /// Parameter recovery.
    pub recovery: Vec<summaries::Recovery>,
    /// Per-subject confusion matrix.
    pub confusion: Vec<summaries::Confusion>,
    /// Group-level model recovery.
    pub model_recovery: Vec<summaries::ModelRecovery>,
    /// Power.
    pub power: Vec<summaries::Power>,
    /// Trials needed.
    pub trials_needed: Vec<summaries::TrialsNeeded>,
}

/// Runs `valuedrift plan`: simulates and fits, summarises, writes every table (CSV and Parquet)
/// and the run record as one set, and prints the main figures.
pub fn run(
    plan_path: &Path,
    out: &Path,
    threads: usize,
    replace: bool,
    command_line: &[String],
) -> Result<PlanResults, Box<dyn std::error::Error>> {
    let mut outputs = OutputSet::create(out, replace)?;
    let plan = load(plan_path)?;
    let started = std::time::Instant::now();
    eprintln!(
        "plan: {} generating model(s) × {} studies × {} group(s) × {} participants, {} design \
         size(s), {} candidate model(s): {} steps (per-subject fits and empirical-Bayes group \
         fits)",
        plan.generating().len(),
        plan.spec.studies,
        plan.groups.len(),
        plan.largest_participants(),
        plan.spec.trials.len(),
        plan.candidates.len(),
        plan.total_steps()
    );
    for (model, population) in plan.candidates.iter().zip(&plan.populations) {
        let Some(population) = population else {
            continue;
        };
        for (spec, source) in model.parameters.iter().zip(&population.sources) {
            if matches!(source, crate::plan::population::Source::StartRange(..)) {
                eprintln!(
                    "note: {}: {} is not in the plan's population: {}",
                    model.name,
                    spec.name,
                    source.describe()
                );
            }
        }
        if !population.file_rows_left_out.is_empty() {
            eprintln!(
                "note: {}: {} rows of the population file left out (a value at or beyond a \
                 bound of the model; lines {:?})",
                model.name,
                population.file_rows_left_out.len(),
                population.file_rows_left_out
            );
        }
    }
    let progress = Progress::new("planning", plan.total_steps());
    let studies = plan.run(threads, &|| progress.inc())?;
    progress.finish();
    let results = PlanResults {
        recovery: summaries::recovery(&plan, &studies),
        confusion: summaries::confusion(&plan, &studies),
        model_recovery: summaries::model_recovery(&plan, &studies),
        power: summaries::power(&plan, &studies),
        trials_needed: Vec::new(),
    };
    let results = PlanResults {
        trials_needed: summaries::trials_needed(&plan, &results.recovery),
        ..results
    };
    tables::recovery_table(&results.recovery).stage_both(&mut outputs, out, RECOVERY)?;
    tables::confusion_table(&results.confusion).stage_both(&mut outputs, out, CONFUSION)?;
    tables::model_recovery_table(&results.model_recovery).stage_both(
        &mut outputs,
        out,
        MODEL_RECOVERY,
    )?;
    tables::power_table(&results.power).stage_both(&mut outputs, out, POWER)?;
    tables::trials_needed_table(&results.trials_needed).stage_both(
        &mut outputs,
        out,
        TRIALS_NEEDED,
    )?;
    tables::estimates_table(&plan, &studies).stage_both(&mut outputs, out, ESTIMATES)?;
    let record = record(&plan, plan_path, command_line);
    outputs.stage(&out.join(RECORD), |w| {
        serde_json::to_writer_pretty(&mut *w, &record)?;
        writeln!(w).map_err(serde_json::Error::io)
    })?;
    outputs.commit()?;
    print_results(&results);
    println!(
        "planned in {:.1} s; outputs in {}",
        started.elapsed().as_secs_f64(),
        out.display()
    );
    println!("{}", super::RESEARCH_CAUTION);
    Ok(results)
}

/// The run record: the plan as read, each generating model's population in words, the models'
/// definitions and the command line.
fn record(plan: &Plan, plan_path: &Path, command_line: &[String]) -> serde_json::Value {
    serde_json::json!({
        "tool": "valuedrift",
        "version": env!("CARGO_PKG_VERSION"),
        "command_line": command_line,
        "plan_file": plan_path.display().to_string(),
        "plan": plan.spec,
        "groups": plan.groups,
        "models": plan.candidates.iter().map(|m| serde_json::json!({
            "name": m.name,
            "origin": m.origin,
            "definition": m.text,
        })).collect::<Vec<_>>(),
        "populations": plan.candidates.iter().zip(&plan.populations).filter_map(|(m, p)| {
            let p = p.as_ref()?;
            Some(serde_json::json!({
                "model": m.name,
                "parameters": m.parameters.iter().zip(&p.sources).filter(|(s, _)| s.is_free())
                    .map(|(s, source)| serde_json::json!({
                        "parameter": s.name,
                        "generated": source.describe(),
                    })).collect::<Vec<_>>(),
                "population_file_lines_left_out": p.file_rows_left_out,
            }))
        }).collect::<Vec<_>>(),
        "caution": super::RESEARCH_CAUTION,
    })
}

fn optional(x: Option<f64>) -> String {
    x.map_or("-".to_string(), |v| format!("{v:.3}"))
}

/// Prints recovery r per parameter and design size, the model-recovery verdicts and the power.
fn print_results(results: &PlanResults) {
    println!("parameter recovery (Pearson r, per-subject estimates; 95 % interval coverage):");
    for r in results
        .recovery
        .iter()
        .filter(|r| r.kind == summaries::EstimateKind::PerSubject)
    {
        println!(
            "  {:<24} {:>5} trials  {:<16} r {}  bias {:+.3}  coverage {}  at bound {:.1} %",
            r.model,
            r.trials,
            r.parameter,
            optional(r.r),
            r.bias,
            optional(r.coverage),
            100.0 * r.at_bound
        );
    }
    if !results.model_recovery.is_empty() {
        println!(
            "model recovery (share of studies where the generating model has the highest \
             protected exceedance probability; share of participants selected by BIC):"
        );
        for m in &results.model_recovery {
            println!(
                "  {:<24} {:>5} trials  studies won {}/{}  participants {:.1} %",
                m.generating,
                m.trials,
                m.won,
                m.studies,
                100.0 * m.subjects_correct
            );
        }
    }
    if !results.power.is_empty() {
        println!("power of the group contrast (Welch test; 95 % Wilson interval; normal theory):");
        for p in &results.power {
            println!(
                "  {:<24} {:<16} {:>5} trials  {:>4} per group  {:.3} [{:.3}, {:.3}]  {}",
                p.model,
                p.parameter,
                p.trials,
                p.participants,
                p.power,
                p.interval.0,
                p.interval.1,
                optional(p.normal_theory)
            );
        }
    }
    for t in &results.trials_needed {
        if t.kind == summaries::EstimateKind::PerSubject {
            println!(
                "  trials for r ≥ {}: {:<24} {:<16} {}",
                t.target_r,
                t.model,
                t.parameter,
                t.trials
                    .map_or("not reached in the listed sizes".to_string(), |n| n
                        .to_string())
            );
        }
    }
}
