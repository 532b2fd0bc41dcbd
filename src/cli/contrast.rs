//! `valuedrift contrast`: group comparisons of one model's fitted parameters.

use crate::files::OutputSet;
use crate::group::contrast::{
    ParameterContrast, contrast, contrast_table, groups_table, read_estimates,
};
use crate::results::fit_folder::RunRecord;
use std::path::Path;

/// Reads the parameters table of `source` in `fits`, compares the free parameters of `model` across the groups of
/// column `by`, writes `contrast.csv`, `contrast_groups.csv` and their Parquet twins to `out`
/// (atomically, all or nothing; earlier outputs of the same names only with `replace`) and prints
/// a summary.
pub fn run(
    fits: &Path,
    model: &str,
    by: &str,
    out: &Path,
    source: crate::results::EstimateSource,
    replace: bool,
) -> Result<(), Box<dyn std::error::Error>> {
    if source == crate::results::EstimateSource::EmpiricalBayes
        && RunRecord::if_readable(fits).is_some_and(|record| record.per_group_priors)
    {
        eprintln!(
            "warning: these empirical-Bayes estimates were shrunk towards one prior per group, \
             which pulls the groups apart: their contrast is anticonservative (p values too \
             small). Contrast the per-subject estimates, or refit with one pooled prior \
             (fit --hierarchical without --by)."
        );
    }
    let rows = contrast_and_write(fits, model, by, out, source, replace)?;
    print_summary(&rows);
    println!("outputs in {}", out.display());
    println!("{}", super::RESEARCH_CAUTION);
    Ok(())
}

/// The contrasts of `run`, with their tables written to `out` (all or nothing).
pub fn contrast_and_write(
    fits: &Path,
    model: &str,
    by: &str,
    out: &Path,
    source: crate::results::EstimateSource,
    replace: bool,
) -> Result<Vec<ParameterContrast>, Box<dyn std::error::Error>> {
    let mut outputs = OutputSet::adding_to(out, fits, replace)?;
    let input = source.parameters_file(fits);
    let estimates = read_estimates(&input, model, by)?;
    let rows = contrast(&estimates).map_err(|e| format!("{}: {e}", input.display()))?;
    contrast_table(&rows).stage_both(&mut outputs, out, "contrast")?;
    groups_table(&rows).stage_both(&mut outputs, out, "contrast_groups")?;
    outputs.commit()?;
    Ok(rows)
}

fn cell(x: Option<f64>, width: usize, precision: usize) -> String {
    match x {
        Some(v) => format!("{v:>width$.precision$}"),
        None => format!("{:>width$}", "-"),
    }
}

/// Prints one line per parameter: group means, Welch t, Mann–Whitney, Hedges' g and q value.
pub fn print_summary(rows: &[ParameterContrast]) {
    let Some(first) = rows.first() else { return };
    let labels: Vec<&str> = first.groups.iter().map(|g| g.group.as_str()).collect();
    // The name column fits the longest name (generated names such as boundary[instruction=speed]
    // are long).
    let w = rows
        .iter()
        .map(|r| r.parameter.len())
        .max()
        .unwrap_or(0)
        .max(16);
    if first.groups.len() == 2 {
        println!(
            "{} minus {}: Welch t test (Welch 1947), Mann-Whitney U (normal approximation, tie and \
             continuity corrected), Hedges' g [95 %] (Hedges 1981), BH q (Benjamini & Hochberg 1995)",
            labels[0], labels[1]
        );
        println!(
            "{:<w$} {:>7} {:>10} {:>10} {:>8} {:>7} {:>9} {:>9} {:>21} {:>9} {:>8}",
            "parameter",
            "n",
            "mean_1",
            "mean_2",
            "t",
            "df",
            "p",
            "U p",
            "g [95 %]",
            "q",
            "at bound"
        );
        for r in rows {
            let g = r.hedges.map_or(format!("{:>21}", "-"), |h| {
                format!("{:>6.2} [{:>5.2}, {:>5.2}]", h.g, h.ci_low, h.ci_high)
            });
            println!(
                "{:<w$} {:>7} {} {} {} {} {} {} {g:>21} {} {:>8}",
                r.parameter,
                format!("{}/{}", r.groups[0].values.len(), r.groups[1].values.len()),
                cell(crate::group::mean(&r.groups[0].values), 10, 4),
                cell(crate::group::mean(&r.groups[1].values), 10, 4),
                cell(r.welch.map(|w| w.t), 8, 3),
                cell(r.welch.map(|w| w.df), 7, 1),
                cell(r.welch.map(|w| w.p), 9, 4),
                cell(r.mann_whitney.map(|m| m.p), 9, 4),
                cell(r.q_value, 9, 4),
                r.groups.iter().map(|g| g.n_at_bound).sum::<usize>(),
            );
        }
    } else {
        println!(
            "groups {}: Welch ANOVA (Welch 1951), Kruskal-Wallis H (tie corrected; Kruskal & \
             Wallis 1952), BH q (Benjamini & Hochberg 1995); per-group means in contrast_groups.csv",
            labels.join(", ")
        );
        println!(
            "{:<w$} {:>8} {:>6} {:>7} {:>9} {:>8} {:>9} {:>9} {:>8}",
            "parameter", "F", "df1", "df2", "p", "H", "H p", "q", "at bound"
        );
        for r in rows {
            println!(
                "{:<w$} {} {} {} {} {} {} {} {:>8}",
                r.parameter,
                cell(r.welch_anova.map(|w| w.f), 8, 3),
                cell(r.welch_anova.map(|w| w.df1), 6, 0),
                cell(r.welch_anova.map(|w| w.df2), 7, 1),
                cell(r.welch_anova.map(|w| w.p), 9, 4),
                cell(r.kruskal.map(|k| k.h), 8, 3),
                cell(r.kruskal.map(|k| k.p), 9, 4),
                cell(r.q_value, 9, 4),
                r.groups.iter().map(|g| g.n_at_bound).sum::<usize>(),
            );
        }
    }
}
