//! The report's sections of a plan folder (`valuedrift plan`): recovery scatter plots and table,
//! power curves, model recovery and the trials needed.

use super::html::{Section, escape, figure, table};
use super::tidy::Tidy;
use super::{ReportError, distinct, entry, figures, read, rows_of, unit_of};
use std::collections::BTreeMap;
use std::path::Path;

/// Points (generating value, estimate) per kind of estimate.
type Series = BTreeMap<String, Vec<(f64, f64)>>;

/// The plan's sections (recovery, power, model recovery), each only when its table is there.
pub fn sections(dir: &Path) -> Result<Vec<Section>, ReportError> {
    let mut out = Vec::new();
    if let Some(estimates) = read(dir, "plan_estimates.csv")? {
        let recovery = read(dir, "plan_recovery.csv")?;
        let needed = read(dir, "plan_trials_needed.csv")?;
        out.push(recovery_section(
            &estimates,
            recovery.as_ref(),
            needed.as_ref(),
        )?);
    }
    if let Some(power) = read(dir, "plan_power.csv")?
        && !power.rows.is_empty()
    {
        out.push(power_section(&power)?);
    }
    if let Some(confusion) = read(dir, "plan_confusion.csv")? {
        let verdicts = read(dir, "plan_model_recovery.csv")?;
        out.push(model_recovery_section(&confusion, verdicts.as_ref())?);
    }
    Ok(out)
}

fn recovery_section(
    estimates: &Tidy,
    recovery: Option<&Tidy>,
    needed: Option<&Tidy>,
) -> Result<Section, ReportError> {
    let mut body = String::from(
        "<p>Planned parameter recovery: participants simulated from the plan's population \
         with the exact sampler and fitted as <code>fit</code> would; generating value (x) \
         against estimate (y) at the largest design size, per-subject and empirical-Bayes \
         estimates side by side.</p>",
    );
    let largest = estimates
        .rows
        .iter()
        .enumerate()
        .filter_map(|(i, _)| estimates.number(i, "trials").ok().flatten())
        .fold(0.0, f64::max);
    for model in distinct(estimates, "model") {
        let mut panels: Vec<(String, Series)> = Vec::new();
        for (i, r) in estimates.rows.iter().enumerate() {
            if estimates.text(r, "model") != model
                || estimates.number(i, "trials")? != Some(largest)
            {
                continue;
            }
            let parameter = estimates.text(r, "parameter").to_string();
            let (Some(x), Some(y)) = (
                estimates.number(i, "true_value")?,
                estimates.number(i, "estimate")?,
            ) else {
                continue;
            };
            entry(&mut panels, &parameter)
                .entry(estimates.text(r, "estimates").replace('_', "-"))
                .or_default()
                .push((x, y));
        }
        let mut figures_html = String::new();
        for (parameter, series) in panels {
            let unit = unit_of(&parameter);
            let series: Vec<(String, Vec<(f64, f64)>)> = series.into_iter().rev().collect();
            let svg = figures::scatter(
                &format!("{model}: {parameter}, {largest} trials"),
                &format!("generating value ({unit})"),
                &format!("estimate ({unit})"),
                &series,
            )?;
            figures_html.push_str(&figure(
                &svg,
                &format!("recovery of {parameter} ({model}, {largest} trials per participant)"),
            ));
        }
        body.push_str(&format!(
            "<details open><summary>{}</summary>{figures_html}</details>",
            escape(&model)
        ));
    }
    if let Some(t) = recovery {
        let columns = [
            "model",
            "trials",
            "estimates",
            "parameter",
            "n",
            "r",
            "r_study_median",
            "r_study_low",
            "r_study_high",
            "bias",
            "rmse",
            "coverage",
            "share_at_bound",
        ];
        body.push_str(
            "<p>r pools every simulated participant; r_study_* are the median and 2.5–97.5 % \
             range of r within single studies; coverage is the share of 95 % intervals that \
             contain the generating value.</p>",
        );
        body.push_str(&table(&columns, &rows_of(t, &columns)));
    }
    if let Some(t) = needed
        && !t.rows.is_empty()
    {
        let columns = [
            "model",
            "estimates",
            "parameter",
            "target_r",
            "trials",
            "r_at_largest",
        ];
        body.push_str(
            "<p>Fewest listed trials per participant reaching the target r (empty: \
                       none of the listed sizes).</p>",
        );
        body.push_str(&table(&columns, &rows_of(t, &columns)));
    }
    Ok(Section {
        id: "plan-recovery",
        title: "Plan: parameter recovery".into(),
        body,
    })
}

fn power_section(power: &Tidy) -> Result<Section, ReportError> {
    let mut body = String::from(
        "<p>Share of simulated studies whose two-sided Welch test (Welch 1947) finds the \
         planned group difference, against participants per group, with Wilson (1927) 95 % \
         intervals; dashed: the normal-theory power of the same test at the simulated \
         estimates' group means and standard deviations (noncentral t; Lenth 1989).</p>",
    );
    for model in distinct(power, "model") {
        let mut curves: BTreeMap<u64, figures::Curve> = BTreeMap::new();
        let mut parameter = String::new();
        for (i, r) in power.rows.iter().enumerate() {
            if power.text(r, "model") != model {
                continue;
            }
            parameter = power.text(r, "parameter").to_string();
            let trials = power.number(i, "trials")?.unwrap_or(0.0) as u64;
            let n = power.number(i, "participants_per_group")?.unwrap_or(0.0);
            let p = power.number(i, "power")?.unwrap_or(f64::NAN);
            let lo = power.number(i, "power_low")?.unwrap_or(p);
            let hi = power.number(i, "power_high")?.unwrap_or(p);
            let curve = curves.entry(trials).or_insert_with(|| figures::Curve {
                label: format!("{trials} trials"),
                points: Vec::new(),
                theory: Vec::new(),
            });
            curve.points.push((n, p, lo, hi));
            if let Some(t) = power.number(i, "power_normal_theory")? {
                curve.theory.push((n, t));
            }
        }
        let curves: Vec<figures::Curve> = curves.into_values().collect();
        let svg = figures::curves(
            &format!("{model}: power for {parameter}"),
            "participants per group",
            "power (share of studies)",
            &curves,
            Some((0.8, "power 0.8")),
        )?;
        body.push_str(&figure(
            &svg,
            &format!("power of the contrast on {parameter}, model {model}"),
        ));
    }
    let columns = [
        "model",
        "parameter",
        "trials",
        "participants_per_group",
        "studies",
        "power",
        "power_low",
        "power_high",
        "power_normal_theory",
        "true_difference",
        "estimated_difference",
    ];
    body.push_str(&table(&columns, &rows_of(power, &columns)));
    Ok(Section {
        id: "plan-power",
        title: "Plan: power".into(),
        body,
    })
}

fn model_recovery_section(
    confusion: &Tidy,
    verdicts: Option<&Tidy>,
) -> Result<Section, ReportError> {
    let mut body = String::from(
        "<p>Per-subject model recovery: share of each generating model's simulated \
         participants for which each candidate had the lowest BIC (rows: generating, columns: \
         selected).</p>",
    );
    let selected = distinct(confusion, "selected");
    for trials in distinct(confusion, "trials") {
        let mut rows = Vec::new();
        for generating in distinct(confusion, "generating") {
            let mut row = vec![generating.clone()];
            for s in &selected {
                let share = confusion
                    .rows
                    .iter()
                    .find(|r| {
                        confusion.text(r, "trials") == trials
                            && confusion.text(r, "generating") == generating
                            && confusion.text(r, "selected") == s
                    })
                    .map_or(String::new(), |r| confusion.text(r, "share").to_string());
                row.push(share);
            }
            rows.push(row);
        }
        let mut header = vec!["generating \\ selected"];
        header.extend(selected.iter().map(String::as_str));
        body.push_str(&format!(
            "<p>{} trials per participant:</p>",
            escape(&trials)
        ));
        body.push_str(&table(&header, &rows));
    }
    if let Some(v) = verdicts
        && !v.rows.is_empty()
    {
        let columns = [
            "trials",
            "generating",
            "studies",
            "won",
            "share_won",
            "share_won_low",
            "share_won_high",
            "mean_pxp",
            "subjects_correct",
        ];
        body.push_str(
            "<p>Group-level verdict: in how many simulated studies random-effects selection \
             (Stephan et al. 2009) gave the generating model the highest protected exceedance \
             probability (Rigoux et al. 2014), with Wilson 95 % intervals.</p>",
        );
        body.push_str(&table(&columns, &rows_of(v, &columns)));
    }
    Ok(Section {
        id: "plan-models",
        title: "Plan: model recovery".into(),
        body,
    })
}
