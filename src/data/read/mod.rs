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
    match format_of(path)? {
        Format::Delimited(sep) => read_delimited(path, columns, sep),
        Format::Parquet => read_parquet(path, columns),
    }
}

/// The formats a trial table can have.
enum Format {
    /// CSV or TSV, with this separator.
    Delimited(u8),
    Parquet,
}

/// The format named by the extension of `path`.
fn format_of(path: &Path) -> Result<Format, InputError> {
    let extension = path
        .extension()
        .and_then(|e| e.to_str())
        .map(str::to_ascii_lowercase);
    match extension.as_deref() {
        Some("csv") => Ok(Format::Delimited(b',')),
        Some("tsv") | Some("txt") => Ok(Format::Delimited(b'\t')),
        Some("parquet") => Ok(Format::Parquet),
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

/// A trial table read a few whole subjects at a time, each part checked exactly as
/// [`read_trials`] checks the whole table (a subject seen in an earlier part may not appear
/// again). Only one part is in memory at once (and, for Parquet, where each subject begins), so
/// memory does not grow with the number of subjects.
pub struct SubjectParts {
    source: Source,
}

enum Source {
    Delimited(Box<delimited::DelimitedStream>),
    Parquet(Box<parquet::ParquetStream>),
}

impl SubjectParts {
    /// Opens the trial table at `path` (format by extension, as [`read_trials`]) and reads its
    /// header (CSV, TSV) or where each subject begins (Parquet).
    pub fn open(path: &Path, columns: &ColumnMap) -> Result<Self, InputError> {
        let source = match format_of(path)? {
            Format::Delimited(sep) => Source::Delimited(Box::new(
                delimited::DelimitedStream::open(path, columns, sep)?,
            )),
            Format::Parquet => {
                Source::Parquet(Box::new(parquet::ParquetStream::open(path, columns)?))
            }
        };
        Ok(SubjectParts { source })
    }

    /// The next part, of at most `subjects` whole subjects in file order (at least one);
    /// `None` after the last. Errors name the file, line (or Parquet row) and column.
    pub fn next_part(&mut self, subjects: usize) -> Result<Option<TrialTable>, InputError> {
        match &mut self.source {
            Source::Delimited(stream) => stream.next_part(subjects),
            Source::Parquet(stream) => stream.next_part(subjects),
        }
    }

    /// What the reader accepted with a note, over the parts read so far.
    pub fn notes(&self) -> &ReadNotes {
        match &self.source {
            Source::Delimited(stream) => &stream.state.notes,
            Source::Parquet(stream) => &stream.state.notes,
        }
    }
}
