//! Parquet: columns of numbers or text converted to the reader's types; problems reported by
//! 1-based data row.

use std::path::Path;

use polars::prelude::*;

use super::super::TrialTable;
use super::ReadNotes;
use super::cells::*;
use super::columns::*;
use super::rows::{ReadState, build, no_trials};
use crate::files::InputError;

pub(super) fn read_parquet(
    path: &Path,
    columns: &ColumnMap,
) -> Result<(TrialTable, ReadNotes), InputError> {
    let file = std::fs::File::open(path)
        .map_err(|e| InputError::file(path, format!("cannot be read: {e}")))?;
    let frame = ParquetReader::new(file)
        .finish()
        .map_err(|e| InputError::file(path, format!("cannot be read as Parquet: {e}")))?;
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
    if frame.height() == 0 {
        return Err(InputError::file(
            path,
            "has no rows; expected one row per trial",
        ));
    }
    let mut state = ReadState::default();
    let table = build(
        path,
        columns,
        &header,
        &series,
        frame.height(),
        &Positions::Rows,
        &mut state,
    )?;
    if table.subjects.is_empty() {
        return Err(no_trials(path));
    }
    Ok((table, state.notes))
}
