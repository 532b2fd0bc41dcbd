//! `fit --shard I/N`: the part of a fit's subjects one job of a cluster array fits.
//!
//! A subject's shard is a stable hash of its label (the first eight bytes of SHA-256, as for its
//! start points, [`crate::fit::starts::subject_stream`], modulo N, plus 1), so it depends
//! neither on the order of the file nor on the other subjects. A shard's fits are those of a
//! single run, since each subject's fit depends only on its own data and the seed.

use super::input::{OptionError, Screened};
use crate::data::TrialTable;
use crate::files::{OutputError, OutputSet};
use crate::fit::SubjectFit;
use crate::fit::starts::subject_stream;
use crate::results::fit_folder::FolderTable;
use crate::results::{Column, Table};
use std::path::Path;

/// Shard `index` of `count` (1 ≤ index ≤ count).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Shard {
    /// This shard, from 1.
    pub index: usize,
    /// Number of shards.
    pub count: usize,
}

/// The option that selects a shard.
pub const OPTION: &str = "--shard";

impl Shard {
    /// Parses `I/N` with 1 ≤ I ≤ N.
    pub fn parse(text: &str) -> Result<Shard, OptionError> {
        let expected = "expected I/N with whole numbers 1 ≤ I ≤ N (shard I of N), e.g. 2/8";
        let error = || OptionError::new(OPTION, text, expected);
        let (i, n) = text.split_once('/').ok_or_else(error)?;
        let (index, count) = (
            i.trim().parse::<usize>().map_err(|_| error())?,
            n.trim().parse::<usize>().map_err(|_| error())?,
        );
        if index == 0 || index > count {
            return Err(error());
        }
        Ok(Shard { index, count })
    }

    /// The shard (from 1) of the subject labelled `label` among `count` shards.
    pub fn of(label: &str, count: usize) -> usize {
        (subject_stream(label) % count as u64) as usize + 1
    }

    /// Whether the subject labelled `label` is in this shard.
    pub fn holds(self, label: &str) -> bool {
        Shard::of(label, self.count) == self.index
    }

    /// Keeps only this shard's subjects in `table` and in the screen of it.
    pub fn restrict(self, table: &mut TrialTable, screened: &mut Screened) {
        table.subjects.retain(|s| self.holds(&s.id));
        self.restrict_screen(screened);
    }

    /// Keeps only this shard's subjects in the screen of a table.
    pub fn restrict_screen(self, screened: &mut Screened) {
        let keep: Vec<bool> = screened
            .subjects
            .iter()
            .map(|s| self.holds(&s.subject))
            .collect();
        kept(&mut screened.subjects, &keep);
        for (_, per_subject) in &mut screened.unmet {
            kept(per_subject, &keep);
        }
    }

    /// The shard's entry of run.json: the shard, the shard count and every subject of the
    /// table in table order (so that `merge` restores the order of a single run's tables).
    pub fn record(self, table_subjects: &[String]) -> serde_json::Value {
        serde_json::json!({
            (KEY_INDEX): self.index,
            (KEY_COUNT): self.count,
            (KEY_SUBJECTS): table_subjects,
        })
    }
}

/// Keeps the items of `items` whose flag in `keep` is set.
pub fn kept<T>(items: &mut Vec<T>, keep: &[bool]) {
    let mut flags = keep.iter();
    items.retain(|_| *flags.next().expect("one flag per item"));
}

/// The shard's number in its run.json entry.
pub const KEY_INDEX: &str = "index";
/// The shard count in its run.json entry.
pub const KEY_COUNT: &str = "count";
/// Every subject of the table in table order, in its run.json entry.
pub const KEY_SUBJECTS: &str = "table_subjects";

/// `command_line` without `--shard I/N` (or `--shard=I/N`): the command line a single run of
/// the same fit would record.
pub fn without_shard(command_line: &[String]) -> Vec<String> {
    without_option(command_line, OPTION)
}

/// `command_line` without the option `option` and its value (`--option V` or `--option=V`).
pub fn without_option(command_line: &[String], option: &str) -> Vec<String> {
    let mut out = Vec::with_capacity(command_line.len());
    let mut args = command_line.iter();
    let joined = format!("{option}=");
    while let Some(arg) = args.next() {
        if arg == option {
            args.next();
        } else if !arg.starts_with(&joined) {
            out.push(arg.clone());
        }
    }
    out
}

/// `command_line` with the value of `--out` replaced by `out`.
pub fn with_out(command_line: &[String], out: &str) -> Vec<String> {
    let mut out_next = false;
    command_line
        .iter()
        .map(|arg| {
            if std::mem::take(&mut out_next) {
                out.to_string()
            } else if arg == "--out" {
                out_next = true;
                arg.clone()
            } else if arg.starts_with("--out=") {
                format!("--out={out}")
            } else {
                arg.clone()
            }
        })
        .collect()
}

/// The table of a shard of `fit --hierarchical` that holds each fit's unconstrained optimum θ
/// and its covariance (when the Hessian is positive definite), the starting point of the EM
/// that `merge` runs. Not part of a single run's folder.
pub const EM_STARTS: FolderTable = FolderTable::new("shard_em_starts");

/// The `quantity` of a row of [`EM_STARTS`] holding θ_i (its `j` is 0).
pub const THETA: &str = "theta";
/// The `quantity` of a row of [`EM_STARTS`] holding the covariance of θ_i and θ_j.
pub const COVARIANCE: &str = "covariance";

/// The rows of [`EM_STARTS`] for `fits`: `subject`, `model`, `quantity` ([`THETA`] or
/// [`COVARIANCE`]), `i` and `j` (positions among the model's free parameters, from 0) and
/// `value`, written with the shortest digits that read back to the same number.
pub fn em_starts_table(fits: &[SubjectFit]) -> Table {
    let mut rows: Vec<(&SubjectFit, &str, usize, usize, f64)> = Vec::new();
    for f in fits {
        rows.extend(
            f.theta
                .iter()
                .enumerate()
                .map(|(i, &t)| (f, THETA, i, 0, t)),
        );
        for (i, row) in f.covariance_theta.iter().flatten().enumerate() {
            rows.extend(
                row.iter()
                    .enumerate()
                    .map(|(j, &c)| (f, COVARIANCE, i, j, c)),
            );
        }
    }
    Table::default()
        .with(
            "subject",
            Column::Text(rows.iter().map(|r| r.0.subject.clone()).collect()),
        )
        .with(
            "model",
            Column::Text(rows.iter().map(|r| r.0.model.clone()).collect()),
        )
        .with(
            "quantity",
            Column::Text(rows.iter().map(|r| r.1.to_string()).collect()),
        )
        .with(
            "i",
            Column::Integer(rows.iter().map(|r| r.2 as i64).collect()),
        )
        .with(
            "j",
            Column::Integer(rows.iter().map(|r| r.3 as i64).collect()),
        )
        .with(
            "value",
            Column::Number(rows.iter().map(|r| Some(r.4)).collect()),
        )
}

/// Stages [`EM_STARTS`] of `fits` (CSV only: it is read by `merge`, not by people) in `dir`.
pub fn stage_em_starts(
    outputs: &mut OutputSet,
    dir: &Path,
    fits: &[SubjectFit],
) -> Result<(), OutputError> {
    outputs.stage(&EM_STARTS.csv_in(dir), |w| {
        em_starts_table(fits).write_csv(w)
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn command_lines() {
        let line = |s: &str| s.split(' ').map(str::to_string).collect::<Vec<_>>();
        assert_eq!(
            without_shard(&line("vd fit --shard 2/3 --out a --seed 1")),
            line("vd fit --out a --seed 1")
        );
        assert_eq!(
            without_shard(&line("vd fit --shard=2/3 --out a")),
            line("vd fit --out a")
        );
        assert_eq!(
            without_option(&line("vd fit --threads 4 --out a --threads=2"), "--threads"),
            line("vd fit --out a")
        );
        assert_eq!(
            with_out(&line("vd fit --out a --seed 1"), "b"),
            line("vd fit --out b --seed 1")
        );
        assert_eq!(
            with_out(&line("vd fit --out=a"), "b"),
            line("vd fit --out=b")
        );
    }
}
