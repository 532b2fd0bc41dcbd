//! `valuedrift check`: predictive checks of a fitted model against the data it was fitted to.

use super::shard::{self, Shard};
use crate::check::plots::{choice_figure, option_figure, rt_quantile_figure};
use crate::check::{
    CheckSettings, Condition, FLAG_FRACTION, Mode, POOLED, check_subjects, choices_table, misfit,
    misfit_table, pooled, quantiles_table, ranked_misfits,
};
use crate::check::{SubjectCheck, stored_checks_table};
use crate::files::OutputSet;
use crate::results::fit_folder::{FolderTable, RUN_RECORD};
use sha2::{Digest, Sha256};

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

/// The per-subject checks of all shards of a check, in table order.
pub struct FromShards {
    /// One per subject.
    pub checks: Vec<SubjectCheck>,
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
) -> Result<serde_json::Value, std::io::Error> {
    let bytes = std::fs::read(&run.input.data)?;
    Ok(serde_json::json!({
        "tool": "valuedrift",
        "version": env!("CARGO_PKG_VERSION"),
        "command": COMMAND,
        "command_line": shard::without_shard(run.command_line),
        "model": { "name": model.name, "definition": model.text },
        "data": {
            "path": run.input.data.display().to_string(),
            "sha256": format!("{:x}", Sha256::digest(&bytes)),
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
    let (mut table, model, mut estimates) = run.input.load()?;
    let mut settings = run.settings.clone();
    if let Some(column) = &run.by {
        // Levels in order of first appearance in the whole table, in a shard as in one run.
        settings.condition = Some(
            Condition::of(column, &table.subjects)
                .map_err(|e| format!("--by {column}: {}: {e}", run.input.data.display()))?,
        );
    }
    let table_subjects: Vec<String> = table.subjects.iter().map(|s| s.id.clone()).collect();
    if let Some(shard) = run.shard {
        let keep: Vec<bool> = table.subjects.iter().map(|s| shard.holds(&s.id)).collect();
        shard::kept(&mut table.subjects, &keep);
        shard::kept(&mut estimates, &keep);
    }
    let mut run = CheckRun { settings, ..run };
    let checks = match run.from_shards.take() {
        Some(done) => done.checks,
        None => {
            let bar = crate::progress::Progress::new(
                &format!(
                    "simulating {} replicate datasets of each subject",
                    run.settings.sims
                ),
                table.subjects.len(),
            );
            let checks =
                check_subjects(&model, &estimates, &table.subjects, &run.settings, &|| {
                    bar.inc()
                })?;
            bar.finish();
            checks
        }
    };
    let mut record = run_record(&run, &model)?;
    if let Some(shard) = run.shard {
        // The pooled statistics and figures need every subject: merge makes them.
        record[crate::results::fit_folder::key::SHARD] = shard.record(&table_subjects);
        outputs.stage(&SHARD_CHECKS.csv_in(out), |w| {
            stored_checks_table(&checks).write_csv(w)
        })?;
        outputs.stage(&out.join(RUN_RECORD), |w| {
            serde_json::to_writer_pretty(w, &record)
        })?;
        outputs.commit()?;
        println!(
            "checked shard {} of {}: {} subjects; outputs in {} (merge the shards for the \
             tables and figures)",
            shard.index,
            shard.count,
            checks.len(),
            out.display()
        );
        return Ok(());
    }
    outputs.stage(&out.join(RUN_RECORD), |w| {
        serde_json::to_writer_pretty(w, &record)
    })?;
    let pooled = pooled(&checks);
    let condition = run.settings.condition.as_ref();
    choices_table(&checks, &pooled, condition).stage_both(&mut outputs, out, "check_choices")?;
    let rt_figure = rt_quantile_figure(&pooled, POOLED)?;
    if let Some(svg) = &rt_figure {
        quantiles_table(&checks, &pooled, condition).stage_both(
            &mut outputs,
            out,
            "check_quantiles",
        )?;
        outputs.stage(&out.join("check_rt_quantiles.svg"), |w| {
            w.write_all(svg.as_bytes())
        })?;
    }
    misfit_table(&checks).stage_both(&mut outputs, out, "check_misfit")?;
    let svg = choice_figure(&pooled, POOLED)?;
    outputs.stage(&out.join("check_choices.svg"), |w| {
        w.write_all(svg.as_bytes())
    })?;
    if let Some(svg) = option_figure(&pooled, POOLED)? {
        outputs.stage(&out.join("check_options.svg"), |w| {
            w.write_all(svg.as_bytes())
        })?;
    }
    let ranked = ranked_misfits(&checks);
    for (rank, (check, _)) in ranked.iter().take(WORST_FIGURES).enumerate() {
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

    let free = checks.iter().filter(|c| c.mode == Mode::Free).count();
    println!(
        "predictive check of model {} ({} replicate datasets per subject, seed {}): {} subjects, \
         {free} simulated freely (outcome_if_a/outcome_if_b known), {} one step ahead of the \
         observed history",
        model.name,
        run.settings.sims,
        run.settings.seed,
        checks.len(),
        checks.len() - free
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
        .filter(|r| r.1.fraction_outside.is_some_and(|f| f > FLAG_FRACTION))
        .count();
    println!(
        "{flagged} of {} subjects flagged (more than {:.0} % of statistics outside); worst by \
         rms z:",
        checks.len(),
        100.0 * FLAG_FRACTION
    );
    for (check, m) in ranked.iter().take(3) {
        println!(
            "  {} ({}): {} outside, rms z {}",
            check.subject,
            check.mode.as_str(),
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
