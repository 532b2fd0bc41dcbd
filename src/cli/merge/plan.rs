//! `merge` of the folders of `plan --shard 1/N` … `N/N`.
//!
//! Recovery, model selection per study and power summarise all studies, so no shard can write
//! them. A plan shard simulates and fits its studies (each depends on the seed and its labels
//! only) and keeps everything the summaries read ([`crate::plan::stored::stored_studies_table`]).
//! `merge` reads them back exactly, puts them in plan order and runs the recorded plan command
//! (without `--shard`, with the merge's `--out`) with them in place of simulating: the tables and
//! plan.json are written by the code of a single plan, which also refuses a plan file or model
//! that changed since the shards ran (its record must equal theirs) and shards that do not hold
//! every study once.

use super::record::{ShardFolder, strings};
use super::run_recorded;
use crate::cli::ShardResults;
use crate::cli::plan::{FromShards, SHARD_STUDIES};
use crate::cli::shard;
use crate::plan::stored::{stored_studies_table, studies_from_stored};
use crate::results::Table;
use crate::results::fit_folder::key;
use std::path::Path;

/// Summarises the plan shards `shards` (sorted and checked to be one run) into `out`.
pub(super) fn run(
    shards: &[ShardFolder],
    out: &Path,
    replace: bool,
) -> Result<(), Box<dyn std::error::Error>> {
    let template = stored_studies_table(&[]);
    let mut studies = Vec::new();
    for s in shards {
        let path = SHARD_STUDIES.csv_in(&s.dir);
        let table = Table::read_csv_as(&path, &template)?;
        studies.extend(studies_from_stored(&table, &path.display().to_string())?);
    }
    studies.sort_by_key(|s| (s.generating, s.study));
    let mut recorded = shards[0].record.clone();
    if let Some(o) = recorded.as_object_mut() {
        o.remove(key::SHARD);
    }
    let line = shard::with_out(
        &strings(&recorded["command_line"]),
        &out.display().to_string(),
    );
    recorded["command_line"] = serde_json::json!(line);
    println!(
        "merged {} plan shards: {} studies; summarising them",
        shards.len(),
        studies.len()
    );
    run_recorded(
        &shards[0],
        &line,
        ShardResults::Plan(FromShards {
            studies,
            recorded,
            replace,
        }),
    )
}
