//! Cells as found in a file (text, whole or real numbers, missing), borrowed column views, and
//! where a data row is in the file (line or Parquet row) for messages.

use polars::prelude::*;
use std::borrow::Cow;

/// One value as found in the file.
#[derive(Clone, Copy, Debug)]
pub(super) enum Cell<'a> {
    Missing,
    Text(&'a str),
    Int(i64),
    Float(f64),
}

/// One column's values, borrowed from the polars frame.
pub(super) enum Values<'a> {
    Text(Vec<Option<&'a str>>),
    Int(Vec<Option<i64>>),
    Float(Vec<Option<f64>>),
}

impl Values<'_> {
    pub(super) fn cell(&self, row: usize) -> Cell<'_> {
        match self {
            Values::Text(v) => match v[row].map(str::trim) {
                Some(s) if !s.is_empty() => Cell::Text(s),
                _ => Cell::Missing,
            },
            Values::Int(v) => v[row].map_or(Cell::Missing, Cell::Int),
            Values::Float(v) => v[row].map_or(Cell::Missing, Cell::Float),
        }
    }
}

impl<'a> Cell<'a> {
    pub(super) fn text(self) -> Option<Cow<'a, str>> {
        match self {
            Cell::Missing => None,
            Cell::Text(s) => Some(Cow::Borrowed(s)),
            Cell::Int(i) => Some(Cow::Owned(i.to_string())),
            Cell::Float(x) => Some(Cow::Owned(x.to_string())),
        }
    }

    /// A finite number, or `None` when missing.
    pub(super) fn number(self) -> Result<Option<f64>, String> {
        let x = match self {
            Cell::Missing => return Ok(None),
            Cell::Int(i) => i as f64,
            Cell::Float(x) => x,
            Cell::Text(s) => s
                .parse::<f64>()
                .map_err(|_| format!("expected a number, found {s:?}"))?,
        };
        if x.is_finite() {
            Ok(Some(x))
        } else {
            Err(format!("expected a finite number, found {}", self.shown()))
        }
    }

    /// A whole number, or `None` when missing.
    pub(super) fn integer(self) -> Result<Option<i64>, String> {
        match self {
            Cell::Missing => Ok(None),
            Cell::Int(i) => Ok(Some(i)),
            Cell::Float(x) => {
                if x.is_finite() && x.fract() == 0.0 && x.abs() < 9.0e15 {
                    Ok(Some(x as i64))
                } else {
                    Err(format!("expected a whole number, found {}", self.shown()))
                }
            }
            Cell::Text(s) => s
                .parse::<i64>()
                .map(Some)
                .map_err(|_| format!("expected a whole number, found {s:?}")),
        }
    }

    /// The value as it would be quoted in a message.
    pub(super) fn shown(self) -> String {
        match self {
            Cell::Missing => "nothing".to_string(),
            Cell::Text(s) => format!("{s:?}"),
            Cell::Int(i) => i.to_string(),
            Cell::Float(x) => x.to_string(),
        }
    }
}

/// Where a data row is, for error messages.
pub(super) enum Positions {
    /// CSV/TSV: the file line each data row starts on, and the header's line.
    Lines { rows: Vec<u64>, header: u64 },
    /// Parquet: data rows are numbered from 1; these rows begin after row `first`.
    Rows { first: u64 },
}

impl Positions {
    pub(super) fn of(&self, row: usize) -> u64 {
        match self {
            Positions::Lines { rows, .. } => rows[row],
            Positions::Rows { first } => first + row as u64 + 1,
        }
    }

    pub(super) fn unit(&self) -> &'static str {
        match self {
            Positions::Lines { .. } => "line",
            Positions::Rows { .. } => "row",
        }
    }

    pub(super) fn header(&self) -> Option<u64> {
        match self {
            Positions::Lines { header, .. } => Some(*header),
            Positions::Rows { .. } => None,
        }
    }
}

/// Borrowed views of one series, by its (already converted) type.
pub(super) fn values_of(series: &Series) -> Values<'_> {
    if let Ok(ca) = series.i64() {
        Values::Int(ca.iter().collect())
    } else if let Ok(ca) = series.f64() {
        Values::Float(ca.iter().collect())
    } else if let Ok(ca) = series.str() {
        Values::Text(ca.iter().collect())
    } else {
        Values::Text(vec![None; series.len()])
    }
}
