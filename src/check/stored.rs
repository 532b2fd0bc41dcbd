//! A check's per-subject material written and read back exactly: what a shard of `check` keeps
//! so that `merge` can pool every subject's statistics, replicate by replicate, as a single run
//! does.
//!
//! One row per subject and statistic: the subject, its group and mode, the statistic's key
//! (factor, bin, kind, and for response-time quantiles the responses and probability), the bin's
//! observed range, the observed count and value, and the value in every replicate dataset in one
//! cell (separated by `;`, an empty item where a replicate has no value). Numbers are written
//! with the shortest digits that read back to the same f64, so pooled statistics computed from
//! the table equal those computed from the simulations. Cost: the replicates make the table
//! about `sims` numbers per statistic (100 replicates of 40 subjects: about 1.5 MB).

use super::statistics::*;
use crate::results::{Column, Table, number_text};

/// Separator of the replicate values in their cell.
const SEPARATOR: char = ';';

/// The table of `checks` (see the module documentation).
pub fn stored_checks_table(checks: &[SubjectCheck]) -> Table {
    let rows: Vec<(&SubjectCheck, &Statistic)> = checks
        .iter()
        .flat_map(|c| c.statistics.iter().map(move |s| (c, s)))
        .collect();
    let text = |f: &dyn Fn(&SubjectCheck, &Statistic) -> String| {
        Column::Text(rows.iter().map(|(c, s)| f(c, s)).collect())
    };
    let number = |f: &dyn Fn(&Statistic) -> Option<f64>| {
        Column::Number(rows.iter().map(|(_, s)| f(s)).collect())
    };
    let quantile = |s: &Statistic| match s.key.kind {
        Kind::RtQuantile { response, quantile } => Some((response, quantile)),
        _ => None,
    };
    Table::default()
        .with("subject", text(&|c, _| c.subject.clone()))
        .with("group", text(&|c, _| c.group.clone()))
        .with("mode", text(&|c, _| c.mode.as_str().to_string()))
        .with("factor", text(&|_, s| s.key.factor.as_str().to_string()))
        .with(
            "bin",
            Column::Integer(rows.iter().map(|(_, s)| s.key.bin as i64).collect()),
        )
        .with("kind", text(&|_, s| s.key.kind.as_str().to_string()))
        .with(
            "response",
            text(&|_, s| quantile(s).map_or("", |q| q.0.as_str()).to_string()),
        )
        .with("quantile", number(&|s| quantile(s).map(|q| q.1)))
        .with("bin_low", number(&|s| s.bin_range.map(|b| b.0)))
        .with("bin_high", number(&|s| s.bin_range.map(|b| b.1)))
        .with(
            "n_observed",
            Column::Integer(rows.iter().map(|(_, s)| s.n_observed as i64).collect()),
        )
        .with("observed", number(&|s| s.observed))
        .with(
            "replicates",
            text(&|_, s| {
                let cells: Vec<String> = s
                    .replicates
                    .iter()
                    .map(|r| r.map_or(String::new(), number_text))
                    .collect();
                cells.join(&SEPARATOR.to_string())
            }),
        )
}

/// The checks of a table written by [`stored_checks_table`] (read back with it as template),
/// subjects in the table's order; `source` names the file in errors, with the row (from 1).
pub fn checks_from_stored(table: &Table, source: &str) -> Result<Vec<SubjectCheck>, String> {
    checks_from_stored_rows(table, source, 0)
}

/// [`checks_from_stored`] of rows that come after `rows_before` rows of the file (for the row
/// numbers of errors).
fn checks_from_stored_rows(
    table: &Table,
    source: &str,
    rows_before: usize,
) -> Result<Vec<SubjectCheck>, String> {
    let text = |name: &str| table.texts(name).unwrap_or_default();
    let number = |name: &str| table.numbers(name).unwrap_or_default();
    let integer = |name: &str| table.integers(name).unwrap_or_default();
    let mut checks: Vec<SubjectCheck> = Vec::new();
    for r in 0..table.rows() {
        let bad = |what: &str, value: &str| {
            format!(
                "{source}, row {}: {what} {value:?} is not one a check writes",
                rows_before + r + 1
            )
        };
        let factor = [
            Factor::ValueDifference,
            Factor::Effort,
            Factor::Condition,
            Factor::Option,
        ]
        .into_iter()
        .find(|f| f.as_str() == text("factor")[r])
        .ok_or_else(|| bad("factor", &text("factor")[r]))?;
        let response = [Response::CorrectByValue, Response::Other, Response::All]
            .into_iter()
            .find(|x| x.as_str() == text("response")[r]);
        let kind = match (text("kind")[r].as_str(), response, number("quantile")[r]) {
            ("proportion_correct_by_value", None, None) => Kind::ChoiceProportion,
            ("choice_share", None, None) => Kind::ChoiceShare,
            ("rt_quantile", Some(response), Some(quantile)) => {
                Kind::RtQuantile { response, quantile }
            }
            (kind, _, _) => return Err(bad("kind (with response and quantile)", kind)),
        };
        let replicates = text("replicates")[r]
            .split(SEPARATOR)
            .map(|x| {
                (!x.is_empty())
                    .then(|| x.parse::<f64>().map_err(|_| bad("replicate value", x)))
                    .transpose()
            })
            .collect::<Result<Vec<_>, _>>()?;
        let statistic = Statistic {
            key: Key {
                factor,
                bin: integer("bin")[r] as usize,
                kind,
            },
            bin_range: number("bin_low")[r].zip(number("bin_high")[r]),
            n_observed: integer("n_observed")[r] as usize,
            observed: number("observed")[r],
            replicates,
        };
        let subject = &text("subject")[r];
        match checks.last_mut().filter(|c| c.subject == *subject) {
            Some(check) => check.statistics.push(statistic),
            None => checks.push(SubjectCheck {
                subject: subject.clone(),
                group: text("group")[r].clone(),
                mode: [Mode::Free, Mode::OneStepAhead]
                    .into_iter()
                    .find(|m| m.as_str() == text("mode")[r])
                    .ok_or_else(|| bad("mode", &text("mode")[r]))?,
                statistics: vec![statistic],
            }),
        }
    }
    Ok(checks)
}

/// The checks of a table written by [`stored_checks_table`], read a chunk of rows at a time, one
/// subject after another: only a chunk and one subject's statistics are in memory at once.
pub struct StoredChecks {
    chunks: crate::results::TableChunks,
    source: String,
    /// Rows read before the current chunk (for the row numbers of errors).
    rows_before: usize,
    /// Subjects read but not handed out; the last may continue in the next chunk.
    pending: std::collections::VecDeque<SubjectCheck>,
    done: bool,
}

/// Rows read at a time by [`StoredChecks`].
const STORED_ROWS_PER_CHUNK: usize = 4096;

impl StoredChecks {
    /// Opens the table at `path` (its header checked against [`stored_checks_table`]'s).
    pub fn open(path: &std::path::Path) -> Result<Self, crate::files::InputError> {
        Ok(StoredChecks {
            chunks: crate::results::TableChunks::open(path, &stored_checks_table(&[]))?,
            source: path.display().to_string(),
            rows_before: 0,
            pending: std::collections::VecDeque::new(),
            done: false,
        })
    }

    /// The next subject's check, in the table's order; `None` after the last.
    pub fn next_check(&mut self) -> Result<Option<SubjectCheck>, Box<dyn std::error::Error>> {
        // The last pending subject is whole only once a later subject or the end is seen.
        while !self.done && self.pending.len() < 2 {
            let Some(chunk) = self.chunks.next_rows(STORED_ROWS_PER_CHUNK)? else {
                self.done = true;
                break;
            };
            let mut checks = checks_from_stored_rows(&chunk, &self.source, self.rows_before)?;
            self.rows_before += chunk.rows();
            if let (Some(last), Some(first)) = (self.pending.back_mut(), checks.first())
                && last.subject == first.subject
            {
                let first = checks.remove(0);
                last.statistics.extend(first.statistics);
            }
            self.pending.extend(checks);
        }
        Ok(self.pending.pop_front())
    }
}
