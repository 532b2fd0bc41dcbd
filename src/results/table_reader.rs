//! Reads back a table the crate wrote with [`Table::write_csv`], cell for cell, and rearranges
//! rows, for commands that combine the tables of several runs (`merge`).
//!
//! The column kinds come from a template (the same table builder called with no rows), so a
//! cell reads back to the value it was written from: numbers are written with the shortest
//! digits that parse back to the same f64 ([`super::number_text`]), so writing the read table
//! again gives the same bytes, as CSV and as Parquet.

use super::{Column, Table};
use crate::files::InputError;
use std::path::Path;

impl Column {
    /// An empty column of the same kind.
    fn empty_like(&self) -> Column {
        match self {
            Column::Text(_) => Column::Text(Vec::new()),
            Column::OptionalText(_) => Column::OptionalText(Vec::new()),
            Column::Number(_) => Column::Number(Vec::new()),
            Column::Integer(_) => Column::Integer(Vec::new()),
            Column::Flag(_) => Column::Flag(Vec::new()),
            Column::OptionalFlag(_) => Column::OptionalFlag(Vec::new()),
        }
    }

    /// Appends the value written as `text`, or says what was expected.
    fn push_text(&mut self, text: &str) -> Result<(), String> {
        let flag = |t: &str| match t {
            "true" => Ok(true),
            "false" => Ok(false),
            _ => Err(format!("'{t}': expected true or false")),
        };
        let optional = |t: &str| (!t.is_empty()).then(|| t.to_string());
        match self {
            Column::Text(v) => v.push(text.to_string()),
            Column::OptionalText(v) => v.push(optional(text)),
            Column::Number(v) => v.push(match optional(text) {
                None => None,
                Some(t) => Some(
                    t.parse::<f64>()
                        .map_err(|_| format!("'{t}': expected a number"))?,
                ),
            }),
            Column::Integer(v) => v.push(
                text.parse::<i64>()
                    .map_err(|_| format!("'{text}': expected a whole number"))?,
            ),
            Column::Flag(v) => v.push(flag(text)?),
            Column::OptionalFlag(v) => v.push(match optional(text) {
                None => None,
                Some(t) => Some(flag(&t)?),
            }),
        }
        Ok(())
    }

    /// The rows `order` of `self`, in that order.
    fn picked(&self, order: &[usize]) -> Column {
        fn pick<T: Clone>(v: &[T], order: &[usize]) -> Vec<T> {
            order.iter().map(|&r| v[r].clone()).collect()
        }
        match self {
            Column::Text(v) => Column::Text(pick(v, order)),
            Column::OptionalText(v) => Column::OptionalText(pick(v, order)),
            Column::Number(v) => Column::Number(pick(v, order)),
            Column::Integer(v) => Column::Integer(pick(v, order)),
            Column::Flag(v) => Column::Flag(pick(v, order)),
            Column::OptionalFlag(v) => Column::OptionalFlag(pick(v, order)),
        }
    }

    /// Appends the values of `other`, a column of the same kind.
    fn append(&mut self, other: &Column) {
        match (self, other) {
            (Column::Text(a), Column::Text(b)) => a.extend_from_slice(b),
            (Column::OptionalText(a), Column::OptionalText(b)) => a.extend_from_slice(b),
            (Column::Number(a), Column::Number(b)) => a.extend_from_slice(b),
            (Column::Integer(a), Column::Integer(b)) => a.extend_from_slice(b),
            (Column::Flag(a), Column::Flag(b)) => a.extend_from_slice(b),
            (Column::OptionalFlag(a), Column::OptionalFlag(b)) => a.extend_from_slice(b),
            _ => unreachable!("columns of one template have the same kinds"),
        }
    }
}

impl Table {
    /// Reads the CSV file `path` written by [`Table::write_csv`] for a table with the columns
    /// (names, order and kinds) of `template`. Errors name the file, and the line and column of
    /// a cell that is not of its column's kind; a header other than the template's is refused.
    pub fn read_csv_as(path: &Path, template: &Table) -> Result<Table, InputError> {
        let mut chunks = TableChunks::open(path, template)?;
        Ok(chunks.next_rows(usize::MAX)?.unwrap_or(chunks.empty()))
    }

    /// The rows of `tables` (tables with the columns of `template`) one after the other.
    pub fn concatenated(template: &Table, tables: &[Table]) -> Table {
        let mut out = Table {
            columns: template
                .columns
                .iter()
                .map(|(n, c)| (n.clone(), c.empty_like()))
                .collect(),
        };
        for table in tables {
            for ((_, a), (_, b)) in out.columns.iter_mut().zip(&table.columns) {
                a.append(b);
            }
        }
        out
    }

    /// The rows `order` of the table, in that order.
    pub fn reordered(&self, order: &[usize]) -> Table {
        Table {
            columns: self
                .columns
                .iter()
                .map(|(n, c)| (n.clone(), c.picked(order)))
                .collect(),
        }
    }

    /// The values of text column `name`, if the table has one.
    pub fn texts(&self, name: &str) -> Option<&[String]> {
        self.columns.iter().find_map(|(n, c)| match c {
            Column::Text(v) if n == name => Some(v.as_slice()),
            _ => None,
        })
    }

    /// The values of number column `name`, if the table has one.
    pub fn numbers(&self, name: &str) -> Option<&[Option<f64>]> {
        self.columns.iter().find_map(|(n, c)| match c {
            Column::Number(v) if n == name => Some(v.as_slice()),
            _ => None,
        })
    }

    /// The values of whole-number column `name`, if the table has one.
    pub fn integers(&self, name: &str) -> Option<&[i64]> {
        self.columns.iter().find_map(|(n, c)| match c {
            Column::Integer(v) if n == name => Some(v.as_slice()),
            _ => None,
        })
    }

    /// The values of flag column `name`, if the table has one.
    pub fn flags(&self, name: &str) -> Option<&[bool]> {
        self.columns.iter().find_map(|(n, c)| match c {
            Column::Flag(v) if n == name => Some(v.as_slice()),
            _ => None,
        })
    }
}

/// A table the crate wrote read back a chunk of rows at a time, as [`Table::read_csv_as`] reads
/// it whole: for tables too large to hold at once.
pub struct TableChunks {
    path: std::path::PathBuf,
    reader: csv::Reader<std::fs::File>,
    /// The template's columns, empty.
    template: Table,
    /// Line of the next record (the header is line 1).
    line: u64,
}

impl TableChunks {
    /// Opens `path` and checks its header against the columns of `template`.
    pub fn open(path: &Path, template: &Table) -> Result<Self, InputError> {
        let (reader, header) = crate::files::open_csv_trimmed(path, csv::Trim::None)?;
        let names: Vec<&str> = template.columns.iter().map(|(n, _)| n.as_str()).collect();
        if header != names {
            return Err(InputError::file(
                path,
                format!(
                    "has columns {}; expected {}",
                    header.join(","),
                    names.join(",")
                ),
            ));
        }
        Ok(TableChunks {
            path: path.to_path_buf(),
            reader,
            template: Table {
                columns: template
                    .columns
                    .iter()
                    .map(|(n, c)| (n.clone(), c.empty_like()))
                    .collect(),
            },
            line: 2,
        })
    }

    /// A table of the template's columns and no rows.
    fn empty(&self) -> Table {
        Table {
            columns: self
                .template
                .columns
                .iter()
                .map(|(n, c)| (n.clone(), c.empty_like()))
                .collect(),
        }
    }

    /// The next at most `rows` rows (at least one); `None` after the last. Errors name the
    /// file, and the line and column of a cell that is not of its column's kind.
    pub fn next_rows(&mut self, rows: usize) -> Result<Option<Table>, InputError> {
        let mut table = self.empty();
        let mut record = csv::StringRecord::new();
        let mut read = 0;
        while read < rows.max(1) {
            let more = self
                .reader
                .read_record(&mut record)
                .map_err(|e| InputError {
                    line: e.position().map(|p| p.line()).or(Some(self.line)),
                    ..InputError::file(&self.path, format!("malformed CSV row: {e}"))
                })?;
            if !more {
                break;
            }
            for ((name, column), text) in table.columns.iter_mut().zip(record.iter()) {
                column
                    .push_text(text)
                    .map_err(|message| InputError::at(&self.path, self.line, name, message))?;
            }
            self.line += 1;
            read += 1;
        }
        Ok((read > 0).then_some(table))
    }
}
