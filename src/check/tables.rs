//! The check's tables: observed against predicted choice proportions, choice shares per option
//! side and response-time quantiles per subject and pooled, and subjects ranked by misfit.

use super::statistics::*;
use crate::results::{Column, Table};

/// Label of the pooled rows.
pub const POOLED: &str = "pooled";

/// One table row: (subject or "pooled", group, mode, statistic).
pub(super) type Row<'a> = (&'a str, &'a str, &'a str, &'a Statistic);

/// Rows of (scope, group, mode, statistic) for the tables: every subject, then the pooled ones.
pub(super) fn rows<'a>(
    checks: &'a [SubjectCheck],
    pooled: &'a [Statistic],
    keep: impl Fn(&Kind) -> bool,
) -> Vec<Row<'a>> {
    let mut rows = Vec::new();
    for c in checks {
        for s in &c.statistics {
            if keep(&s.key.kind) {
                rows.push((c.subject.as_str(), c.group.as_str(), c.mode.as_str(), s));
            }
        }
    }
    for s in pooled {
        if keep(&s.key.kind) {
            rows.push((POOLED, "", "", s));
        }
    }
    rows
}

/// Columns common to both statistic tables: `kind` names the statistic, `side` the option side
/// of the bins of factor `option`, and with a condition `level` names the level of its bins.
pub(super) fn statistic_table(
    rows: &[Row<'_>],
    condition: Option<&Condition>,
    extra: Vec<(&str, Column)>,
) -> Table {
    let text = |f: &dyn Fn(&Row<'_>) -> String| Column::Text(rows.iter().map(f).collect());
    let number = |f: &dyn Fn(&Statistic) -> Option<f64>| {
        Column::Number(rows.iter().map(|r| f(r.3)).collect())
    };
    let bands: Vec<Option<Band>> = rows.iter().map(|r| r.3.band()).collect();
    let band =
        |f: fn(&Band) -> f64| Column::Number(bands.iter().map(|b| b.as_ref().map(f)).collect());
    let mut table = Table::default()
        .with("subject", text(&|r| r.0.to_string()))
        .with("group", text(&|r| r.1.to_string()))
        .with("mode", text(&|r| r.2.to_string()))
        .with("kind", text(&|r| r.3.key.kind.as_str().to_string()))
        .with("factor", text(&|r| r.3.key.factor.as_str().to_string()))
        .with(
            "bin",
            Column::Integer(rows.iter().map(|r| r.3.key.bin as i64 + 1).collect()),
        )
        .with("bin_low", number(&|s| s.bin_range.map(|b| b.0)))
        .with("bin_high", number(&|s| s.bin_range.map(|b| b.1)))
        .with(
            "side",
            Column::OptionalText(
                rows.iter()
                    .map(|r| {
                        (r.3.key.factor == Factor::Option)
                            .then(|| crate::data::Choice(r.3.key.bin).as_str().to_string())
                    })
                    .collect(),
            ),
        );
    if let Some(c) = condition {
        table = table.with(
            "level",
            Column::OptionalText(
                rows.iter()
                    .map(|r| {
                        (r.3.key.factor == Factor::Condition)
                            .then(|| c.levels.get(r.3.key.bin).cloned())
                            .flatten()
                    })
                    .collect(),
            ),
        );
    }
    for (name, column) in extra {
        table = table.with(name, column);
    }
    table
        .with(
            "n_observed",
            Column::Integer(rows.iter().map(|r| r.3.n_observed as i64).collect()),
        )
        .with("observed", number(&|s| s.observed))
        .with("predicted_mean", band(|b| b.mean))
        .with("predicted_sd", band(|b| b.sd))
        .with("predicted_low", band(|b| b.low))
        .with("predicted_high", band(|b| b.high))
        .with(
            "n_replicates",
            Column::Integer(bands.iter().map(|b| b.map_or(0, |b| b.n as i64)).collect()),
        )
        .with(
            "outside_band",
            Column::OptionalFlag(rows.iter().map(|r| r.3.outside()).collect()),
        )
}

/// Observed against predicted proportions of correct-by-value responses (kind
/// `proportion_correct_by_value`) and shares of responses per option side (kind `choice_share`,
/// factor `option`), per subject and pooled.
pub fn choices_table(
    checks: &[SubjectCheck],
    pooled: &[Statistic],
    condition: Option<&Condition>,
) -> Table {
    let rows = rows(checks, pooled, |k| {
        matches!(k, Kind::ChoiceProportion | Kind::ChoiceShare)
    });
    statistic_table(&rows, condition, Vec::new())
}

/// Observed against predicted response-time quantiles, per subject and pooled: of
/// correct-by-value and of other responses (`response`) per bin of the value factors, and of
/// every response that chose the side (`response` = `all`) per bin of factor `option`.
pub fn quantiles_table(
    checks: &[SubjectCheck],
    pooled: &[Statistic],
    condition: Option<&Condition>,
) -> Table {
    let rows = rows(checks, pooled, |k| matches!(k, Kind::RtQuantile { .. }));
    let quantile = Column::Number(
        rows.iter()
            .map(|r| match r.3.key.kind {
                Kind::RtQuantile { quantile, .. } => Some(quantile),
                Kind::ChoiceProportion | Kind::ChoiceShare => None,
            })
            .collect(),
    );
    let response = Column::Text(
        rows.iter()
            .map(|r| match r.3.key.kind {
                Kind::RtQuantile { response, .. } => response.as_str().to_string(),
                Kind::ChoiceProportion | Kind::ChoiceShare => String::new(),
            })
            .collect(),
    );
    statistic_table(
        &rows,
        condition,
        vec![("response", response), ("quantile", quantile)],
    )
}

/// A subject's misfit summary, for the ranked table.
#[derive(Clone, Debug, PartialEq)]
pub struct RankedMisfit {
    /// Subject label.
    pub subject: String,
    /// Group label.
    pub group: String,
    /// How it was simulated.
    pub mode: Mode,
    /// Its misfit.
    pub misfit: Misfit,
}

/// The order of misfits: worst first by rms_z (missing last).
fn worse_first(a: &Misfit, b: &Misfit) -> std::cmp::Ordering {
    let key = |m: &Misfit| m.rms_z.unwrap_or(f64::NEG_INFINITY);
    key(b).total_cmp(&key(a))
}

/// Subjects ranked worst first by rms_z (missing last; ties in table order), gathered a part of
/// the subjects at a time: every subject's misfit summary, and the statistics of only the
/// `keep` worst so far (for their figures).
#[derive(Debug)]
pub struct Ranking {
    all: Vec<RankedMisfit>,
    worst: Vec<(SubjectCheck, Misfit)>,
    keep: usize,
}

impl Ranking {
    /// A ranking keeping the statistics of the `keep` worst subjects.
    pub fn new(keep: usize) -> Self {
        Ranking {
            all: Vec::new(),
            worst: Vec::new(),
            keep,
        }
    }

    /// Adds `checks` (subjects in table order, after those added before).
    pub fn add(&mut self, checks: Vec<SubjectCheck>) {
        for check in checks {
            let m = misfit(&check.statistics);
            self.all.push(RankedMisfit {
                subject: check.subject.clone(),
                group: check.group.clone(),
                mode: check.mode,
                misfit: m,
            });
            // A stable sort keeps earlier subjects first among ties, as the whole ranking does.
            self.worst.push((check, m));
            self.worst.sort_by(|a, b| worse_first(&a.1, &b.1));
            self.worst.truncate(self.keep);
        }
    }

    /// Every subject's summary, ranked, and the `keep` worst subjects with their statistics.
    pub fn finish(mut self) -> (Vec<RankedMisfit>, Vec<(SubjectCheck, Misfit)>) {
        self.all.sort_by(|a, b| worse_first(&a.misfit, &b.misfit));
        (self.all, self.worst)
    }
}

/// One row per subject, worst first (`ranked`, from [`Ranking::finish`]): misfit, rank and the
/// flag (fraction outside above [`FLAG_FRACTION`]).
pub fn misfit_table(ranked: &[RankedMisfit]) -> Table {
    let number = |f: fn(&Misfit) -> Option<f64>| {
        Column::Number(ranked.iter().map(|r| f(&r.misfit)).collect())
    };
    Table::default()
        .with(
            "subject",
            Column::Text(ranked.iter().map(|r| r.subject.clone()).collect()),
        )
        .with(
            "group",
            Column::Text(ranked.iter().map(|r| r.group.clone()).collect()),
        )
        .with(
            "mode",
            Column::Text(ranked.iter().map(|r| r.mode.as_str().into()).collect()),
        )
        .with(
            "n_statistics",
            Column::Integer(
                ranked
                    .iter()
                    .map(|r| r.misfit.n_statistics as i64)
                    .collect(),
            ),
        )
        .with("fraction_outside", number(|m| m.fraction_outside))
        .with("rms_z", number(|m| m.rms_z))
        .with("rank", Column::Integer((1..=ranked.len() as i64).collect()))
        .with(
            "flagged",
            Column::Flag(
                ranked
                    .iter()
                    .map(|r| r.misfit.fraction_outside.is_some_and(|f| f > FLAG_FRACTION))
                    .collect(),
            ),
        )
}
