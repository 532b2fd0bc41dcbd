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
use crate::check::{checks_from_stored, stored_checks_table};
use crate::cli::ShardResults;
use crate::cli::check::{FromShards, SHARD_CHECKS};
use crate::cli::shard::{self, Shard};
use crate::files::InputError;
use crate::results::Table;
use crate::results::fit_folder::key;
use std::collections::HashMap;
use std::path::Path;

/// Pools the check shards `shards` (sorted and checked to be one run) into `out`.
pub(super) fn run(
    shards: &[ShardFolder],
    out: &Path,
    replace: bool,
) -> Result<(), Box<dyn std::error::Error>> {
    let record = &shards[0].record;
    check_data(record)?;
    let subjects = strings(&record[key::SHARD][shard::KEY_SUBJECTS]);
    let template = stored_checks_table(&[]);
    let mut checks = Vec::new();
    for s in shards {
        let path = SHARD_CHECKS.csv_in(&s.dir);
        let table = Table::read_csv_as(&path, &template)?;
        let these = checks_from_stored(&table, &path.display().to_string())?;
        let listed: Vec<&str> = these.iter().map(|c| c.subject.as_str()).collect();
        let held: Vec<&str> = subjects
            .iter()
            .filter(|label| Shard::of(label, s.shard.count) == s.shard.index)
            .map(String::as_str)
            .collect();
        if listed != held {
            return Err(InputError::file(
                &path,
                format!(
                    "lists {} subjects, but shard {} of {} of the recorded subjects holds {}: \
                     the folder does not hold this shard's check",
                    listed.len(),
                    s.shard.index,
                    s.shard.count,
                    held.len()
                ),
            )
            .into());
        }
        checks.extend(these);
    }
    let position: HashMap<&str, usize> = subjects
        .iter()
        .enumerate()
        .map(|(k, s)| (s.as_str(), k))
        .collect();
    checks.sort_by_key(|c| position.get(c.subject.as_str()).copied());
    let line = shard::with_out(
        &strings(&record["command_line"]),
        &out.display().to_string(),
    );
    println!(
        "merged {} check shards: {} subjects; pooling their statistics",
        shards.len(),
        checks.len()
    );
    run_recorded(
        &shards[0],
        &line,
        ShardResults::Check(FromShards { checks, replace }),
    )
}
