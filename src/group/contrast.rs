//! Group contrasts of one model's fitted parameters, read from a `parameters.csv` of
//! `valuedrift fit`.
//!
//! Only free parameters (`fixed` = false) are compared. Estimates at a bound of their range are
//! kept and counted (`n_at_bound`): dropping them would bias the group means, keeping them
//! silently would hide that the interval of that subject is unreliable.
//!
//! Output layout (two files, one row per parameter in the first, one per parameter and group in
//! the second):
//! * `contrast.csv`: `parameter, n_groups, group_1, group_2, n_1, n_2, n_at_bound, mean_1,
//!   mean_2, sd_1, sd_2, welch_t, welch_df, welch_p, mann_whitney_u, mann_whitney_p, hedges_g,
//!   g_ci_low, g_ci_high, welch_anova_f, welch_anova_df1, welch_anova_df2, welch_anova_p,
//!   kruskal_h, kruskal_df, kruskal_p, q_value`. The two-group columns (`group_1` … `g_ci_high`)
//!   are filled only when there are exactly two groups and are empty otherwise; the omnibus
//!   columns (Welch ANOVA, Kruskal–Wallis) are filled for any number of groups ≥ 2 (with two
//!   groups they repeat the t test as F = t², and the rank test without continuity correction).
//!   `q_value` is the Benjamini–Hochberg q value across the parameters of the Welch p values:
//!   `welch_p` with two groups, `welch_anova_p` with more. Parameters without a p value are left
//!   out of the count m.
//! * `contrast_groups.csv`: `parameter, group, n, n_at_bound, mean, sd, median`.
//!
//! Groups are ordered by their text (byte order), so `group_1` < `group_2` and differences are
//! group_1 minus group_2.

use super::{
    HedgesG, KruskalWallis, MannWhitney, WelchAnova, WelchT, benjamini_hochberg, hedges_g,
    kruskal_wallis, mann_whitney_u, mean, variance, welch_anova, welch_t_test,
};
use crate::files::InputError;
use crate::results::parameters_file::read_rows;
use crate::results::{Column, Table};
use std::collections::BTreeSet;
use std::path::Path;

/// One subject's free estimate of one parameter.
#[derive(Clone, Debug, PartialEq)]
pub struct Estimate {
    /// Subject label.
    pub subject: String,
    /// Value of the `--by` column.
    pub group: String,
    /// Parameter name.
    pub parameter: String,
    /// Point estimate.
    pub estimate: f64,
    /// Whether the estimate lies at a bound of the parameter's range.
    pub at_bound: bool,
}

/// Reads the free-parameter estimates of `model` from a `parameters.csv`, grouping by column
/// `by` ([`crate::results::parameters_file::read_rows`]). Errors name the file, line (header =
/// line 1) and column.
pub fn read_estimates(path: &Path, model: &str, by: &str) -> Result<Vec<Estimate>, InputError> {
    let mut out = Vec::new();
    for row in read_rows(path, model, Some(by))? {
        if row.fixed {
            continue;
        }
        if row.group.is_empty() {
            return Err(InputError::at(
                path,
                row.line,
                by,
                format!("subject '{}' has no value in column '{by}'", row.subject),
            ));
        }
        out.push(Estimate {
            subject: row.subject,
            group: row.group,
            parameter: row.parameter,
            estimate: row.estimate,
            at_bound: row.at_bound,
        });
    }
    if out.is_empty() {
        return Err(InputError::file(
            path,
            format!("no free parameter of model '{model}' (every estimate is fixed)"),
        ));
    }
    Ok(out)
}

/// Per-group values of one parameter.
#[derive(Clone, Debug, PartialEq)]
pub struct GroupValues {
    /// Group label.
    pub group: String,
    /// Estimates, in file order.
    pub values: Vec<f64>,
    /// How many of them are at a bound.
    pub n_at_bound: usize,
}

/// The comparison of one parameter across groups.
#[derive(Clone, Debug, PartialEq)]
pub struct ParameterContrast {
    /// Parameter name.
    pub parameter: String,
    /// Groups in byte order of their labels.
    pub groups: Vec<GroupValues>,
    /// Welch's t test (two groups only).
    pub welch: Option<WelchT>,
    /// Mann–Whitney U (two groups only).
    pub mann_whitney: Option<MannWhitney>,
    /// Hedges' g with 95 % interval (two groups only).
    pub hedges: Option<HedgesG>,
    /// Welch's ANOVA.
    pub welch_anova: Option<WelchAnova>,
    /// Kruskal–Wallis.
    pub kruskal: Option<KruskalWallis>,
    /// Benjamini–Hochberg q value of the Welch p value across parameters.
    pub q_value: Option<f64>,
}

impl ParameterContrast {
    /// The Welch p value entering the q values: the t test with two groups, the ANOVA with more.
    pub fn welch_p(&self) -> Option<f64> {
        if self.groups.len() == 2 {
            self.welch.map(|w| w.p)
        } else {
            self.welch_anova.map(|w| w.p)
        }
    }
}

/// Compares every parameter across the groups present in `estimates` (parameters in order of
/// first appearance). Errors when there are fewer than two groups.
pub fn contrast(estimates: &[Estimate]) -> Result<Vec<ParameterContrast>, String> {
    let all_groups: BTreeSet<&str> = estimates.iter().map(|e| e.group.as_str()).collect();
    if all_groups.len() < 2 {
        return Err(format!(
            "need at least two groups to compare, found {} ({})",
            all_groups.len(),
            all_groups.into_iter().collect::<Vec<_>>().join(", ")
        ));
    }
    let mut parameters: Vec<&str> = Vec::new();
    for e in estimates {
        if !parameters.contains(&e.parameter.as_str()) {
            parameters.push(&e.parameter);
        }
    }
    let mut rows: Vec<ParameterContrast> = parameters
        .iter()
        .map(|&parameter| {
            let groups: Vec<GroupValues> = all_groups
                .iter()
                .map(|&group| {
                    let mine: Vec<&Estimate> = estimates
                        .iter()
                        .filter(|e| e.parameter == parameter && e.group == group)
                        .collect();
                    GroupValues {
                        group: group.to_string(),
                        values: mine.iter().map(|e| e.estimate).collect(),
                        n_at_bound: mine.iter().filter(|e| e.at_bound).count(),
                    }
                })
                .collect();
            let slices: Vec<&[f64]> = groups.iter().map(|g| g.values.as_slice()).collect();
            let two = slices.len() == 2;
            ParameterContrast {
                parameter: parameter.to_string(),
                welch: if two {
                    welch_t_test(slices[0], slices[1])
                } else {
                    None
                },
                mann_whitney: if two {
                    mann_whitney_u(slices[0], slices[1])
                } else {
                    None
                },
                hedges: if two {
                    hedges_g(slices[0], slices[1], 0.95)
                } else {
                    None
                },
                welch_anova: welch_anova(&slices),
                kruskal: kruskal_wallis(&slices),
                q_value: None,
                groups,
            }
        })
        .collect();
    let with_p: Vec<(usize, f64)> = rows
        .iter()
        .enumerate()
        .filter_map(|(i, r)| r.welch_p().map(|p| (i, p)))
        .collect();
    let p: Vec<f64> = with_p.iter().map(|x| x.1).collect();
    for ((i, _), q) in with_p.iter().zip(benjamini_hochberg(&p)) {
        rows[*i].q_value = Some(q);
    }
    Ok(rows)
}

/// Median of a sample (mean of the two middle values for even n); `None` when empty.
pub fn median(x: &[f64]) -> Option<f64> {
    if x.is_empty() {
        return None;
    }
    let mut v = x.to_vec();
    v.sort_by(f64::total_cmp);
    let n = v.len();
    Some(if n % 2 == 1 {
        v[n / 2]
    } else {
        (v[n / 2 - 1] + v[n / 2]) / 2.0
    })
}

/// Group `i` of a two-group row; `None` for rows of more groups.
fn side(r: &ParameterContrast, i: usize) -> Option<&GroupValues> {
    if r.groups.len() == 2 {
        r.groups.get(i)
    } else {
        None
    }
}

/// The `contrast.csv` table (columns in the module documentation).
pub fn contrast_table(rows: &[ParameterContrast]) -> Table {
    let text =
        |f: &dyn Fn(&ParameterContrast) -> String| Column::Text(rows.iter().map(f).collect());
    let number = |f: &dyn Fn(&ParameterContrast) -> Option<f64>| {
        Column::Number(rows.iter().map(f).collect())
    };
    Table::default()
        .with("parameter", text(&|r| r.parameter.clone()))
        .with(
            "n_groups",
            Column::Integer(rows.iter().map(|r| r.groups.len() as i64).collect()),
        )
        .with(
            "group_1",
            text(&|r| side(r, 0).map_or(String::new(), |g| g.group.clone())),
        )
        .with(
            "group_2",
            text(&|r| side(r, 1).map_or(String::new(), |g| g.group.clone())),
        )
        .with(
            "n_1",
            number(&|r| side(r, 0).map(|g| g.values.len() as f64)),
        )
        .with(
            "n_2",
            number(&|r| side(r, 1).map(|g| g.values.len() as f64)),
        )
        .with(
            "n_at_bound",
            Column::Integer(
                rows.iter()
                    .map(|r| r.groups.iter().map(|g| g.n_at_bound as i64).sum())
                    .collect(),
            ),
        )
        .with(
            "mean_1",
            number(&|r| side(r, 0).and_then(|g| mean(&g.values))),
        )
        .with(
            "mean_2",
            number(&|r| side(r, 1).and_then(|g| mean(&g.values))),
        )
        .with(
            "sd_1",
            number(&|r| side(r, 0).and_then(|g| variance(&g.values)).map(f64::sqrt)),
        )
        .with(
            "sd_2",
            number(&|r| side(r, 1).and_then(|g| variance(&g.values)).map(f64::sqrt)),
        )
        .with("welch_t", number(&|r| r.welch.map(|w| w.t)))
        .with("welch_df", number(&|r| r.welch.map(|w| w.df)))
        .with("welch_p", number(&|r| r.welch.map(|w| w.p)))
        .with("mann_whitney_u", number(&|r| r.mann_whitney.map(|m| m.u)))
        .with("mann_whitney_p", number(&|r| r.mann_whitney.map(|m| m.p)))
        .with("hedges_g", number(&|r| r.hedges.map(|h| h.g)))
        .with("g_ci_low", number(&|r| r.hedges.map(|h| h.ci_low)))
        .with("g_ci_high", number(&|r| r.hedges.map(|h| h.ci_high)))
        .with("welch_anova_f", number(&|r| r.welch_anova.map(|w| w.f)))
        .with("welch_anova_df1", number(&|r| r.welch_anova.map(|w| w.df1)))
        .with("welch_anova_df2", number(&|r| r.welch_anova.map(|w| w.df2)))
        .with("welch_anova_p", number(&|r| r.welch_anova.map(|w| w.p)))
        .with("kruskal_h", number(&|r| r.kruskal.map(|k| k.h)))
        .with("kruskal_df", number(&|r| r.kruskal.map(|k| k.df)))
        .with("kruskal_p", number(&|r| r.kruskal.map(|k| k.p)))
        .with("q_value", number(&|r| r.q_value))
}

/// The `contrast_groups.csv` table: one row per parameter and group.
pub fn groups_table(rows: &[ParameterContrast]) -> Table {
    let cells: Vec<(&str, &GroupValues)> = rows
        .iter()
        .flat_map(|r| r.groups.iter().map(move |g| (r.parameter.as_str(), g)))
        .collect();
    Table::default()
        .with(
            "parameter",
            Column::Text(cells.iter().map(|c| c.0.to_string()).collect()),
        )
        .with(
            "group",
            Column::Text(cells.iter().map(|c| c.1.group.clone()).collect()),
        )
        .with(
            "n",
            Column::Integer(cells.iter().map(|c| c.1.values.len() as i64).collect()),
        )
        .with(
            "n_at_bound",
            Column::Integer(cells.iter().map(|c| c.1.n_at_bound as i64).collect()),
        )
        .with(
            "mean",
            Column::Number(cells.iter().map(|c| mean(&c.1.values)).collect()),
        )
        .with(
            "sd",
            Column::Number(
                cells
                    .iter()
                    .map(|c| variance(&c.1.values).map(f64::sqrt))
                    .collect(),
            ),
        )
        .with(
            "median",
            Column::Number(cells.iter().map(|c| median(&c.1.values)).collect()),
        )
}
