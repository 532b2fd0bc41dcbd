//! The selection of a whole run, pooled and per group, and its output tables.

use super::evidence::*;
use super::variational::*;
use crate::results::{Column, Table};
use std::collections::BTreeSet;

/// Everything `compare` computes: the pooled selection, one per group, and the group test.
#[derive(Clone, Debug, PartialEq)]
pub struct Selection {
    /// The comparison set.
    pub comparison: Comparison,
    /// Evidence used.
    pub evidence: Evidence,
    /// Scope `all`, then one per group (byte order) when there are at least two groups.
    pub scopes: Vec<(String, Bms)>,
    /// The between-group test, when there are at least two groups.
    pub difference: Option<GroupDifference>,
}

/// Scope label of the pooled comparison over all subjects.
pub const POOLED_SCOPE: &str = "all";

/// Why [`select`] cannot select.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum SelectionError {
    /// The pooled selection failed.
    #[error(transparent)]
    Pooled(#[from] BmsError),
    /// A group has the label of the pooled scope.
    #[error("a group is labelled '{POOLED_SCOPE}', the name of the pooled scope: relabel it")]
    PooledLabel,
    /// The selection within a group failed.
    #[error("group '{group}': {error}")]
    Group {
        /// The group's label.
        group: String,
        /// Why.
        error: BmsError,
    },
}

/// Runs [`random_effects_bms`] on all subjects (scope `all`, stream 0) and, with two or more
/// groups, on each group (streams 1, 2, … in byte order of the labels), and the between-group
/// test. A group labelled [`POOLED_SCOPE`] is refused.
pub fn select(
    comparison: Comparison,
    evidence: Evidence,
    options: &BmsOptions,
) -> Result<Selection, SelectionError> {
    let pooled = random_effects_bms(
        &comparison.log_evidence,
        &BmsOptions {
            stream: 0,
            ..*options
        },
    )?;
    let labels: BTreeSet<&str> = comparison.groups.iter().map(String::as_str).collect();
    if labels.len() >= 2 && labels.contains(POOLED_SCOPE) {
        return Err(SelectionError::PooledLabel);
    }
    let mut scopes = vec![(POOLED_SCOPE.to_string(), pooled)];
    if labels.len() >= 2 {
        for (index, label) in labels.iter().enumerate() {
            let rows: Vec<Vec<f64>> = comparison
                .log_evidence
                .iter()
                .zip(&comparison.groups)
                .filter(|(_, g)| g.as_str() == *label)
                .map(|(r, _)| r.clone())
                .collect();
            let bms = random_effects_bms(
                &rows,
                &BmsOptions {
                    stream: index as u64 + 1,
                    ..*options
                },
            )
            .map_err(|error| SelectionError::Group {
                group: label.to_string(),
                error,
            })?;
            scopes.push((label.to_string(), bms));
        }
    }
    let difference = (scopes.len() > 1).then(|| {
        let groups: Vec<(String, &Bms)> = scopes[1..].iter().map(|(g, b)| (g.clone(), b)).collect();
        group_difference(&scopes[0].1, &groups)
    });
    Ok(Selection {
        comparison,
        evidence,
        scopes,
        difference,
    })
}

/// One row of the `model_selection.csv` table.
struct SelectionRow<'a> {
    scope: &'a str,
    model: usize,
    bms: &'a Bms,
    won: usize,
    /// Summed log evidence, AIC and BIC over the scope's subjects.
    sums: [f64; 3],
}

/// Index of the largest value (the first of ties).
fn arg_max(x: &[f64]) -> usize {
    x.iter()
        .enumerate()
        .fold((0, f64::NEG_INFINITY), |best, (i, &v)| {
            if v > best.1 { (i, v) } else { best }
        })
        .0
}

impl Selection {
    /// Subjects won by each model within the subjects of `scope` (largest log evidence used).
    pub fn subjects_won(&self, scope: &str) -> Vec<usize> {
        let mut won = vec![0; self.comparison.models.len()];
        for (row, group) in self
            .comparison
            .log_evidence
            .iter()
            .zip(&self.comparison.groups)
        {
            if scope == "all" || scope == group {
                won[arg_max(row)] += 1;
            }
        }
        won
    }

    /// The `model_selection.csv` table: one row per scope and model.
    pub fn selection_table(&self) -> Table {
        let c = &self.comparison;
        let note = c.notes.join("; ");
        let mut rows: Vec<SelectionRow<'_>> = Vec::new();
        for (scope, bms) in &self.scopes {
            let won = self.subjects_won(scope);
            for (k, &won) in won.iter().enumerate() {
                let mut sums = [0.0; 3];
                for ((records, evidence), group) in
                    c.records.iter().zip(&c.log_evidence).zip(&c.groups)
                {
                    if scope == "all" || scope == group {
                        sums[0] += evidence[k];
                        sums[1] += records[k].aic;
                        sums[2] += records[k].bic;
                    }
                }
                rows.push(SelectionRow {
                    scope,
                    model: k,
                    bms,
                    won,
                    sums,
                });
            }
        }
        let number = |f: &dyn Fn(&SelectionRow<'_>) -> Option<f64>| {
            Column::Number(rows.iter().map(f).collect())
        };
        let text =
            |f: &dyn Fn(&SelectionRow<'_>) -> String| Column::Text(rows.iter().map(f).collect());
        Table::default()
            .with("scope", text(&|r| r.scope.to_string()))
            .with("model", text(&|r| c.models[r.model].clone()))
            .with(
                "n_subjects",
                Column::Integer(rows.iter().map(|r| r.bms.assignment.len() as i64).collect()),
            )
            .with("evidence", text(&|_| self.evidence.label().to_string()))
            .with("dirichlet_count", number(&|r| Some(r.bms.alpha[r.model])))
            .with(
                "expected_frequency",
                number(&|r| Some(r.bms.expected_frequency[r.model])),
            )
            .with(
                "exceedance_probability",
                number(&|r| Some(r.bms.exceedance[r.model])),
            )
            .with(
                "exceedance_mc_se",
                number(&|r| r.bms.exceedance_se.as_ref().map(|s| s[r.model])),
            )
            .with(
                "protected_exceedance_probability",
                number(&|r| Some(r.bms.protected_exceedance[r.model])),
            )
            .with(
                "bayesian_omnibus_risk",
                number(&|r| Some(r.bms.omnibus_risk)),
            )
            .with(
                "subjects_won",
                Column::Integer(rows.iter().map(|r| r.won as i64).collect()),
            )
            .with("summed_log_evidence", number(&|r| Some(r.sums[0])))
            .with("summed_aic", number(&|r| Some(r.sums[1])))
            .with("summed_bic", number(&|r| Some(r.sums[2])))
            .with("free_energy", number(&|r| Some(r.bms.free_energy)))
            .with(
                "null_free_energy",
                number(&|r| Some(r.bms.null_free_energy)),
            )
            .with(
                "converged",
                Column::Flag(rows.iter().map(|r| r.bms.converged).collect()),
            )
            .with("note", text(&|_| note.clone()))
    }

    /// The `model_evidence.csv` table: one row per subject and compared model, with the
    /// posterior assignment g_nk of the pooled selection.
    pub fn evidence_table(&self) -> Table {
        let c = &self.comparison;
        let pooled = &self.scopes[0].1;
        let mut rows: Vec<(usize, usize, f64, f64, bool)> = Vec::new();
        for (n, records) in c.records.iter().enumerate() {
            let akaike = information_weights(&records.iter().map(|r| r.aic).collect::<Vec<_>>());
            let schwarz = information_weights(&records.iter().map(|r| r.bic).collect::<Vec<_>>());
            let winner = arg_max(&c.log_evidence[n]);
            for k in 0..records.len() {
                rows.push((n, k, akaike[k], schwarz[k], k == winner));
            }
        }
        let record = |r: &(usize, usize, f64, f64, bool)| &c.records[r.0][r.1];
        Table::default()
            .with(
                "subject",
                Column::Text(rows.iter().map(|r| record(r).subject.clone()).collect()),
            )
            .with(
                "group",
                Column::Text(rows.iter().map(|r| record(r).group.clone()).collect()),
            )
            .with(
                "model",
                Column::Text(rows.iter().map(|r| record(r).model.clone()).collect()),
            )
            .with(
                "n_trials",
                Column::Integer(rows.iter().map(|r| record(r).n_trials).collect()),
            )
            .with(
                "n_params",
                Column::Integer(rows.iter().map(|r| record(r).n_params).collect()),
            )
            .with(
                "aic",
                Column::Number(rows.iter().map(|r| Some(record(r).aic)).collect()),
            )
            .with(
                "bic",
                Column::Number(rows.iter().map(|r| Some(record(r).bic)).collect()),
            )
            .with(
                "log_evidence",
                Column::Number(
                    rows.iter()
                        .map(|r| Some(c.log_evidence[r.0][r.1]))
                        .collect(),
                ),
            )
            .with(
                "evidence",
                Column::Text(
                    rows.iter()
                        .map(|_| self.evidence.label().to_string())
                        .collect(),
                ),
            )
            .with(
                "akaike_weight",
                Column::Number(rows.iter().map(|r| Some(r.2)).collect()),
            )
            .with(
                "schwarz_weight",
                Column::Number(rows.iter().map(|r| Some(r.3)).collect()),
            )
            .with(
                "posterior_assignment",
                Column::Number(
                    rows.iter()
                        .map(|r| Some(pooled.assignment[r.0][r.1]))
                        .collect(),
                ),
            )
            .with("winner", Column::Flag(rows.iter().map(|r| r.4).collect()))
    }

    /// The `model_group_difference.csv` table: one row (none with fewer than two groups).
    pub fn difference_table(&self) -> Table {
        let d: Vec<&GroupDifference> = self.difference.iter().collect();
        Table::default()
            .with(
                "groups",
                Column::Text(d.iter().map(|d| d.groups.join(";")).collect()),
            )
            .with(
                "n_groups",
                Column::Integer(d.iter().map(|d| d.groups.len() as i64).collect()),
            )
            .with(
                "n_subjects",
                Column::Integer(d.iter().map(|d| d.n_subjects as i64).collect()),
            )
            .with(
                "evidence",
                Column::Text(
                    d.iter()
                        .map(|_| self.evidence.label().to_string())
                        .collect(),
                ),
            )
            .with(
                "free_energy_same",
                Column::Number(d.iter().map(|d| Some(d.free_energy_same)).collect()),
            )
            .with(
                "free_energy_different",
                Column::Number(d.iter().map(|d| Some(d.free_energy_different)).collect()),
            )
            .with(
                "log_bayes_factor_different",
                Column::Number(
                    d.iter()
                        .map(|d| Some(d.free_energy_different - d.free_energy_same))
                        .collect(),
                ),
            )
            .with(
                "probability_same_frequencies",
                Column::Number(d.iter().map(|d| Some(d.probability_same)).collect()),
            )
    }
}
