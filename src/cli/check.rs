//! `valuedrift check`: predictive checks of a fitted model against the data it was fitted to.

use super::shard::{self, Shard};
use crate::check::plots::{choice_figure, option_figure, rt_quantile_figure};
use crate::check::{
    CheckSettings, Condition, FLAG_FRACTION, Mode, POOLED, Pool, Ranking, check_subjects,
    choices_table, misfit, misfit_table, quantiles_table,
};
use crate::check::{SubjectCheck, stored_checks_table};
use crate::files::OutputSet;
use crate::results::TableParts;
use crate::results::fit_folder::{FolderTable, RUN_RECORD};

/// Subjects, worst first by rms z, that get figures of their own.
const WORST_FIGURES: usize = 3;

/// Everything `check` needs, resolved from the command line.
pub struct CheckRun<'a> {
    /// Fit folder, trial table, model, output folder, column mapping and estimates.
    pub input: &'a super::FittedRun,
    /// Replicate datasets per subject, seed and deadline.
    pub settings: CheckSettings,
    /// A column whose levels get statistics of their own.
    pub by: Option<String>,
    /// Check only this shard's subjects (`--shard I/N`).
    pub shard: Option<Shard>,
    /// The checks of every shard of this run, gathered by `merge`: used instead of simulating.
    pub from_shards: Option<FromShards>,
    /// The command line, for run.json.
    pub command_line: &'a [String],
}

/// The next subject's check of a check's shards, in table order; `None` after the last.
pub type NextCheck = Box<dyn FnMut() -> Result<Option<SubjectCheck>, Box<dyn std::error::Error>>>;

/// The per-subject checks of all shards of a check, read in table order as they are needed.
pub struct FromShards {
    /// The next subject's check.
    pub next: NextCheck,
    /// `merge --replace`: replace an existing result (the shards' own option is not used).
    pub replace: bool,
}

/// A check shard's table of per-subject statistics and replicates, read by `merge`.
pub const SHARD_CHECKS: FolderTable = FolderTable::new("shard_checks");

/// The check's run record: the command line (without `--shard`), the model and its definition,
/// the trial table and its checksum, the fit folder, the estimates and the settings.
fn run_record(
    run: &CheckRun<'_>,
    model: &crate::model::Model,
) -> Result<serde_json::Value, crate::files::InputError> {
    let sha256 = crate::files::sha256_of_file(&run.input.data)?;
    Ok(serde_json::json!({
        "tool": "valuedrift",
        "version": env!("CARGO_PKG_VERSION"),
        "command": COMMAND,
        "command_line": shard::without_shard(run.command_line),
        "model": { "name": model.name, "definition": model.text },
        "data": {
            "path": run.input.data.display().to_string(),
            "sha256": sha256,
        },
        "fits": run.input.fits.display().to_string(),
        "estimates": run.input.estimates.estimates.parameters().csv(),
        "sims": run.settings.sims,
        "seed": run.settings.seed,
        "deadline": run.settings.deadline,
        "lock": run.settings.lock,
        "by": run.by,
        "caution": super::RESEARCH_CAUTION,
    }))
}

/// The `command` of a check's run.json (a fit's has none).
pub const COMMAND: &str = "check";

/// Reads, simulates, summarises and writes every output at once (nothing is written on error).
pub fn run(run: CheckRun<'_>) -> Result<(), Box<dyn std::error::Error>> {
    let out = run.input.out.as_path();
    if run.settings.sims < crate::check::MIN_REPLICATES {
        return Err(format!(
            "--sims {}: expected at least {} replicate datasets (the fewest that give a band; 100 recommended)",
            run.settings.sims,
            crate::check::MIN_REPLICATES
        )
        .into());
    }
    if let Some(d) = run.settings.deadline
        && !(d.is_finite() && d > 0.0)
    {
        return Err(format!("--deadline {d}: expected a number of seconds > 0").into());
    }
    let replace = run
        .from_shards
        .as_ref()
        .map_or(run.input.replace.replace, |f| f.replace);
    let mut outputs = OutputSet::create(out, replace)?;
    let fitted = run.input.load_labels()?;
    let model = &fitted.model;
    let mut settings = run.settings.clone();
    if let Some(column) = &run.by {
        // Levels in order of first appearance in the whole table, in a shard as in one run.
        let mut condition = Condition::of(column, &[])?;
        fitted.for_each_part(&run.input.data, &mut |part| {
            let subjects: Vec<_> = part.into_iter().map(|(_, s)| s).collect();
            condition
                .add_levels(&subjects)
                .map_err(|e| format!("--by {column}: {}: {e}", run.input.data.display()).into())
        })?;
        settings.condition = Some(condition);
    }
    let table_subjects: Vec<String> = fitted.subjects.iter().map(|s| s.id.clone()).collect();
    let mut run = CheckRun { settings, ..run };
    let from_shards = run.from_shards.take();
    let record = run_record(&run, model)?;
    let shard = run.shard;
    let checked = table_subjects
        .iter()
        .filter(|id| shard.is_none_or(|s| s.holds(id)))
        .count();
    let bar = crate::progress::Progress::new(
        &format!(
            "simulating {} replicate datasets of each subject",
            run.settings.sims
        ),
        if from_shards.is_some() { 0 } else { checked },
    );
    // Each part's checks are written (or, in a shard, kept) and pooled as they come.
    let mut sink = match shard {
        Some(_) => Sink::Shard(Vec::new()),
        None => Sink::Whole(Box::new(WholeCheck::stage(
            &mut outputs,
            out,
            run.settings.condition.clone(),
        )?)),
    };
    match from_shards {
        Some(mut done) => {
            let mut more = true;
            while more {
                let mut group = Vec::with_capacity(SUBJECTS_PER_ROW_GROUP);
                while group.len() < SUBJECTS_PER_ROW_GROUP {
                    match (done.next)()? {
                        Some(check) => group.push(check),
                        None => {
                            more = false;
                            break;
                        }
                    }
                }
                sink.add(&mut outputs, group)?;
            }
        }
        None => fitted.for_each_part(&run.input.data, &mut |part| {
            if crate::progress::stop_requested() {
                return Err(crate::progress::Stopped.into());
            }
            let (indices, subjects): (Vec<usize>, Vec<_>) = part
                .into_iter()
                .filter(|(_, s)| shard.is_none_or(|shard| shard.holds(&s.id)))
                .unzip();
            let estimates: Vec<Vec<f64>> = indices
                .iter()
                .map(|&k| fitted.estimates[k].clone())
                .collect();
            let checks =
                check_subjects(model, &estimates, &subjects, &run.settings, &|| bar.inc())?;
            sink.add(&mut outputs, checks)
        })?,
    }
    bar.finish();
    let whole = match sink {
        Sink::Shard(checks) => {
            let shard = shard.ok_or("a shard's checks without a shard")?;
            return write_shard(outputs, out, shard, record, &table_subjects, &checks);
        }
        Sink::Whole(whole) => whole,
    };
    outputs.stage(&out.join(RUN_RECORD), |w| {
        serde_json::to_writer_pretty(w, &record)
    })?;
    let mut whole = *whole;
    let rest = std::mem::take(&mut whole.pending);
    if !rest.is_empty() {
        whole.write(&mut outputs, rest)?;
    }
    let WholeCheck {
        choices,
        quantiles,
        pool,
        ranking,
        condition,
        free,
        ..
    } = whole;
    let pooled = pool.finish();
    let condition = condition.as_ref();
    let mut choices = choices;
    choices.write(&choices_table(&[], &pooled, condition))?;
    choices.finish()?;
    let rt_figure = rt_quantile_figure(&pooled, POOLED)?;
    if let Some(mut quantiles) = quantiles {
        quantiles.write(&quantiles_table(&[], &pooled, condition))?;
        quantiles.finish()?;
    }
    if let Some(svg) = &rt_figure {
        outputs.stage(&out.join("check_rt_quantiles.svg"), |w| {
            w.write_all(svg.as_bytes())
        })?;
    }
    let (ranked, worst) = ranking.finish();
    misfit_table(&ranked).stage_both(&mut outputs, out, "check_misfit")?;
    let svg = choice_figure(&pooled, POOLED)?;
    outputs.stage(&out.join("check_choices.svg"), |w| {
        w.write_all(svg.as_bytes())
    })?;
    if let Some(svg) = option_figure(&pooled, POOLED)? {
        outputs.stage(&out.join("check_options.svg"), |w| {
            w.write_all(svg.as_bytes())
        })?;
    }
    for (rank, (check, _)) in worst.iter().enumerate() {
        let scope = format!("subject {} (misfit rank {})", check.subject, rank + 1);
        let svg = choice_figure(&check.statistics, &scope)?;
        outputs.stage(
            &out.join(format!("check_worst{}_choices.svg", rank + 1)),
            |w| w.write_all(svg.as_bytes()),
        )?;
        if let Some(svg) = rt_quantile_figure(&check.statistics, &scope)? {
            outputs.stage(
                &out.join(format!("check_worst{}_rt_quantiles.svg", rank + 1)),
                |w| w.write_all(svg.as_bytes()),
            )?;
        }
        if let Some(svg) = option_figure(&check.statistics, &scope)? {
            outputs.stage(
                &out.join(format!("check_worst{}_options.svg", rank + 1)),
                |w| w.write_all(svg.as_bytes()),
            )?;
        }
    }
    outputs.commit()?;

    println!(
        "predictive check of model {} ({} replicate datasets per subject, seed {}): {} subjects, \
         {free} simulated freely (outcome_if_a/outcome_if_b known), {} one step ahead of the \
         observed history",
        model.name,
        run.settings.sims,
        run.settings.seed,
        ranked.len(),
        ranked.len() - free
    );
    let all = misfit(&pooled);
    if let (Some(f), Some(z)) = (all.fraction_outside, all.rms_z) {
        println!(
            "pooled: {:.1} % of {} statistics outside their 95 % predicted bands, rms z {z:.2} \
             (about 5 % and 1 for a model that fits)",
            100.0 * f,
            all.n_statistics
        );
    }
    let flagged = ranked
        .iter()
        .filter(|r| r.misfit.fraction_outside.is_some_and(|f| f > FLAG_FRACTION))
        .count();
    println!(
        "{flagged} of {} subjects flagged (more than {:.0} % of statistics outside); worst by \
         rms z:",
        ranked.len(),
        100.0 * FLAG_FRACTION
    );
    for r in ranked.iter().take(3) {
        let m = &r.misfit;
        println!(
            "  {} ({}): {} outside, rms z {}",
            r.subject,
            r.mode.as_str(),
            m.fraction_outside
                .map_or("n/a".into(), |f| format!("{:.1} %", 100.0 * f)),
            m.rms_z.map_or("n/a".into(), |z| format!("{z:.2}"))
        );
    }
    if rt_figure.is_none() {
        println!(
            "model {} has no response times: choice statistics only",
            model.name
        );
    }
    println!("outputs in {}", out.display());
    println!("{}", super::RESEARCH_CAUTION);
    Ok(())
}

/// Where a check's per-subject results go as the parts come: a shard keeps them for
/// `shard_checks.csv`; a whole check writes their rows and pools them.
enum Sink {
    Shard(Vec<SubjectCheck>),
    Whole(Box<WholeCheck>),
}

/// A whole check being written: the per-subject rows of the choice and quantile tables, the
/// pooled sums, the ranking and the count of subjects simulated freely.
struct WholeCheck {
    choices: TableParts,
    quantiles: Option<TableParts>,
    pool: Pool,
    ranking: Ranking,
    condition: Option<Condition>,
    free: usize,
    /// The output folder.
    out: std::path::PathBuf,
    /// Checks not yet written (fewer than a row group's subjects).
    pending: Vec<SubjectCheck>,
}

impl WholeCheck {
    fn stage(
        outputs: &mut OutputSet,
        out: &std::path::Path,
        condition: Option<Condition>,
    ) -> Result<Self, crate::files::OutputError> {
        Ok(WholeCheck {
            choices: TableParts::stage(outputs, out, "check_choices")?,
            quantiles: None,
            pool: Pool::default(),
            ranking: Ranking::new(WORST_FIGURES),
            condition,
            free: 0,
            out: out.to_path_buf(),
            pending: Vec::new(),
        })
    }
}

impl Sink {
    /// Takes the checks of the next subjects (table order).
    fn add(
        &mut self,
        outputs: &mut OutputSet,
        checks: Vec<SubjectCheck>,
    ) -> Result<(), Box<dyn std::error::Error>> {
        match self {
            Sink::Shard(kept) => kept.extend(checks),
            Sink::Whole(whole) => {
                whole.pending.extend(checks);
                while whole.pending.len() >= SUBJECTS_PER_ROW_GROUP {
                    let group: Vec<SubjectCheck> =
                        whole.pending.drain(..SUBJECTS_PER_ROW_GROUP).collect();
                    whole.write(outputs, group)?;
                }
            }
        }
        Ok(())
    }
}

/// Subjects whose rows make one Parquet row group of the check's tables: fixed, so that a check
/// and the merge of its shards write the same bytes however the subjects arrive.
const SUBJECTS_PER_ROW_GROUP: usize = 64;

impl WholeCheck {
    /// Writes the rows of `checks` and pools them.
    fn write(
        &mut self,
        outputs: &mut OutputSet,
        checks: Vec<SubjectCheck>,
    ) -> Result<(), Box<dyn std::error::Error>> {
        let condition = self.condition.as_ref();
        self.choices
            .write(&choices_table(&checks, &[], condition))?;
        let quantiles = quantiles_table(&checks, &[], condition);
        if quantiles.rows() > 0 {
            if self.quantiles.is_none() {
                self.quantiles = Some(TableParts::stage(outputs, &self.out, "check_quantiles")?);
            }
            if let Some(table) = self.quantiles.as_mut() {
                table.write(&quantiles)?;
            }
        }
        self.free += checks.iter().filter(|c| c.mode == Mode::Free).count();
        self.pool.add(&checks);
        self.ranking.add(checks);
        Ok(())
    }
}

/// Writes a shard's folder: its checks (every statistic and replicate, pooled by `merge`) and its
/// run.json.
fn write_shard(
    mut outputs: OutputSet,
    out: &std::path::Path,
    shard: Shard,
    mut record: serde_json::Value,
    table_subjects: &[String],
    checks: &[SubjectCheck],
) -> Result<(), Box<dyn std::error::Error>> {
    // The pooled statistics and figures need every subject: merge makes them.
    record[crate::results::fit_folder::key::SHARD] = shard.record(table_subjects);
    outputs.stage(&SHARD_CHECKS.csv_in(out), |w| {
        stored_checks_table(checks).write_csv(w)
    })?;
    outputs.stage(&out.join(RUN_RECORD), |w| {
        serde_json::to_writer_pretty(w, &record)
    })?;
    outputs.commit()?;
    println!(
        "checked shard {} of {}: {} subjects; outputs in {} (merge the shards for the tables \
         and figures)",
        shard.index,
        shard.count,
        checks.len(),
        out.display()
    );
    Ok(())
}
