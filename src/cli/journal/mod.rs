//! The journal of `fit`: every finished (model, subject) pair is written down durably as it
//! finishes, so that a run stopped part-way (killed, out of time on a cluster, a node failure)
//! continues with `--resume` where it stopped and writes the outputs an uninterrupted run
//! writes, byte for byte.
//!
//! The journal is one file, [`FILE_NAME`], in a working folder beside the output folder:
//! `.<name>.valuedrift-journal` for `--out <name>`. It is not part of the output set (which is
//! still written as a whole at the end, [`crate::files::OutputSet`]), so an interrupted run never
//! leaves partial results in the output folder, and it is removed once the outputs are in place.
//!
//! Its first record, the header, names what the fits depend on: the valuedrift version, the
//! SHA-256 of the data file's bytes, how the file is read (column names, choice codes, missing
//! tokens), each model's name and definition text, the fit options, the data screen's settings
//! and the shard. A resume refuses a journal whose header differs from the run's, naming what
//! changed. Every further record is one pair's outcome ([`codec`]: numbers as bit patterns), one
//! checksummed line each ([`frames`]), appended at once (so that it survives the process
//! being killed: the system holds it) and made durable (`fdatasync`, which includes the file's new length)
//! when a record is appended [`SYNC_INTERVAL`] or more after the journal was opened or last
//! made durable (the first time also the journal's folder and its parent, so that the new
//! entries survive too). A crash of the whole system loses at most the pairs of the last
//! second (with a run shorter than that, the journal itself, so the resume starts afresh),
//! which a resume fits again; one `fdatasync` per pair cost 1–6 ms of waiting each, and the
//! header's with its folders 9 ms, more than fitting a small subject. A record torn by a crash
//! can only be the last; it is dropped and its pair fitted again.
//!
//! A resume takes each pair's outcome from the journal instead of fitting it again: a fit
//! depends only on the subject's own data, the model, the options and the seed (a subject's
//! starts come from the seed and its label, [`crate::fit::starts::subject_stream`]), so it is
//! the fit an uninterrupted run makes. The tables are built from all outcomes in the order of an
//! uninterrupted run. The empirical-Bayes stage of `--hierarchical` is not journalled: it runs
//! again from the per-subject fits on a resume (it is deterministic for its seed).
//!
//! While a run writes the journal it holds an exclusive lock on the file (released by the
//! system when the process ends, however it ends), so a second run into the same output folder
//! is refused instead of writing into the first run's journal.

mod codec;
mod frames;

use crate::data::{ColumnMap, ScreenSettings};
use crate::fit::{FitOptions, Outcome};
use crate::model::Model;
use serde_json::{Value, json};
use std::fs::File;
use std::io::{Read, Write};
use std::path::{Path, PathBuf};
use std::sync::Mutex;
use std::time::{Duration, Instant};

/// Longest time an appended record waits in the system's cache before the journal is made
/// durable (`fdatasync`) again, when further records follow.
pub const SYNC_INTERVAL: Duration = Duration::from_secs(1);

/// The journal's file in its working folder.
pub const FILE_NAME: &str = "fits.journal";

/// The first field of the header, naming what the file is.
const KIND: &str = "valuedrift fit journal";

/// The options that choose what happens to the journal of an interrupted run (`fit`).
#[derive(Debug, Clone, Copy, clap::Args)]
pub struct JournalArgs {
    /// Continue an interrupted run of the same fit (same data, models and options): the pairs in
    /// its journal (beside --out, .<name>.valuedrift-journal) are taken from it and the others
    /// fitted; the outputs are those of an uninterrupted run. With no journal, the fit starts
    /// from the beginning (so a job script may always give it).
    #[arg(long, conflicts_with = "restart")]
    pub resume: bool,
    /// Discard the journal of an interrupted run and start over (without --resume or this
    /// option, a fit refuses to start while a journal exists).
    #[arg(long)]
    pub restart: bool,
}

/// The command-line flags of [`JournalArgs`], removed from the command line a run records (a
/// resumed run records the command line of an uninterrupted one).
pub const FLAGS: [&str; 2] = ["--resume", "--restart"];

/// `command_line` without the flags of [`FLAGS`].
pub fn without_flags(command_line: &[String]) -> Vec<String> {
    command_line
        .iter()
        .filter(|a| !FLAGS.contains(&a.as_str()))
        .cloned()
        .collect()
}

/// What the fits of a run depend on: the journal's header.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Header {
    version: String,
    data_sha256: String,
    reading: String,
    models: Vec<(String, String)>,
    options: String,
    screen: String,
    shard: String,
}

impl Header {
    /// The header of a run on data whose SHA-256 is `data_sha256` (hex).
    pub fn new(
        data_sha256: &str,
        columns: &ColumnMap,
        models: &[Model],
        options: &FitOptions,
        screen: &ScreenSettings,
        shard: Option<super::shard::Shard>,
    ) -> Header {
        let FitOptions {
            starts,
            seed,
            max_iterations,
            deadline,
            lock,
        } = options;
        let ScreenSettings {
            fast_floor,
            trim_below,
            trim_above,
            responses_per_parameter,
        } = screen;
        let seconds = |x: &Option<f64>| x.map_or("none".to_string(), |x| format!("{x} s"));
        Header {
            version: env!("CARGO_PKG_VERSION").to_string(),
            data_sha256: data_sha256.to_string(),
            reading: columns.describe(),
            models: models
                .iter()
                .map(|m| (m.name.clone(), m.text.clone()))
                .collect(),
            options: format!(
                "starts {starts}, seed {seed}, iterations {max_iterations}, deadline {}, lock {}",
                seconds(deadline),
                seconds(lock)
            ),
            screen: format!(
                "fast floor {fast_floor} s, trim below {}, trim above {}, {responses_per_parameter} \
                 responses per parameter",
                seconds(trim_below),
                seconds(trim_above)
            ),
            shard: shard.map_or("none".to_string(), |s| format!("{}/{}", s.index, s.count)),
        }
    }

    fn record(&self) -> Value {
        json!({
            "journal": KIND,
            "version": self.version,
            "data_sha256": self.data_sha256,
            "reading": self.reading,
            "models": self.models.iter().map(|(name, text)| json!({"name": name, "definition": text})).collect::<Vec<_>>(),
            "options": self.options,
            "screen": self.screen,
            "shard": self.shard,
        })
    }

    fn from_record(record: &Value) -> Result<Header, String> {
        let text = |v: &Value, name: &str| {
            v.get(name)
                .and_then(Value::as_str)
                .map(str::to_string)
                .ok_or_else(|| format!("the header has no {name}"))
        };
        if text(record, "journal")? != KIND {
            return Err(format!("expected a header naming a {KIND}"));
        }
        let models = record
            .get("models")
            .and_then(Value::as_array)
            .ok_or("the header has no models")?
            .iter()
            .map(|m| Ok((text(m, "name")?, text(m, "definition")?)))
            .collect::<Result<_, String>>()?;
        Ok(Header {
            version: text(record, "version")?,
            data_sha256: text(record, "data_sha256")?,
            reading: text(record, "reading")?,
            models,
            options: text(record, "options")?,
            screen: text(record, "screen")?,
            shard: text(record, "shard")?,
        })
    }

    /// What differs between the journal's header (`self`) and the run's (`now`), in words.
    fn changes(&self, now: &Header) -> Vec<String> {
        let mut changes = Vec::new();
        let mut differs = |what: &str, then: &str, now: &str| {
            if then != now {
                changes.push(format!("{what} (journal: {then}; now: {now})"));
            }
        };
        differs("the valuedrift version", &self.version, &now.version);
        differs(
            "the data file's bytes, by SHA-256",
            &self.data_sha256,
            &now.data_sha256,
        );
        differs(
            "how the data file is read (--columns, --by, --choice-codes, --missing)",
            &self.reading,
            &now.reading,
        );
        let names = |h: &Header| {
            h.models
                .iter()
                .map(|(n, _)| n.as_str())
                .collect::<Vec<_>>()
                .join(", ")
        };
        differs("the models", &names(self), &names(now));
        differs("the fit options", &self.options, &now.options);
        differs("the data screen's settings", &self.screen, &now.screen);
        differs("the shard", &self.shard, &now.shard);
        for ((name, then), (_, text)) in self.models.iter().zip(&now.models) {
            if names(self) == names(now) && then != text {
                changes.push(format!("the definition of model {name}"));
            }
        }
        changes
    }
}

/// What to do with the journal of an interrupted run.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Mode {
    /// Start a new journal; refuse while one exists.
    Fresh,
    /// Continue an existing journal (or start one when there is none).
    Resume,
    /// Discard an existing journal and start a new one.
    Restart,
}

impl JournalArgs {
    /// The mode the options ask for.
    pub fn mode(self) -> Mode {
        match (self.resume, self.restart) {
            (true, _) => Mode::Resume,
            (false, true) => Mode::Restart,
            (false, false) => Mode::Fresh,
        }
    }
}

/// Why the journal cannot be used; each names the journal's path.
#[derive(Debug, thiserror::Error)]
pub enum JournalError {
    /// The output folder has no name to put the working folder beside.
    #[error("output folder {}: expected a path ending in a folder name", .0.display())]
    Destination(PathBuf),
    /// A journal exists, and neither resuming nor restarting was asked for.
    #[error(
        "{} holds the journal of an interrupted fit into {} ({pairs} (model, subject) pairs \
         finished); give --resume to continue it (with the same data, models and options), or \
         --restart to discard it and start over",
        path.display(),
        out.display()
    )]
    Exists {
        /// The journal.
        path: PathBuf,
        /// The output folder.
        out: PathBuf,
        /// Finished pairs in it.
        pairs: usize,
    },
    /// The run's inputs or options differ from the journal's.
    #[error(
        "cannot resume from the journal {}: changed since the interrupted run: {}; resume with \
         that run's data, models and options, or give --restart to discard the journal and \
         start over",
        path.display(),
        changes.join("; ")
    )]
    Changed {
        /// The journal.
        path: PathBuf,
        /// What changed, in words.
        changes: Vec<String>,
    },
    /// A line before the last is not an intact record, or a record is not a journal's.
    #[error(
        "{} line {line}: {reason}; the journal is damaged (a crash can tear only its last \
         line); give --restart to discard it and start over",
        path.display()
    )]
    Damaged {
        /// The journal.
        path: PathBuf,
        /// Line number, from 1.
        line: usize,
        /// What is wrong.
        reason: String,
    },
    /// Another process holds the journal's lock.
    #[error(
        "{} is being written by another fit into the same output folder; wait for it to \
         finish, or choose another --out",
        .0.display()
    )]
    Busy(PathBuf),
    /// The file system refused.
    #[error("cannot use the journal {}: {source}", path.display())]
    Io {
        /// The journal or its folder.
        path: PathBuf,
        /// Why.
        #[source]
        source: std::io::Error,
    },
}

/// An open journal that finished pairs are appended to.
pub struct Journal {
    folder: PathBuf,
    path: PathBuf,
    /// None once a write failed (said once on standard error; the run goes on unjournalled).
    file: Mutex<Option<Open>>,
}

/// The journal's file and how durable it is.
struct Open {
    file: File,
    /// When it was opened or last made durable.
    since: Instant,
    /// Its folder and the folder's parent have been made durable.
    entries_synced: bool,
}

/// The working folder of the journal of output folder `out`.
pub fn working_folder(out: &Path) -> Result<PathBuf, JournalError> {
    let name = out
        .file_name()
        .and_then(|n| n.to_str())
        .ok_or_else(|| JournalError::Destination(out.to_path_buf()))?;
    let folder = format!(".{name}.valuedrift-journal");
    Ok(out
        .parent()
        .map_or(PathBuf::from(&folder), |p| p.join(&folder)))
}

impl Journal {
    /// Opens the journal of output folder `out` for a run whose header is `header`, as `mode`
    /// asks, and returns it with the outcomes it already holds (none unless resuming). Says on
    /// standard error what it did with an earlier journal.
    pub fn open(
        out: &Path,
        mode: Mode,
        header: &Header,
    ) -> Result<(Journal, Vec<Outcome>), JournalError> {
        let folder = working_folder(out)?;
        let path = folder.join(FILE_NAME);
        let io = |source| JournalError::Io {
            path: path.clone(),
            source,
        };
        let existing = match File::options().read(true).append(true).open(&path) {
            Ok(file) => Some(file),
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => None,
            Err(e) => return Err(io(e)),
        };
        let Some(mut file) = existing else {
            if mode == Mode::Resume {
                eprintln!(
                    "note: --resume: no journal of an interrupted run at {}; fitting from the start",
                    path.display()
                );
            }
            return Journal::start(folder, path, header);
        };
        lock(&file, &path)?;
        let mut bytes = Vec::new();
        file.read_to_end(&mut bytes).map_err(io)?;
        let pairs = bytes
            .iter()
            .filter(|&&b| b == b'\n')
            .count()
            .saturating_sub(1);
        match mode {
            Mode::Fresh => Err(JournalError::Exists {
                path,
                out: out.to_path_buf(),
                pairs,
            }),
            Mode::Restart => {
                drop(file);
                std::fs::remove_dir_all(&folder).map_err(io)?;
                eprintln!(
                    "note: --restart: discarded the journal {} ({pairs} pairs finished)",
                    path.display()
                );
                Journal::start(folder, path, header)
            }
            Mode::Resume => Journal::resume(folder, path, file, &bytes, header),
        }
    }

    /// A new journal holding `header`.
    fn start(
        folder: PathBuf,
        path: PathBuf,
        header: &Header,
    ) -> Result<(Journal, Vec<Outcome>), JournalError> {
        let io = |source| JournalError::Io {
            path: path.clone(),
            source,
        };
        std::fs::create_dir_all(&folder).map_err(io)?;
        let file = File::options()
            .read(true)
            .append(true)
            .create(true)
            .open(&path)
            .map_err(io)?;
        lock(&file, &path)?;
        // A run that got here first between our look and our lock would own the content.
        file.set_len(0).map_err(io)?;
        let journal = Journal {
            folder,
            path: path.clone(),
            file: Mutex::new(Some(Open {
                file,
                since: Instant::now(),
                entries_synced: false,
            })),
        };
        journal.write(&header.record()).map_err(io)?;
        Ok((journal, Vec::new()))
    }

    /// The journal in `file` (content `bytes`) continued, with its outcomes.
    fn resume(
        folder: PathBuf,
        path: PathBuf,
        file: File,
        bytes: &[u8],
        header: &Header,
    ) -> Result<(Journal, Vec<Outcome>), JournalError> {
        let damaged = |line, reason| JournalError::Damaged {
            path: path.clone(),
            line,
            reason,
        };
        let found = frames::read(bytes).map_err(|d| damaged(d.line, d.reason))?;
        let mut records = found.records.into_iter();
        let Some((line, first)) = records.next() else {
            // Stopped while writing the header: nothing was done yet.
            drop(file);
            std::fs::remove_dir_all(&folder).map_err(|source| JournalError::Io {
                path: path.clone(),
                source,
            })?;
            return Journal::start(folder, path, header);
        };
        let then = Header::from_record(&first).map_err(|reason| damaged(line, reason))?;
        let changes = then.changes(header);
        if !changes.is_empty() {
            return Err(JournalError::Changed { path, changes });
        }
        let mut outcomes = Vec::new();
        let mut seen = std::collections::HashSet::new();
        for (line, record) in records {
            let outcome = codec::from_record(&record).map_err(|reason| damaged(line, reason))?;
            if seen.insert(super::input::outcome_pair(&outcome)) {
                outcomes.push(outcome);
            }
        }
        if found.torn {
            file.set_len(found.intact_len)
                .and_then(|()| file.sync_data())
                .map_err(|source| JournalError::Io {
                    path: path.clone(),
                    source,
                })?;
            eprintln!(
                "note: ignored the torn last record of {} (the run was stopped while writing \
                 it); its pair is fitted again",
                path.display()
            );
        }
        Ok((
            Journal {
                folder,
                path,
                file: Mutex::new(Some(Open {
                    file,
                    since: Instant::now(),
                    entries_synced: false,
                })),
            },
            outcomes,
        ))
    }

    /// Appends `outcome`, durable within [`SYNC_INTERVAL`]. A failure is said once on standard
    /// error; the run goes on without the journal (its outputs do not depend on it).
    pub fn append(&self, outcome: &Outcome) {
        if let Err(e) = self.write(&codec::to_record(outcome)) {
            eprintln!(
                "warning: cannot write the journal {}: {e}; the fit goes on, but if it is \
                 stopped, a resume fits the later pairs again",
                self.path.display()
            );
        }
    }

    /// Appends `record` and, when [`SYNC_INTERVAL`] has passed since the journal was opened or
    /// last made durable, waits until it is on disk; after a failure, nothing more is written.
    fn write(&self, record: &Value) -> std::io::Result<()> {
        let mut guard = self.file.lock().unwrap_or_else(|e| e.into_inner());
        let Some(open) = guard.as_mut() else {
            return Ok(());
        };
        let written = open.file.write_all(&frames::line(record)).and_then(|()| {
            if open.since.elapsed() < SYNC_INTERVAL {
                return Ok(());
            }
            open.file.sync_data()?;
            if !open.entries_synced {
                // The new entries must survive a crash too: the file's in its folder, the
                // folder's in the output folder's parent.
                sync_folder(&self.folder)?;
                match self.folder.parent() {
                    Some(parent) if !parent.as_os_str().is_empty() => sync_folder(parent),
                    _ => sync_folder(Path::new(".")),
                }?;
                open.entries_synced = true;
            }
            open.since = Instant::now();
            Ok(())
        });
        if written.is_err() {
            *guard = None;
        }
        written
    }

    /// Removes the journal once the outputs are in place (a failure is a note: the outputs are
    /// complete).
    pub fn finish(self) {
        drop(self.file);
        if let Err(e) = std::fs::remove_dir_all(&self.folder) {
            eprintln!(
                "note: the outputs are complete, but the journal folder {} could not be removed: \
                 {e}; remove it before fitting into the same folder again",
                self.folder.display()
            );
        }
    }
}

/// Takes the journal's exclusive lock, or says who holds it.
fn lock(file: &File, path: &Path) -> Result<(), JournalError> {
    match file.try_lock() {
        Ok(()) => Ok(()),
        Err(std::fs::TryLockError::WouldBlock) => Err(JournalError::Busy(path.to_path_buf())),
        Err(std::fs::TryLockError::Error(source)) => Err(JournalError::Io {
            path: path.to_path_buf(),
            source,
        }),
    }
}

/// Makes the entries of `folder` durable (Unix; elsewhere folders cannot be opened to sync).
fn sync_folder(folder: &Path) -> std::io::Result<()> {
    if cfg!(unix) {
        File::open(folder)?.sync_all()?;
    }
    Ok(())
}
