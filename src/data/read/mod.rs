//! Reading a trial table from CSV, TSV or Parquet, checking every row.
//!
//! CSV and TSV files are first tokenised here (so that every data row is tied to the file line it
//! starts on, quoting mistakes are reported with their line, and rows with the wrong number of
//! fields are caught), then read by polars with every column as text; all numbers are parsed here
//! so that each problem can be reported with its line and column. Parquet columns may hold
//! numbers or text; problems in them are reported by 1-based data row.

mod cells;
mod columns;
mod delimited;
mod parquet;
mod rows;

pub use columns::{ColumnMap, ColumnMapError};

use std::path::Path;

use super::TrialTable;
use crate::files::InputError;
use delimited::read_delimited;
use parquet::read_parquet;

/// What the reader accepted but a user should hear about, counted over the whole file.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct ReadNotes {
    /// Trials without a response that record an outcome (task logs often write 0 or a penalty
    /// there): accepted, and no learning follows them (nothing was chosen).
    pub outcomes_without_response: usize,
    /// Line (or Parquet row) of the first such trial.
    pub first_outcome_without_response: Option<u64>,
}

impl ReadNotes {
    /// One line per note, naming the file, for the console; empty when there is nothing to say.
    pub fn lines(&self, path: &Path) -> Vec<String> {
        let mut lines = Vec::new();
        if self.outcomes_without_response > 0 {
            lines.push(format!(
                "note: {}: {} trial(s) without a response record an outcome (first at line/row \
                 {}); accepted, and no learning follows them since nothing was chosen",
                path.display(),
                self.outcomes_without_response,
                self.first_outcome_without_response.unwrap_or(0)
            ));
        }
        lines
    }
}

/// Reads and checks a trial table. The format follows the extension: `.csv` (comma-separated),
/// `.tsv` or `.txt` (tab-separated) or `.parquet`. Column names, choice codes and missing-value
/// tokens are looked up through `columns`.
pub fn read_trials(path: &Path, columns: &ColumnMap) -> Result<TrialTable, InputError> {
    read_trials_noted(path, columns).map(|(table, _)| table)
}

/// [`read_trials`], also returning what the reader accepted with a note.
pub fn read_trials_noted(
    path: &Path,
    columns: &ColumnMap,
) -> Result<(TrialTable, ReadNotes), InputError> {
    let extension = path
        .extension()
        .and_then(|e| e.to_str())
        .map(str::to_ascii_lowercase);
    match extension.as_deref() {
        Some("csv") => read_delimited(path, columns, b','),
        Some("tsv") | Some("txt") => read_delimited(path, columns, b'\t'),
        Some("parquet") => read_parquet(path, columns),
        Some(other) => Err(InputError::file(
            path,
            format!(
                "has extension .{other}; expected .csv (comma-separated), .tsv or .txt \
                 (tab-separated) or .parquet"
            ),
        )),
        None => Err(InputError::file(
            path,
            "has no extension; expected .csv (comma-separated), .tsv or .txt (tab-separated) \
             or .parquet",
        )),
    }
}
