//! Reading inputs with positioned errors, and writing outputs atomically.
//!
//! Outputs never mix runs. A command that writes a folder builds the whole new folder as a hidden
//! sibling (`.<name>.valuedrift-staging-<pid>`) and puts it in place in one step only when every
//! file is complete ([`OutputSet`]); a command that writes one file stages it the same way
//! ([`write_atomically`]). An existing result is replaced only when the caller says so (the
//! `--replace` option), and the old result is removed only after the new one is in place.
//!
//! A run that is killed leaves at most its staging folder (or file) behind; its name carries the
//! process id, so the next run for the same destination recognises it once that process no longer
//! runs, removes it and says so. On Linux the swap of an existing folder is one
//! `renameat2(RENAME_EXCHANGE)` call, so the destination always holds the complete old or the
//! complete new set. Elsewhere (or on a file system without the exchange) it is two renames: the
//! old folder moves to `.<name>.valuedrift-old-<pid>`, then the new one into place; a kill between
//! them leaves the destination missing for that instant, and the next run moves the old set back.

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
    open_csv_trimmed(path, csv::Trim::All)
}

/// [`open_csv`] with the given trimming of fields.
pub fn open_csv_trimmed(
    path: &Path,
    trim: csv::Trim,
) -> Result<(csv::Reader<std::fs::File>, Vec<String>), InputError> {
    let mut reader = csv::ReaderBuilder::new()
        .trim(trim)
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

/// Writes `path` through `fill`, atomically: the content goes to a staging file beside `path`
/// (`.<name>.valuedrift-staging-<pid>`), which is renamed to `path` only if `fill` succeeds. The
/// folder is created if missing. An existing `path` is refused unless `replace` is set; stale
/// staging files of killed runs are removed first (with a note on standard error). After a stop
/// request nothing is renamed into place.
pub fn write_atomically<E>(
    path: &Path,
    replace: bool,
    fill: impl FnOnce(&mut dyn Write) -> Result<(), E>,
) -> Result<(), WriteError<E>> {
    let io = |e: std::io::Error| WriteError::Io(path.to_path_buf(), e);
    let (dir, name) = split_destination(path).map_err(io)?;
    std::fs::create_dir_all(&dir).map_err(io)?;
    clear_stale(&dir, &name);
    if !replace && std::fs::symlink_metadata(path).is_ok() {
        return Err(WriteError::Exists(path.to_path_buf()));
    }
    let staging = Staged::create_file(dir.join(sibling_name(&name, STAGING)))?;
    {
        let file = std::fs::File::create_new(&staging.path).map_err(io)?;
        let mut buffered = std::io::BufWriter::new(file);
        fill(&mut buffered).map_err(WriteError::Content)?;
        buffered.flush().map_err(io)?;
    }
    if !replace && std::fs::symlink_metadata(path).is_ok() {
        return Err(WriteError::Exists(path.to_path_buf()));
    }
    if crate::progress::stop_requested() {
        return Err(WriteError::Stopped(crate::progress::Stopped));
    }
    std::fs::rename(&staging.path, path).map_err(io)?;
    staging.release();
    Ok(())
}

/// Refuses an existing `path` unless `replace` is set: the rule [`write_atomically`] applies
/// when it writes, checked before a command does its work so that a refusal costs nothing. The
/// refusal is [`WriteError::Exists`]; nothing is produced, so there is no content error.
pub fn refuse_existing(
    path: &Path,
    replace: bool,
) -> Result<(), WriteError<std::convert::Infallible>> {
    if !replace && std::fs::symlink_metadata(path).is_ok() {
        return Err(WriteError::Exists(path.to_path_buf()));
    }
    Ok(())
}

/// Failure of [`write_atomically`]: the content could not be produced, the destination exists, or
/// the file system refused.
#[derive(Debug, thiserror::Error)]
pub enum WriteError<E> {
    /// Producing the content failed; nothing was written.
    #[error("{0}")]
    Content(E),
    /// The destination exists and replacing it was not asked for; nothing was written.
    #[error(
        "{path} already exists; give --replace to replace it (it is replaced only once the new \
         file is complete), or choose another name",
        path = .0.display()
    )]
    Exists(PathBuf),
    /// Creating, writing or renaming the file failed; nothing was left at the destination.
    #[error("cannot write {path}: {source}", path = .0.display(), source = .1)]
    Io(PathBuf, std::io::Error),
    /// A stop was requested ([`crate::progress::request_stop`]); nothing was written.
    #[error(transparent)]
    Stopped(crate::progress::Stopped),
}

/// Name part of staging folders and files: `.<name>.valuedrift-staging-<pid>`.
const STAGING: &str = "staging";
/// Name part of an old set moved aside by the two-rename fallback: `.<name>.valuedrift-old-<pid>`.
const OLD: &str = "old";

/// The hidden sibling name of destination `name` for this process: `.<name>.valuedrift-<kind>-<pid>`.
fn sibling_name(name: &str, kind: &str) -> String {
    format!(".{name}.valuedrift-{kind}-{}", std::process::id())
}

/// The folder (`.` when none is given) and file name of a destination.
fn split_destination(path: &Path) -> std::io::Result<(PathBuf, String)> {
    let name = path
        .file_name()
        .and_then(|n| n.to_str())
        .ok_or_else(|| {
            std::io::Error::new(
                std::io::ErrorKind::InvalidInput,
                "expected a path ending in a file or folder name (UTF-8)",
            )
        })?
        .to_string();
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    Ok((dir, name))
}

/// A staging path that is removed on drop unless released.
struct Staged {
    path: PathBuf,
    released: bool,
}

impl Staged {
    /// Claims `path` for a staging file (nothing is created yet); a leftover of this very
    /// process id (a killed earlier run that had the same id) is removed first.
    fn create_file<E>(path: PathBuf) -> Result<Self, WriteError<E>> {
        remove_entry(&path).map_err(|e| WriteError::Io(path.clone(), e))?;
        Ok(Staged {
            path,
            released: false,
        })
    }

    /// Keeps the path (it was renamed into place).
    fn release(mut self) {
        self.released = true;
    }
}

impl Drop for Staged {
    fn drop(&mut self) {
        if !self.released {
            let _ = remove_entry(&self.path);
        }
    }
}

/// Removes a file or a folder with its content; a missing path is not an error.
fn remove_entry(path: &Path) -> std::io::Result<()> {
    match std::fs::symlink_metadata(path) {
        Ok(m) if m.is_dir() => std::fs::remove_dir_all(path),
        Ok(_) => std::fs::remove_file(path),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(()),
        Err(e) => Err(e),
    }
}

/// Whether process `pid` still runs. This process counts as not running: a leftover carrying
/// its id comes from an earlier process that had the same id.
fn process_runs(pid: u32) -> bool {
    if pid == std::process::id() {
        return false;
    }
    #[cfg(unix)]
    {
        let Ok(pid) = libc::pid_t::try_from(pid) else {
            return false;
        };
        // SAFETY: kill with signal 0 sends nothing; it only checks that the process exists.
        let status = unsafe { libc::kill(pid, 0) };
        status == 0 || std::io::Error::last_os_error().raw_os_error() == Some(libc::EPERM)
    }
    #[cfg(not(unix))]
    {
        // Without a portable check, a leftover of another process id is kept.
        true
    }
}

/// Removes the staging folders and files that killed runs left beside destination `name` in
/// `dir`, and moves an old set that the two-rename fallback moved aside back into place when the
/// destination is missing. Says what it did on standard error; failures to clean are notes too,
/// never errors (the new run does not depend on them).
fn clear_stale(dir: &Path, name: &str) {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return;
    };
    let destination = dir.join(name);
    for entry in entries.flatten() {
        let file_name = entry.file_name();
        let Some(leftover) = file_name.to_str() else {
            continue;
        };
        let Some((kind, pid)) = parse_sibling(leftover, name) else {
            continue;
        };
        if process_runs(pid) {
            continue;
        }
        let path = entry.path();
        if kind == OLD && std::fs::symlink_metadata(&destination).is_err() {
            match std::fs::rename(&path, &destination) {
                Ok(()) => eprintln!(
                    "note: restored the previous result {} from {} (a run, process {pid}, was \
                     stopped while replacing it)",
                    destination.display(),
                    path.display()
                ),
                Err(e) => eprintln!(
                    "note: the previous result of {} is in {} (a run, process {pid}, was stopped \
                     while replacing it); it could not be moved back: {e}",
                    destination.display(),
                    path.display()
                ),
            }
            continue;
        }
        match remove_entry(&path) {
            Ok(()) => eprintln!(
                "note: removed {}, left by a stopped run (process {pid} no longer runs)",
                path.display()
            ),
            Err(e) => eprintln!(
                "note: cannot remove {}, left by a stopped run (process {pid}): {e}",
                path.display()
            ),
        }
    }
}

/// The kind (staging or old) and process id of a hidden sibling of `name`, if `leftover` is one.
fn parse_sibling<'a>(leftover: &'a str, name: &str) -> Option<(&'a str, u32)> {
    let rest = leftover.strip_prefix('.')?.strip_prefix(name)?;
    let rest = rest.strip_prefix(".valuedrift-")?;
    let (kind, pid) = rest.split_once('-')?;
    if kind != STAGING && kind != OLD {
        return None;
    }
    if pid.is_empty() || !pid.bytes().all(|b| b.is_ascii_digit()) {
        return None;
    }
    Some((kind, pid.parse().ok()?))
}

/// How an [`OutputSet`] treats the folder it writes to.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Mode {
    /// The run's files are the whole folder: an existing non-empty folder is a result set.
    Whole,
    /// The run adds files to a folder that holds other results (e.g. a fit folder): the other
    /// files stay; an existing file of the same name is one of this command's earlier results.
    Add,
    /// The folder is itself the staging folder of an enclosing set of this process (the demo
    /// runs fit, compare and contrast into its own staging folder): files go straight in, and
    /// the enclosing set puts them in place.
    Inside,
}

/// Why a result could not be written (every variant names the path).
#[derive(Debug, thiserror::Error)]
pub enum OutputError {
    /// The output path cannot be an output folder.
    #[error("output folder {}: {reason}", path.display())]
    Destination {
        /// The path given.
        path: PathBuf,
        /// What is wrong with it.
        reason: String,
    },
    /// The output path is a file.
    #[error("{} is a file; expected an output folder", .0.display())]
    NotAFolder(PathBuf),
    /// A stop was requested while the set was being made ([`crate::progress::request_stop`]):
    /// the new set is dropped.
    #[error(transparent)]
    Stopped(#[from] crate::progress::Stopped),
    /// A whole new set was asked for, and the folder holds an earlier one.
    #[error(
        "{} already holds {entries} entries of an earlier result; give --replace to replace \
         the whole folder (the old set is removed only once the new one is complete), or \
         choose another output folder",
        folder.display()
    )]
    EarlierSet {
        /// The output folder.
        folder: PathBuf,
        /// How many entries it holds.
        entries: usize,
    },
    /// A file of this command already exists in a folder it adds to.
    #[error(
        "{} already exists (an earlier result); give --replace to replace this command's files \
         in {} (the other files stay), or choose another --out",
        path.display(),
        folder.display()
    )]
    EarlierFile {
        /// The file.
        path: PathBuf,
        /// The folder added to.
        folder: PathBuf,
    },
    /// A file to stage lies outside the output folder (a programming error, reported).
    #[error("{} is outside the output folder {}", path.display(), folder.display())]
    Outside {
        /// The file.
        path: PathBuf,
        /// The output folder.
        folder: PathBuf,
    },
    /// The file system refused.
    #[error("cannot write {}: {source}", path.display())]
    Io {
        /// Where.
        path: PathBuf,
        /// Why.
        #[source]
        source: std::io::Error,
    },
    /// Producing a file's content failed.
    #[error("cannot write {}: {message}", path.display())]
    Content {
        /// The file.
        path: PathBuf,
        /// What failed.
        message: String,
    },
}

/// The output folder of one run, written as one: every file is staged in a hidden sibling folder
/// (`.<name>.valuedrift-staging-<pid>`), and [`OutputSet::commit`] puts the complete folder in
/// place in one step. Dropping the set without committing removes the staging folder, so a run
/// that fails part-way leaves no output behind.
///
/// An existing non-empty folder is refused unless `replace` is set; with it, the old folder is
/// removed only after the new one is in place. In the adding mode ([`OutputSet::adding_to`])
/// the staging folder also receives hard links (copies where links fail) of the folder's other
/// files, so the folder is always the complete old or the complete new set.
pub struct OutputSet {
    target: PathBuf,
    staging: PathBuf,
    mode: Mode,
    replace: bool,
    created: bool,
    staged: usize,
}

impl OutputSet {
    /// The output folder `dir` as a whole new result set. Fails at once (before any work) when
    /// `dir` is a file, or a non-empty folder and `replace` is not set. Removes leftovers of
    /// killed runs for `dir` first.
    pub fn create(dir: &Path, replace: bool) -> Result<Self, OutputError> {
        let set = OutputSet::open(dir, replace, Mode::Whole)?;
        if !replace && set.mode == Mode::Whole {
            set.refuse_existing_set()?;
        }
        Ok(set)
    }

    /// The output folder `dir` for a command that reads its inputs from folder `inputs`: when they
    /// are the same folder, the new files are added to it and its other files kept (an earlier
    /// output of the same name is replaced only with `replace`); otherwise as [`OutputSet::create`].
    pub fn adding_to(dir: &Path, inputs: &Path, replace: bool) -> Result<Self, OutputError> {
        if !same_folder(dir, inputs) {
            return OutputSet::create(dir, replace);
        }
        OutputSet::open(dir, replace, Mode::Add)
    }

    fn open(dir: &Path, replace: bool, mode: Mode) -> Result<Self, OutputError> {
        let (parent, name) = split_destination(dir).map_err(|e| OutputError::Destination {
            path: dir.to_path_buf(),
            reason: e.to_string(),
        })?;
        if let Ok(m) = std::fs::metadata(dir)
            && !m.is_dir()
        {
            return Err(OutputError::NotAFolder(dir.to_path_buf()));
        }
        if name.starts_with('.') && name.ends_with(&sibling_name("", STAGING)[1..]) {
            return Ok(OutputSet {
                target: dir.to_path_buf(),
                staging: dir.to_path_buf(),
                mode: Mode::Inside,
                replace,
                created: false,
                staged: 0,
            });
        }
        clear_stale(&parent, &name);
        Ok(OutputSet {
            target: dir.to_path_buf(),
            staging: parent.join(sibling_name(&name, STAGING)),
            mode,
            replace,
            created: false,
            staged: 0,
        })
    }

    /// The refusal of an existing non-empty folder (whole-set mode without `replace`).
    fn refuse_existing_set(&self) -> Result<(), OutputError> {
        let count = match std::fs::read_dir(&self.target) {
            Ok(entries) => entries.count(),
            Err(_) => return Ok(()),
        };
        if count == 0 {
            return Ok(());
        }
        Err(OutputError::EarlierSet {
            folder: self.target.clone(),
            entries: count,
        })
    }

    /// The staging folder, created on first use. Commands that run other commands into the same
    /// result (the demo) write there, then commit the set.
    pub fn staging_dir(&mut self) -> Result<&Path, OutputError> {
        if !self.created && self.mode != Mode::Inside {
            // A leftover of an earlier process with this id was removed by clear_stale.
            std::fs::create_dir_all(&self.staging).map_err(|source| OutputError::Io {
                path: self.staging.clone(),
                source,
            })?;
            self.created = true;
        }
        Ok(&self.staging)
    }

    /// Stages `path` (a path inside the output folder) with the content written by `fill`.
    pub fn stage<E: std::fmt::Display>(
        &mut self,
        path: &Path,
        fill: impl FnOnce(&mut dyn Write) -> Result<(), E>,
    ) -> Result<(), OutputError> {
        let mut staged = self.stage_writer(path)?;
        fill(&mut staged.writer).map_err(|e| OutputError::Content {
            path: path.to_path_buf(),
            message: e.to_string(),
        })?;
        staged.finish()
    }

    /// Stages `path` (a path inside the output folder) as a file its caller writes over time,
    /// for outputs written a part at a time; it is part of the set once created, and must be
    /// finished with [`StagedFile::finish`] before [`OutputSet::commit`].
    pub fn stage_writer(&mut self, path: &Path) -> Result<StagedFile, OutputError> {
        let relative = path
            .strip_prefix(&self.target)
            .map_err(|_| OutputError::Outside {
                path: path.to_path_buf(),
                folder: self.target.clone(),
            })?;
        if self.mode == Mode::Add && !self.replace && std::fs::symlink_metadata(path).is_ok() {
            return Err(OutputError::EarlierFile {
                path: path.to_path_buf(),
                folder: self.target.clone(),
            });
        }
        let staged = self.staging_dir()?.join(relative);
        let io = |source: std::io::Error| OutputError::Io {
            path: path.to_path_buf(),
            source,
        };
        if let Some(folder) = staged.parent() {
            std::fs::create_dir_all(folder).map_err(io)?;
        }
        let file = std::fs::File::create(&staged).map_err(io)?;
        self.staged += 1;
        Ok(StagedFile {
            path: path.to_path_buf(),
            writer: std::io::BufWriter::new(file),
        })
    }

    /// Number of files staged so far.
    pub fn len(&self) -> usize {
        self.staged
    }

    /// Whether no file was staged.
    pub fn is_empty(&self) -> bool {
        self.staged == 0
    }

    /// Puts the complete new folder in place in one step and then removes the old one; refuses
    /// with [`OutputError::Stopped`] after a stop request.
    pub fn commit(mut self) -> Result<(), OutputError> {
        // After a stop request nothing is put in place (dropping self removes the staging).
        if crate::progress::stop_requested() {
            return Err(crate::progress::Stopped.into());
        }
        if self.mode == Mode::Inside {
            return Ok(());
        }
        self.staging_dir()?;
        let target = self.target.clone();
        let fail = |source: std::io::Error| OutputError::Io {
            path: target.clone(),
            source,
        };
        match self.mode {
            Mode::Whole if !self.replace => self.refuse_existing_set()?,
            Mode::Whole => {}
            Mode::Add => link_missing(&self.target, &self.staging).map_err(fail)?,
            Mode::Inside => {}
        }
        let old = swap_into_place(&self.staging, &self.target).map_err(fail)?;
        // From here the staging path (or the fallback's old path) holds the old set.
        self.created = false;
        if let Some(old) = old
            && let Err(e) = remove_entry(&old)
        {
            eprintln!(
                "note: the new result is in {}, but the old one in {} could not be removed: {e}",
                self.target.display(),
                old.display()
            );
        }
        Ok(())
    }
}

impl Drop for OutputSet {
    fn drop(&mut self) {
        if self.created {
            let _ = remove_entry(&self.staging);
        }
    }
}

/// Whether two paths name the same folder (the same path, or the same existing folder).
fn same_folder(a: &Path, b: &Path) -> bool {
    a == b
        || matches!(
            (std::fs::canonicalize(a), std::fs::canonicalize(b)),
            (Ok(x), Ok(y)) if x == y
        )
}

/// Hard-links (or copies, where links fail) every file of `from` that `to` lacks into `to`,
/// folders recursively; a missing `from` has nothing to add.
fn link_missing(from: &Path, to: &Path) -> std::io::Result<()> {
    let entries = match std::fs::read_dir(from) {
        Ok(entries) => entries,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(()),
        Err(e) => return Err(e),
    };
    for entry in entries {
        let entry = entry?;
        let source = entry.path();
        let destination = to.join(entry.file_name());
        if entry.file_type()?.is_dir() {
            std::fs::create_dir_all(&destination)?;
            link_missing(&source, &destination)?;
        } else if std::fs::symlink_metadata(&destination).is_err()
            && std::fs::hard_link(&source, &destination).is_err()
        {
            std::fs::copy(&source, &destination)?;
        }
    }
    Ok(())
}

/// Puts folder `staging` at `target` in one step. Returns where the old set now is (to be
/// removed), or None when there was none.
fn swap_into_place(staging: &Path, target: &Path) -> std::io::Result<Option<PathBuf>> {
    if std::fs::symlink_metadata(target).is_err() {
        std::fs::rename(staging, target)?;
        return Ok(None);
    }
    if exchange(staging, target)? {
        return Ok(Some(staging.to_path_buf()));
    }
    // Two renames: for the instant between them the target is missing, and the old set waits
    // under a name the next run recognises and moves back if the second rename never happens.
    let (parent, name) = split_destination(target)?;
    let old = parent.join(sibling_name(&name, OLD));
    remove_entry(&old)?;
    std::fs::rename(target, &old)?;
    if let Err(e) = std::fs::rename(staging, target) {
        let _ = std::fs::rename(&old, target);
        return Err(e);
    }
    Ok(Some(old))
}

/// Exchanges two existing paths atomically (Linux `renameat2` with `RENAME_EXCHANGE`). Ok(false)
/// where the system or file system has no such exchange.
#[cfg(target_os = "linux")]
fn exchange(a: &Path, b: &Path) -> std::io::Result<bool> {
    use std::ffi::CString;
    use std::os::unix::ffi::OsStrExt;
    let c = |p: &Path| {
        CString::new(p.as_os_str().as_bytes())
            .map_err(|e| std::io::Error::new(std::io::ErrorKind::InvalidInput, e))
    };
    let (a, b) = (c(a)?, c(b)?);
    // SAFETY: both are NUL-terminated paths that live across the call; AT_FDCWD resolves
    // relative paths against the working folder, as std::fs does.
    let status = unsafe {
        libc::renameat2(
            libc::AT_FDCWD,
            a.as_ptr(),
            libc::AT_FDCWD,
            b.as_ptr(),
            libc::RENAME_EXCHANGE,
        )
    };
    if status == 0 {
        return Ok(true);
    }
    let error = std::io::Error::last_os_error();
    match error.raw_os_error() {
        Some(libc::ENOSYS) | Some(libc::EINVAL) | Some(libc::EOPNOTSUPP) => Ok(false),
        _ => Err(error),
    }
}

/// Exchanges two existing paths atomically; this system has no such call (see the Linux version).
#[cfg(not(target_os = "linux"))]
fn exchange(_a: &Path, _b: &Path) -> std::io::Result<bool> {
    Ok(false)
}

/// The SHA-256 digest of the file at `path` as lower-case hexadecimal, read in pieces (the file
/// is never held in memory whole).
pub fn sha256_of_file(path: &Path) -> Result<String, InputError> {
    use sha2::{Digest, Sha256};
    let mut file = std::fs::File::open(path)
        .map_err(|e| InputError::file(path, format!("cannot be read: {e}")))?;
    let mut hasher = Sha256::new();
    std::io::copy(&mut file, &mut hasher)
        .map_err(|e| InputError::file(path, format!("cannot be read: {e}")))?;
    Ok(format!("{:x}", hasher.finalize()))
}

/// Runs `read` on the file at `path` between two SHA-256 digests of it ([`sha256_of_file`]) and
/// returns what it read with the digest, which then describes the bytes that were read (unless
/// the file was changed and changed back within the read). A file that changes while it is read
/// is an error: what was read may be neither version.
pub fn read_with_digest<T>(
    path: &Path,
    read: impl FnOnce() -> Result<T, InputError>,
) -> Result<(T, String), InputError> {
    let before = sha256_of_file(path)?;
    let value = read()?;
    if sha256_of_file(path)? != before {
        return Err(InputError::file(
            path,
            "changed while it was read; run again once nothing writes to it",
        ));
    }
    Ok((value, before))
}

/// A file of an [`OutputSet`] being written (from [`OutputSet::stage_writer`]).
pub struct StagedFile {
    /// Where the file will be once the set is committed (for messages).
    pub path: PathBuf,
    /// The staged file.
    pub writer: std::io::BufWriter<std::fs::File>,
}

impl StagedFile {
    /// Writes out what is buffered; errors name the file's final path.
    pub fn finish(mut self) -> Result<(), OutputError> {
        self.writer.flush().map_err(|source| OutputError::Io {
            path: self.path.clone(),
            source,
        })
    }

    /// An error about the file's content (a writer's error, with the file's final path).
    pub fn content_error(&self, error: impl std::fmt::Display) -> OutputError {
        OutputError::Content {
            path: self.path.clone(),
            message: error.to_string(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A digest stands for the bytes that were read only if the file held still (common
    /// practice): a change during the read is refused, naming the file; a still file gives the
    /// digest of its bytes (SHA-256 of "abc" from FIPS 180-2, appendix B.1).
    #[test]
    fn a_file_that_changes_while_it_is_read_is_refused_and_a_still_one_gives_its_digest() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("design.csv");
        std::fs::write(&path, "abc").unwrap();
        let (text, digest) =
            read_with_digest(&path, || Ok(std::fs::read_to_string(&path).unwrap())).unwrap();
        assert_eq!(text, "abc");
        assert_eq!(
            digest,
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
        let changed = read_with_digest(&path, || {
            std::fs::write(&path, "abd").unwrap();
            Ok(())
        });
        let message = changed.unwrap_err().to_string();
        assert!(
            message.contains("design.csv") && message.contains("changed while it was read"),
            "{message}"
        );
    }
}
