//! `valuedrift plan`: recovery, model recovery and power of a design, by simulation.

use super::shard::{self, Shard};
use crate::files::OutputSet;
use crate::plan::cohort::Study;
use crate::plan::population::ValuesFile;
use crate::plan::spec::PlanSpec;
use crate::plan::stored::stored_studies_table;
use crate::plan::{Plan, summaries, tables};
use crate::progress::Progress;
use crate::results::fit_folder::{FolderTable, key};
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
/// A plan shard's table of its simulated studies, read by `merge`.
pub const SHARD_STUDIES: FolderTable = FolderTable::new("shard_studies");

/// The studies of all shards of a plan, gathered by `merge`, in plan order.
pub struct FromShards {
    /// Every study.
    pub studies: Vec<Study>,
    /// The shards' plan.json without the shard entry: the merged run must record the same.
    pub recorded: serde_json::Value,
    /// `merge --replace`: replace an existing result (the shards' own option is not used).
    pub replace: bool,
}

/// Whether study `job` (its position in [`Plan::jobs`], from 0) belongs to `shard`: studies are
/// dealt to the shards in turn, so each shard gets studies of every generating model.
pub fn holds(shard: Shard, job: usize) -> bool {
    job % shard.count + 1 == shard.index
}

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

/// A plan as read, with the SHA-256 of the design and population files as they were parsed.
pub struct Loaded {
    /// The plan.
    pub plan: Plan,
    /// SHA-256 of the design file.
    pub design_sha256: String,
    /// SHA-256 of the population file, when the plan names one.
    pub population_sha256: Option<String>,
}

/// Reads the plan file, its design, models and population file, and checks them together.
pub fn load(plan_path: &Path) -> Result<Loaded, Box<dyn std::error::Error>> {
    use crate::files::read_with_digest;
    let spec = PlanSpec::read(plan_path)?;
    let design_path = beside(plan_path, &spec.design);
    let (design, design_sha256) = read_with_digest(&design_path, || {
        super::input::read_table(&design_path, &crate::data::ColumnMap::default())
    })?;
    let mut candidates = Vec::new();
    for name in &spec.models {
        candidates.push(crate::model::load_model(&model_reference(plan_path, name))?);
    }
    let (values_file, population_sha256) = match &spec.population_file {
        Some(p) => {
            let path = beside(plan_path, p);
            let (values, digest) = read_with_digest(&path, || ValuesFile::read(&path))?;
            (Some(values), Some(digest))
        }
        None => (None, None),
    };
    let plan = Plan::new(spec, design, candidates, values_file)
        .map_err(|e| format!("{}: {e}", plan_path.display()))?;
    Ok(Loaded {
        plan,
        design_sha256,
        population_sha256,
    })
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
///
/// With `shard`, only the shard's studies are simulated and fitted, and the folder holds them
/// ([`SHARD_STUDIES`]) and plan.json; with `from_shards` (from `merge`) the shards' studies are
/// summarised instead of simulating. Returns the results, or None for a shard.
pub fn run(
    plan_path: &Path,
    out: &Path,
    threads: usize,
    replace: bool,
    command_line: &[String],
    (shard, from_shards): (Option<Shard>, Option<FromShards>),
) -> Result<Option<PlanResults>, Box<dyn std::error::Error>> {
    let replace = from_shards.as_ref().map_or(replace, |f| f.replace);
    let mut outputs = OutputSet::create(out, replace)?;
    let loaded = load(plan_path)?;
    let plan = &loaded.plan;
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
    let command_line = shard::without_shard(command_line);
    let mut record = record(&loaded, plan_path, &command_line);
    let jobs = plan.jobs();
    let studies = match from_shards {
        Some(done) => {
            if done.recorded != record {
                return Err(format!(
                    "{}: the plan, its design, its models or their populations differ from those \
                     the shards recorded in {RECORD}: the files have changed since the shards ran",
                    plan_path.display()
                )
                .into());
            }
            let found: Vec<(usize, usize)> = done
                .studies
                .iter()
                .map(|s| (s.generating, s.study))
                .collect();
            if found != jobs {
                return Err(format!(
                    "the shards hold {} studies; the plan has {} ({} generating model(s) × {} \
                     studies): a shard's {} does not hold its studies",
                    found.len(),
                    jobs.len(),
                    plan.generating().len(),
                    plan.spec.studies,
                    SHARD_STUDIES.csv()
                )
                .into());
            }
            done.studies
        }
        None => {
            let mine: Vec<(usize, usize)> = jobs
                .iter()
                .enumerate()
                .filter(|&(j, _)| shard.is_none_or(|s| holds(s, j)))
                .map(|(_, &job)| job)
                .collect();
            let steps = plan.total_steps() / jobs.len().max(1) * mine.len();
            let progress = Progress::new("planning", steps);
            let studies = plan.run_jobs(&mine, threads, &|| progress.inc())?;
            progress.finish();
            studies
        }
    };
    if let Some(shard) = shard {
        // Recovery, model selection and power need every study: merge makes them.
        record[key::SHARD] = serde_json::json!({
            (shard::KEY_INDEX): shard.index,
            (shard::KEY_COUNT): shard.count,
        });
        outputs.stage(&SHARD_STUDIES.csv_in(out), |w| {
            stored_studies_table(&studies).write_csv(w)
        })?;
        stage_record(&mut outputs, out, &record)?;
        outputs.commit()?;
        println!(
            "planned shard {} of {}: {} of {} studies; outputs in {} (merge the shards for the \
             tables)",
            shard.index,
            shard.count,
            studies.len(),
            jobs.len(),
            out.display()
        );
        return Ok(None);
    }
    let results = PlanResults {
        recovery: summaries::recovery(plan, &studies),
        confusion: summaries::confusion(plan, &studies),
        model_recovery: summaries::model_recovery(plan, &studies),
        power: summaries::power(plan, &studies),
        trials_needed: Vec::new(),
    };
    let results = PlanResults {
        trials_needed: summaries::trials_needed(plan, &results.recovery),
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
    tables::estimates_table(plan, &studies).stage_both(&mut outputs, out, ESTIMATES)?;
    stage_record(&mut outputs, out, &record)?;
    outputs.commit()?;
    print_results(&results);
    println!(
        "planned in {:.1} s; outputs in {}",
        started.elapsed().as_secs_f64(),
        out.display()
    );
    println!("{}", super::RESEARCH_CAUTION);
    Ok(Some(results))
}

/// Stages plan.json in `out`.
fn stage_record(
    outputs: &mut OutputSet,
    out: &Path,
    record: &serde_json::Value,
) -> Result<(), crate::files::OutputError> {
    outputs.stage(&out.join(RECORD), |w| {
        serde_json::to_writer_pretty(&mut *w, record)?;
        writeln!(w).map_err(serde_json::Error::io)
    })
}

/// The run record: the plan as read, the SHA-256 of its design and population files as they
/// were parsed (so that shards simulated on different designs are not merged as one run), each
/// generating model's population in words, the models' definitions and the command line.
fn record(loaded: &Loaded, plan_path: &Path, command_line: &[String]) -> serde_json::Value {
    let plan = &loaded.plan;
    serde_json::json!({
        "tool": "valuedrift",
        "version": env!("CARGO_PKG_VERSION"),
        "command_line": command_line,
        "plan_file": plan_path.display().to_string(),
        "plan": plan.spec,
        "design_sha256": loaded.design_sha256,
        "population_file_sha256": loaded.population_sha256,
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
