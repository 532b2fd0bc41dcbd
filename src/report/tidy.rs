//! A tidy CSV table read as text, for the report: columns by name, numbers on demand, with
//! positioned errors.

use crate::files::InputError;
use std::path::{Path, PathBuf};

/// The rows of one CSV file, as text.
#[derive(Clone, Debug, PartialEq)]
pub struct Tidy {
    /// Where it was read from.
    pub path: PathBuf,
    /// Column names.
    pub header: Vec<String>,
    /// Rows of cells.
    pub rows: Vec<Vec<String>>,
}

impl Tidy {
    /// Reads `path` when it exists: `Ok(None)` for a missing file, an error for a malformed one.
    pub fn read_if_present(path: &Path) -> Result<Option<Tidy>, InputError> {
        if !path.exists() {
            return Ok(None);
        }
        let (mut reader, header) = crate::files::open_csv(path)?;
        let mut rows = Vec::new();
        for row in crate::files::csv_rows(path, &mut reader) {
            let (_, record) = row?;
            rows.push(record.iter().map(str::to_string).collect());
        }
        Ok(Some(Tidy {
            path: path.to_path_buf(),
            header,
            rows,
        }))
    }

    /// Index of column `name`, or an error naming the file and the column.
    pub fn column(&self, name: &str) -> Result<usize, InputError> {
        crate::files::column_index(&self.path, &self.header, name)
    }

    /// The cell of `row` in column `name` (empty when the column is missing).
    pub fn text<'a>(&'a self, row: &'a [String], name: &str) -> &'a str {
        self.header
            .iter()
            .position(|h| h == name)
            .and_then(|i| row.get(i))
            .map_or("", String::as_str)
    }

    /// The number in `row`, column `name`: `None` for an empty cell; an error (file, line,
    /// column) for text that is not a number.
    pub fn number(&self, row_index: usize, name: &str) -> Result<Option<f64>, InputError> {
        let column = self.column(name)?;
        let text = self.rows[row_index].get(column).map_or("", String::as_str);
        if text.is_empty() {
            return Ok(None);
        }
        text.parse::<f64>().map(Some).map_err(|_| {
            InputError::at(
                &self.path,
                row_index as u64 + 2,
                name,
                format!("expected a number, found '{text}'"),
            )
        })
    }
}
