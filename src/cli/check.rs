//! `valuedrift check`: predictive checks of a fitted model against the data it was fitted to.

use crate::check::plots::{choice_figure, option_figure, rt_quantile_figure};
use crate::check::{
    CheckSettings, Condition, FLAG_FRACTION, Mode, POOLED, check_subjects, choices_table, misfit,
    misfit_table, pooled, quantiles_table, ranked_misfits,
};
use crate::files::OutputSet;

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
}

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
    let mut outputs = OutputSet::create(out, run.input.replace.replace)?;
    let (table, model, estimates) = run.input.load()?;
    let mut settings = run.settings.clone();
    if let Some(column) = &run.by {
        settings.condition = Some(
            Condition::of(column, &table.subjects)
                .map_err(|e| format!("--by {column}: {}: {e}", run.input.data.display()))?,
        );
    }
    let run = CheckRun { settings, ..run };
    let bar = crate::progress::Progress::new(
        &format!(
            "simulating {} replicate datasets of each subject",
            run.settings.sims
        ),
        table.subjects.len(),
    );
    let checks = check_subjects(&model, &estimates, &table.subjects, &run.settings, &|| {
        bar.inc()
    })?;
    bar.finish();
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
