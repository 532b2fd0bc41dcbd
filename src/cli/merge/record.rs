//! The run records of `merge`: the shards' run.json read and checked to be complete shards of
//! one run, and the merged run's run.json (a single run's, by design: see the parent module).

use super::Order;
use crate::cli::shard::{self, Shard};
use crate::files::InputError;
use crate::results::fit_folder::{self, key};
use serde_json::Value;
use sha2::{Digest, Sha256};
use std::path::{Path, PathBuf};

/// A shard's folder and its run record.
pub(super) struct ShardFolder {
    pub(super) dir: PathBuf,
    pub(super) shard: Shard,
    pub(super) record: Value,
    /// Where the record was read (run.json, or a plan's plan.json).
    pub(super) record_path: PathBuf,
}

/// Reads the run records of `dirs`, sorted by shard; refuses a folder that is not a shard, shards
/// of different runs, and a missing or repeated shard.
pub(super) fn read_shards(
    dirs: &[PathBuf],
) -> Result<Vec<ShardFolder>, Box<dyn std::error::Error>> {
    let mut shards = Vec::new();
    for dir in dirs {
        // A plan's record is plan.json; every other command's run.json.
        let plan_record = dir.join(crate::cli::plan::RECORD);
        let path = if plan_record.exists() && !dir.join(fit_folder::RUN_RECORD).exists() {
            plan_record
        } else {
            dir.join(fit_folder::RUN_RECORD)
        };
        let bytes = std::fs::read(&path)
            .map_err(|e| InputError::file(&path, format!("cannot be read: {e}")))?;
        let record: Value = serde_json::from_slice(&bytes)
            .map_err(|e| InputError::file(&path, format!("is not readable JSON: {e}")))?;
        let entry = &record[key::SHARD];
        let number = |name: &str| entry[name].as_u64().map(|x| x as usize);
        let Some((index, count)) = number(shard::KEY_INDEX)
            .zip(number(shard::KEY_COUNT))
            .filter(|&(i, n)| 1 <= i && i <= n)
        else {
            return Err(InputError::file(
                &path,
                "has no shard entry with 1 ≤ index ≤ count: expected the folder of \
                 `valuedrift fit|check|plan --shard I/N`",
            )
            .into());
        };
        shards.push(ShardFolder {
            dir: dir.clone(),
            shard: Shard { index, count },
            record,
            record_path: path,
        });
    }
    shards.sort_by_key(|s| s.shard.index);
    let first = &shards[0];
    let count = first.shard.count;
    for s in &shards[1..] {
        if s.shard.count != count {
            return Err(format!(
                "{} holds shard {} of {} but {} holds shard {} of {count}: not shards of one run",
                s.dir.display(),
                s.shard.index,
                s.shard.count,
                first.dir.display(),
                first.shard.index
            )
            .into());
        }
        let differ = differing_keys(&first.record, &s.record);
        if !differ.is_empty() {
            return Err(format!(
                "{} and {} are not shards of one run: their run.json differ in {}",
                first.dir.display(),
                s.dir.display(),
                differ.join(", ")
            )
            .into());
        }
    }
    for pair in shards.windows(2) {
        if pair[0].shard.index == pair[1].shard.index {
            return Err(format!(
                "shard {} of {count} is given twice: {} and {}",
                pair[0].shard.index,
                pair[0].dir.display(),
                pair[1].dir.display()
            )
            .into());
        }
    }
    let missing: Vec<String> = (1..=count)
        .filter(|i| !shards.iter().any(|s| s.shard.index == *i))
        .map(|i| format!("shard {i} of {count} is missing"))
        .collect();
    if !missing.is_empty() {
        return Err(format!("{} (given: {} folders)", missing.join("; "), shards.len()).into());
    }
    Ok(shards)
}

/// The top-level keys of two shards' run records that differ beyond what differs between
/// shards of one run (the shard's number, its fits, pairs not fitted and trimming counts, and
/// of the command line the output folder, the threads and the program's path).
fn differing_keys(a: &Value, b: &Value) -> Vec<String> {
    let (a, b) = (run_identity(a), run_identity(b));
    let empty = serde_json::Map::new();
    let (a, b) = (
        a.as_object().unwrap_or(&empty),
        b.as_object().unwrap_or(&empty),
    );
    let mut keys: Vec<String> = a.keys().chain(b.keys()).cloned().collect();
    keys.sort();
    keys.dedup();
    keys.retain(|k| a.get(k) != b.get(k));
    keys
}

/// A shard's run record without what differs between the shards of one run.
fn run_identity(record: &Value) -> Value {
    let mut r = record.clone();
    if let Some(o) = r.as_object_mut() {
        for k in ["fits", "skipped", key::NOT_FITTED] {
            o.remove(k);
        }
    }
    if let Some(o) = r[key::SHARD].as_object_mut() {
        o.remove(shard::KEY_INDEX);
    }
    if let Some(o) = r["data_screen"].as_object_mut() {
        o.remove("trimmed_total");
        o.remove("trimmed_per_subject");
    }
    // Neither the output folder, the threads (fits are the same whatever their number) nor
    // the program's path (the tool's version is compared on its own) makes shards differ.
    let mut line = shard::without_option(
        &shard::with_out(&strings(&r["command_line"]), ""),
        "--threads",
    );
    if let Some(program) = line.first_mut() {
        program.clear();
    }
    r["command_line"] = serde_json::json!(line);
    r
}

/// The strings of a JSON list (others skipped).
pub(super) fn strings(list: &Value) -> Vec<String> {
    list.as_array()
        .into_iter()
        .flatten()
        .filter_map(|v| v.as_str().map(str::to_string))
        .collect()
}

/// The run record of the merged run: the first shard's, with fits, pairs not fitted and
/// trimming of all shards in a single run's order, without the shard entry, and `--out` of the
/// command line set to `out`.
pub(super) fn merged_record(
    shards: &[ShardFolder],
    order: &Order,
    fits: usize,
    out: &Path,
) -> Value {
    let mut record = shards[0].record.clone();
    if let Some(o) = record.as_object_mut() {
        o.remove(key::SHARD);
    }
    record["command_line"] = serde_json::json!(shard::with_out(
        &strings(&record["command_line"]),
        &out.display().to_string()
    ));
    record["fits"] = serde_json::json!(fits);
    let mut skipped: Vec<(Value, Value)> = shards
        .iter()
        .flat_map(|s| {
            let list = |k: &str| s.record[k].as_array().cloned().unwrap_or_default();
            list("skipped").into_iter().zip(list(key::NOT_FITTED))
        })
        .collect();
    skipped.sort_by_key(|(_, pair)| {
        order.key(
            pair[key::MODEL].as_str(),
            pair[key::SUBJECT].as_str().unwrap_or_default(),
        )
    });
    let (text, pairs): (Vec<Value>, Vec<Value>) = skipped.into_iter().unzip();
    record["skipped"] = Value::Array(text);
    record[key::NOT_FITTED] = Value::Array(pairs);
    let mut trimmed: Vec<Value> = shards
        .iter()
        .flat_map(|s| {
            s.record["data_screen"]["trimmed_per_subject"]
                .as_array()
                .cloned()
                .unwrap_or_default()
        })
        .collect();
    trimmed.sort_by_key(|t| order.key(None, t["subject"].as_str().unwrap_or_default()));
    let total = |side: &str| -> u64 {
        shards
            .iter()
            .filter_map(|s| s.record["data_screen"]["trimmed_total"][side].as_u64())
            .sum()
    };
    record["data_screen"]["trimmed_total"] =
        serde_json::json!({ "below": total("below"), "above": total("above") });
    record["data_screen"]["trimmed_per_subject"] = Value::Array(trimmed);
    record
}

/// Refuses a trial table that is missing at the recorded path or has changed since the shards
/// read it (its SHA-256 differs from the recorded one).
pub(super) fn check_data(record: &Value) -> Result<(), String> {
    let path = record["data"]["path"].as_str().unwrap_or_default();
    let recorded = record["data"]["sha256"].as_str().unwrap_or_default();
    let bytes = std::fs::read(path).map_err(|e| {
        format!(
            "{path}: the trial table the shards read cannot be read ({e}); merge reads it again \
             (for the EM steps of --hierarchical, or a check): run merge where the shards' --data path leads to it"
        )
    })?;
    let found = format!("{:x}", Sha256::digest(&bytes));
    if found != recorded {
        return Err(format!(
            "{path}: SHA-256 {found}, but the shards read a file with SHA-256 {recorded}: the \
             trial table has changed since the shards ran"
        ));
    }
    Ok(())
}
