//! `merge` of the folders of `check --shard 1/N` … `N/N`.
//!
//! The pooled statistics average every subject's statistics replicate by replicate, and the
//! figures show them, so no shard can write them. A check shard simulates its subjects (each
//! from a stream of the seed and its label, as in a single run) and keeps their statistics and
//! replicate values ([`crate::check::stored_checks_table`]). `merge` reads them back exactly, puts
//! the subjects in table order and runs the recorded check command itself (the shards' command
//! line without `--shard`, with the merge's `--out`) with these checks in place of simulating:
//! the tables, figures and run.json are written by the code of a single check. The merging node
//! needs the trial table (checked against the recorded checksum) and the fit folder at the
//! recorded paths.

use super::record::{ShardFolder, check_data, strings};
use super::run_recorded;
use crate::check::{StoredChecks, SubjectCheck};
use crate::cli::ShardResults;
use crate::cli::check::{FromShards, SHARD_CHECKS};
use crate::cli::shard::{self, Shard};
use crate::files::InputError;
use crate::results::fit_folder::key;
use std::path::Path;

/// Pools the check shards `shards` (sorted and checked to be one run) into `out`. The shards'
/// tables are read together, one subject at a time in table order (each subject from its
/// shard's table, which lists its subjects in table order), so memory holds one subject per
/// shard and not every replicate of every subject.
pub(super) fn run(
    shards: &[ShardFolder],
    out: &Path,
    replace: bool,
) -> Result<(), Box<dyn std::error::Error>> {
    let record = &shards[0].record;
    check_data(record)?;
    let subjects = strings(&record[key::SHARD][shard::KEY_SUBJECTS]);
    let count = shards[0].shard.count;
    let mut readers = Vec::with_capacity(shards.len());
    for s in shards {
        let path = SHARD_CHECKS.csv_in(&s.dir);
        readers.push((s.shard, StoredChecks::open(&path)?, path));
    }
    let line = shard::with_out(
        &strings(&record["command_line"]),
        &out.display().to_string(),
    );
    println!(
        "merging {} check shards: {} subjects; pooling their statistics",
        shards.len(),
        subjects.len()
    );
    let not_this_shard = |path: &Path, shard: Shard, what: String| -> Box<dyn std::error::Error> {
        InputError::file(
            path,
            format!(
                "{what}, against shard {} of {} of the recorded subjects: the folder does not \
                 hold this shard's check",
                shard.index, shard.count
            ),
        )
        .into()
    };
    let mut next_subject = 0;
    let next = move || -> Result<Option<SubjectCheck>, Box<dyn std::error::Error>> {
        let Some(label) = subjects.get(next_subject) else {
            // Every recorded subject handed out: no shard may list more.
            for (shard, reader, path) in &mut readers {
                if let Some(extra) = reader.next_check()? {
                    let what = format!("lists subject {:?} after its last subject", extra.subject);
                    return Err(not_this_shard(path, *shard, what));
                }
            }
            return Ok(None);
        };
        next_subject += 1;
        let index = Shard::of(label, count);
        let Some((shard, reader, path)) = readers.iter_mut().find(|(s, ..)| s.index == index)
        else {
            return Err(format!("no shard {index} of {count} among the folders given").into());
        };
        match reader.next_check()? {
            Some(check) if check.subject == *label => Ok(Some(check)),
            found => {
                let what = format!(
                    "lists {} where subject {label:?} comes next",
                    found.map_or("no further subject".to_string(), |c| format!(
                        "subject {:?}",
                        c.subject
                    ))
                );
                Err(not_this_shard(path, *shard, what))
            }
        }
    };
    run_recorded(
        &shards[0],
        &line,
        ShardResults::Check(FromShards {
            next: Box::new(next),
            replace,
        }),
    )
}
