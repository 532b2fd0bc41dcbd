//! A table written a part at a time, as CSV and Parquet side by side: outputs of any number of
//! subjects without holding them all in memory. The CSV is the text the whole table would give;
//! the Parquet file holds one row group per part.

use super::{FileWriter, Table, parquet_options};
use crate::files::{OutputError, OutputSet, StagedFile};
use polars_arrow::datatypes::ArrowSchema;
use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};

/// `stem.csv` and `stem.parquet` of an [`OutputSet`], written a part at a time; every part must
/// have the same columns.
pub struct TableParts {
    csv: csv::Writer<BufWriter<File>>,
    csv_path: PathBuf,
    parquet: Option<(FileWriter<BufWriter<File>>, ArrowSchema)>,
    /// The Parquet file until its first part gives the schema.
    parquet_file: Option<StagedFile>,
    parquet_path: PathBuf,
    columns: Option<Vec<String>>,
}

impl TableParts {
    /// Stages `dir/stem.csv` and `dir/stem.parquet` in `outputs`.
    pub fn stage(outputs: &mut OutputSet, dir: &Path, stem: &str) -> Result<Self, OutputError> {
        let csv = outputs.stage_writer(&dir.join(format!("{stem}.csv")))?;
        let parquet = outputs.stage_writer(&dir.join(format!("{stem}.parquet")))?;
        Ok(TableParts {
            csv_path: csv.path,
            csv: csv::WriterBuilder::new().from_writer(csv.writer),
            parquet: None,
            parquet_path: parquet.path.clone(),
            parquet_file: Some(parquet),
            columns: None,
        })
    }

    /// Appends the rows of `part`.
    pub fn write(&mut self, part: &Table) -> Result<(), OutputError> {
        let names: Vec<String> = part.columns.iter().map(|(n, _)| n.clone()).collect();
        match &self.columns {
            None => {
                self.csv
                    .write_record(&names)
                    .map_err(|e| content(&self.csv_path, e))?;
                self.columns = Some(names);
            }
            Some(columns) if *columns != names => {
                return Err(content(
                    &self.csv_path,
                    format!(
                        "a part has the columns {}, the first part {}",
                        names.join(","),
                        columns.join(",")
                    ),
                ));
            }
            Some(_) => {}
        }
        part.write_rows(&mut self.csv)
            .map_err(|e| content(&self.csv_path, e))?;
        let (schema, arrays) = part.arrow();
        if self.parquet.is_none()
            && let Some(file) = self.parquet_file.take()
        {
            let writer = FileWriter::try_new(file.writer, schema.clone(), parquet_options())
                .map_err(|e| content(&self.parquet_path, e))?;
            self.parquet = Some((writer, schema.clone()));
        }
        let Some((writer, first)) = self.parquet.as_mut() else {
            return Err(content(&self.parquet_path, "the Parquet writer is gone"));
        };
        if *first != schema {
            return Err(content(
                &self.parquet_path,
                "a part's column types differ from the first part's",
            ));
        }
        part.write_row_group(writer, first, arrays)
            .map_err(|e| content(&self.parquet_path, e))
    }

    /// Ends both files (a table given no part has no rows: the CSV is empty, and so is the
    /// Parquet file; callers write at least one part).
    pub fn finish(self) -> Result<(), OutputError> {
        let io = |path: &Path, source: std::io::Error| OutputError::Io {
            path: path.to_path_buf(),
            source,
        };
        let mut csv = self
            .csv
            .into_inner()
            .map_err(|e| io(&self.csv_path, e.into_error()))?;
        csv.flush().map_err(|e| io(&self.csv_path, e))?;
        if let Some((mut writer, _)) = self.parquet {
            // An empty key-value list instead of an embedded Arrow schema (see
            // Table::write_parquet).
            writer
                .end(Some(Vec::new()))
                .map_err(|e| content(&self.parquet_path, e))?;
            writer
                .into_inner()
                .flush()
                .map_err(|e| io(&self.parquet_path, e))?;
        }
        Ok(())
    }
}

fn content(path: &Path, error: impl std::fmt::Display) -> OutputError {
    OutputError::Content {
        path: path.to_path_buf(),
        message: error.to_string(),
    }
}
