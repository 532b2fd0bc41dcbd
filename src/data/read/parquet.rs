//! Parquet: columns of numbers or text converted to the reader's types; problems reported by
//! 1-based data row. Read a part (some whole subjects) at a time, as CSV is; reading the whole
//! table is one part.

use std::path::{Path, PathBuf};

use polars::prelude::*;

use super::super::TrialTable;
use super::ReadNotes;
use super::cells::*;
use super::columns::*;
use super::rows::{ReadState, build, no_trials};
use crate::files::InputError;

/// Reads the whole Parquet file at `path`, checking every row.
pub(super) fn read_parquet(
    path: &Path,
    columns: &ColumnMap,
) -> Result<(TrialTable, ReadNotes), InputError> {
    let mut stream = ParquetStream::open(path, columns)?;
    let mut table: Option<TrialTable> = None;
    while let Some(part) = stream.next_part(usize::MAX)? {
        match table.as_mut() {
            Some(t) => t.subjects.extend(part.subjects),
            None => table = Some(part),
        }
    }
    let table = table.ok_or_else(|| no_trials(path))?;
    Ok((table, stream.state.notes))
}

/// A Parquet trial table read a part (some whole subjects) at a time: the subject column is
/// read first to find where each subject's rows begin, then each part's rows are read as a
/// slice of the file.
pub(super) struct ParquetStream {
    path: PathBuf,
    columns: ColumnMap,
    /// Row at which each subject's rows begin (a subject's empty rows before the first subject
    /// belong to it), and the number of rows.
    starts: Vec<usize>,
    height: usize,
    /// The next subject to hand out, and subjects handed out so far.
    next: usize,
    subjects_seen: usize,
    /// What the row checks carry from part to part.
    pub(super) state: ReadState,
}

impl ParquetStream {
    /// Opens `path` and reads its subject column.
    pub(super) fn open(path: &Path, columns: &ColumnMap) -> Result<Self, InputError> {
        let mut reader = ParquetReader::new(open(path)?);
        let height = reader
            .num_rows()
            .map_err(|e| InputError::file(path, format!("cannot be read as Parquet: {e}")))?;
        if height == 0 {
            return Err(InputError::file(
                path,
                "has no rows; expected one row per trial",
            ));
        }
        let schema = reader
            .schema()
            .map_err(|e| InputError::file(path, format!("cannot be read as Parquet: {e}")))?;
        let subject = columns.file_name("subject");
        let at = schema.iter_names().position(|n| n.trim() == subject);
        // Without a subject column the whole file is one part, whose checks name the problem.
        let mut starts = vec![0];
        if let Some(at) = at {
            let frame = ParquetReader::new(open(path)?)
                .with_projection(Some(vec![at]))
                .finish()
                .map_err(|e| InputError::file(path, format!("cannot be read as Parquet: {e}")))?;
            let (_, series) = converted(path, columns, &frame)?;
            let labels = values_of(&series[0]);
            let mut current: Option<String> = None;
            for row in 0..height {
                let cell = labels.cell(row);
                if columns.reads_as_missing(cell) {
                    continue;
                }
                let Some(key) = cell.text() else { continue };
                if current.as_deref() != Some(key.as_ref()) {
                    if current.is_some() {
                        starts.push(row);
                    }
                    current = Some(key.into_owned());
                }
            }
        }
        Ok(ParquetStream {
            path: path.to_path_buf(),
            columns: columns.clone(),
            starts,
            height,
            next: 0,
            subjects_seen: 0,
            state: ReadState::default(),
        })
    }

    /// The next part: the rows of at most `subjects` whole subjects, checked; `None` after the
    /// last. A table whose rows are all empty is refused.
    pub(super) fn next_part(&mut self, subjects: usize) -> Result<Option<TrialTable>, InputError> {
        while self.next < self.starts.len() {
            let first = self.starts[self.next];
            let end_subject = self.next.saturating_add(subjects.max(1));
            let end = self.starts.get(end_subject).copied().unwrap_or(self.height);
            self.next = end_subject.min(self.starts.len());
            let frame = ParquetReader::new(open(&self.path)?)
                .with_slice(Some((first, end - first)))
                .finish()
                .map_err(|e| {
                    InputError::file(&self.path, format!("cannot be read as Parquet: {e}"))
                })?;
            let (header, series) = converted(&self.path, &self.columns, &frame)?;
            let table = build(
                &self.path,
                &self.columns,
                &header,
                &series,
                frame.height(),
                &Positions::Rows {
                    first: first as u64,
                },
                &mut self.state,
            )?;
            if !table.subjects.is_empty() {
                self.subjects_seen += table.subjects.len();
                return Ok(Some(table));
            }
        }
        if self.subjects_seen == 0 {
            return Err(no_trials(&self.path));
        }
        Ok(None)
    }
}

fn open(path: &Path) -> Result<std::fs::File, InputError> {
    std::fs::File::open(path).map_err(|e| InputError::file(path, format!("cannot be read: {e}")))
}

/// The header (names trimmed) and the columns of `frame` converted to the reader's types:
/// whole numbers as 64-bit integers, real numbers as doubles, text and flags as text; other
/// columns the reader does not use left out (all missing).
fn converted(
    path: &Path,
    columns: &ColumnMap,
    frame: &DataFrame,
) -> Result<(Vec<String>, Vec<Series>), InputError> {
    let header: Vec<String> = frame
        .columns()
        .iter()
        .map(|c| c.name().trim().to_string())
        .collect();
    let used: Vec<&str> = CANONICAL.iter().map(|c| columns.file_name(c)).collect();
    let mut series = Vec::with_capacity(frame.width());
    for column in frame.columns() {
        let s = column.as_materialized_series();
        let dtype = s.dtype();
        let scalar = dtype.is_integer()
            || dtype.is_float()
            || dtype == &DataType::String
            || dtype == &DataType::Boolean;
        if !used.contains(&column.name().trim()) && !scalar {
            // Other columns may hold any type; those that are not numbers or text cannot be
            // covariates and are left out.
            series.push(Series::full_null(
                column.name().clone(),
                s.len(),
                &DataType::Null,
            ));
            continue;
        }
        let converted = if dtype.is_integer() {
            s.strict_cast(&DataType::Int64)
        } else if dtype.is_float() {
            s.cast(&DataType::Float64)
        } else if dtype == &DataType::String {
            Ok(s.clone())
        } else {
            s.cast(&DataType::String)
        };
        let converted = converted.map_err(|_| InputError {
            column: Some(column.name().to_string()),
            ..InputError::file(
                path,
                format!("has values of type {dtype}; expected numbers or text"),
            )
        })?;
        series.push(converted);
    }
    Ok((header, series))
}
