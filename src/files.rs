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
    /// Line number in the file, counting the header as line 1.
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
            write!(f, " line {line}")?;
        }
        if let Some(column) = &self.column {
            write!(f, ", column {column}")?;
        }
        write!(f, ": {}", self.message)
    }
}

impl std::error::Error for InputError {}

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
