//! Reading inputs with positioned errors, and writing outputs atomically.
//!
//! Every output file is written to a temporary name in its destination folder and renamed into
//! place only when complete, so a failed run leaves no partial output behind.

use std::fmt;
use std::io::Write;
use std::path::{Path, PathBuf};

/// An input problem with its position: file, line (1-based, header is line 1) and column.
#[derive(Debug, Clone, PartialEq)]
pub struct InputError {
    /// The file that was read.
    pub file: PathBuf,
    /// Line number in the file, counting the header as line 1. Parquet files have no lines: for
    /// them this is the 1-based data row, and the message says "row".
    pub line: Option<u64>,
    /// Column name.
    pub column: Option<String>,
    /// What was found and what was expected.
    pub message: String,
}

impl InputError {
    /// An error about the file as a whole.
    pub fn file(file: &Path, message: impl Into<String>) -> Self {
        InputError {
            file: file.to_path_buf(),
            line: None,
            column: None,
            message: message.into(),
        }
    }

    /// An error at a line and column.
    pub fn at(file: &Path, line: u64, column: &str, message: impl Into<String>) -> Self {
        InputError {
            file: file.to_path_buf(),
            line: Some(line),
            column: Some(column.to_string()),
            message: message.into(),
        }
    }
}

impl fmt::Display for InputError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.file.display())?;
        if let Some(line) = self.line {
            write!(f, " {} {line}", line_unit(&self.file))?;
        }
        if let Some(column) = &self.column {
            write!(f, ", column {column}")?;
        }
        write!(f, ": {}", self.message)
    }
}

impl std::error::Error for InputError {}

/// "row" for Parquet files (which have no lines), "line" for text files.
fn line_unit(file: &Path) -> &'static str {
    let parquet = file
        .extension()
        .and_then(|e| e.to_str())
        .is_some_and(|e| e.eq_ignore_ascii_case("parquet"));
    if parquet { "row" } else { "line" }
}

/// Opens a CSV file (fields trimmed) and reads its header, with errors naming the file.
pub fn open_csv(path: &Path) -> Result<(csv::Reader<std::fs::File>, Vec<String>), InputError> {
    let mut reader = csv::ReaderBuilder::new()
        .trim(csv::Trim::All)
        .from_path(path)
        .map_err(|e| InputError::file(path, format!("cannot be read as CSV: {e}")))?;
    let header: Vec<String> = reader
        .headers()
        .map_err(|e| InputError::file(path, format!("has no readable header: {e}")))?
        .iter()
        .map(str::to_string)
        .collect();
    Ok((reader, header))
}

/// Index of column `name` in `header`, or an error naming the file and the columns found.
pub fn column_index(path: &Path, header: &[String], name: &str) -> Result<usize, InputError> {
    header.iter().position(|h| h == name).ok_or_else(|| {
        InputError::file(
            path,
            format!(
                "missing column '{name}' (found columns {})",
                header.join(",")
            ),
        )
    })
}

/// The data rows of an opened CSV file with their line numbers (the header is line 1, the
/// first data row line 2); a malformed row is an error naming the file and its line.
pub fn csv_rows<'r>(
    path: &'r Path,
    reader: &'r mut csv::Reader<std::fs::File>,
) -> impl Iterator<Item = Result<(u64, csv::StringRecord), InputError>> + 'r {
    reader.records().enumerate().map(move |(index, record)| {
        let line = index as u64 + 2;
        record.map(|r| (line, r)).map_err(|e| InputError {
            line: e.position().map(|p| p.line()).or(Some(line)),
            ..InputError::file(path, format!("malformed CSV row: {e}"))
        })
    })
}

/// A finite number from the text of a cell, or an error naming the file, line and column.
pub fn finite_number(path: &Path, line: u64, column: &str, text: &str) -> Result<f64, InputError> {
    text.parse::<f64>()
        .ok()
        .filter(|x| x.is_finite())
        .ok_or_else(|| {
            InputError::at(
                path,
                line,
                column,
                format!("'{text}' is not a finite number"),
            )
        })
}

/// Writes `path` through `fill`, atomically: the content goes to a temporary file in the same
/// folder, which is renamed to `path` only if `fill` succeeds. The folder is created if missing.
pub fn write_atomically<E>(
    path: &Path,
    fill: impl FnOnce(&mut dyn Write) -> Result<(), E>,
) -> Result<(), WriteError<E>> {
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    std::fs::create_dir_all(&dir).map_err(|e| WriteError::Io(path.to_path_buf(), e))?;
    let mut tmp = tempfile::Builder::new()
        .prefix(".valuedrift-")
        .suffix(".tmp")
        .permissions(output_permissions())
        .tempfile_in(&dir)
        .map_err(|e| WriteError::Io(path.to_path_buf(), e))?;
    {
        let mut buffered = std::io::BufWriter::new(tmp.as_file_mut());
        fill(&mut buffered).map_err(WriteError::Content)?;
        buffered
            .flush()
            .map_err(|e| WriteError::Io(path.to_path_buf(), e))?;
    }
    tmp.persist(path)
        .map_err(|e| WriteError::Io(path.to_path_buf(), e.error))?;
    Ok(())
}

/// Failure of [`write_atomically`]: the content could not be produced, or the file system refused.
#[derive(Debug, thiserror::Error)]
pub enum WriteError<E> {
    /// Producing the content failed; nothing was written.
    #[error("{0}")]
    Content(E),
    /// Creating, writing or renaming the file failed; nothing was left at the destination.
    #[error("cannot write {path}: {source}", path = .0.display(), source = .1)]
    Io(PathBuf, std::io::Error),
}

/// Several output files written as one: each is staged under a temporary name in its folder and
/// all are renamed into place by [`OutputSet::commit`]. Dropping the set without committing
/// removes the staged files, so a run that fails part-way leaves no output behind.
#[derive(Default)]
pub struct OutputSet {
    staged: Vec<(tempfile::NamedTempFile, PathBuf)>,
}

impl OutputSet {
    /// An empty set.
    pub fn new() -> Self {
        OutputSet::default()
    }

    /// Stages `path` with the content written by `fill`.
    pub fn stage<E: std::fmt::Display>(
        &mut self,
        path: &Path,
        fill: impl FnOnce(&mut dyn Write) -> Result<(), E>,
    ) -> Result<(), String> {
        let dir = match path.parent() {
            Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
            _ => PathBuf::from("."),
        };
        let io = |e: std::io::Error| format!("cannot write {}: {e}", path.display());
        std::fs::create_dir_all(&dir).map_err(io)?;
        let mut tmp = tempfile::Builder::new()
            .prefix(".valuedrift-")
            .suffix(".tmp")
            .permissions(output_permissions())
            .tempfile_in(&dir)
            .map_err(io)?;
        {
            let mut buffered = std::io::BufWriter::new(tmp.as_file_mut());
            fill(&mut buffered).map_err(|e| format!("cannot write {}: {e}", path.display()))?;
            buffered.flush().map_err(io)?;
        }
        self.staged.push((tmp, path.to_path_buf()));
        Ok(())
    }

    /// Renames every staged file into place.
    pub fn commit(self) -> Result<(), String> {
        for (tmp, path) in self.staged {
            tmp.persist(&path)
                .map_err(|e| format!("cannot write {}: {}", path.display(), e.error))?;
        }
        Ok(())
    }
}

/// Ordinary file permissions for outputs (the temporary files would otherwise stay owner-only).
fn output_permissions() -> std::fs::Permissions {
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        std::fs::Permissions::from_mode(0o644)
    }
    #[cfg(not(unix))]
    {
        std::fs::metadata(".")
            .map(|m| m.permissions())
            .unwrap_or_else(|_| unreachable!())
    }
}
