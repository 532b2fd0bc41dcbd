//! `fit --shard I/N` and `merge`: the shards of a fit merged give the folder of a single run,
//! byte for byte (the design of src/cli/merge.rs; common practice for splitting independent
//! per-subject fits over a job array), and merge refuses shards of different runs and names a
//! missing shard.

use std::path::{Path, PathBuf};
use std::process::Command;

use crate::common::{MODEL, bin, contents, demo_file, succeed};

/// `fit` of the demo data with two starts into `out`, with `extra` options.
fn fit(out: &Path, extra: &[&str]) -> Command {
    let data = demo_file("orchard_trials.csv");
    let mut command = bin();
    command
        .args(["fit", "--data", data.to_str().unwrap(), "--model", MODEL])
        .args([
            "--starts",
            "2",
            "--threads",
            "1",
            "--out",
            out.to_str().unwrap(),
        ])
        .args(extra);
    command
}

/// Fits shards 1..=n of the demo data into `dir`/shard-<i> with `extra` options; their folders.
fn shards(dir: &Path, n: usize, extra: &[&str]) -> Vec<PathBuf> {
    (1..=n)
        .map(|i| {
            let out = dir.join(format!("shard-{i}"));
            let shard = format!("{i}/{n}");
            let mut options = vec!["--shard", shard.as_str()];
            options.extend_from_slice(extra);
            succeed(&mut fit(&out, &options));
            out
        })
        .collect()
}

/// `merge` of `folders` into `out`.
fn merge(folders: &[PathBuf], out: &Path) -> std::process::Output {
    bin()
        .arg("merge")
        .arg("--shards")
        .args(folders)
        .args(["--out", out.to_str().unwrap()])
        .output()
        .unwrap()
}

#[test]
fn merged_shards_equal_a_single_run_byte_for_byte() {
    let dir = tempfile::tempdir().unwrap();
    // The single run and the merges write to the same path, since run.json records the command
    // line with its --out (a merged run records the shards' command line without --shard and
    // with the merge's --out).
    let out = dir.path().join("fit");
    succeed(&mut fit(&out, &[]));
    let single = contents(&out);
    std::fs::remove_dir_all(&out).unwrap();
    for n in [1, 3, 7] {
        let shard_dir = dir.path().join(format!("{n}-shards"));
        let mut folders = shards(&shard_dir, n, &[]);
        // The order of the folders given does not matter.
        folders.reverse();
        let output = merge(&folders, &out);
        assert!(
            output.status.success(),
            "{n} shards: {}",
            String::from_utf8_lossy(&output.stderr)
        );
        let merged = contents(&out);
        assert_eq!(
            merged.keys().collect::<Vec<_>>(),
            single.keys().collect::<Vec<_>>(),
            "{n} shards: files"
        );
        for (file, bytes) in &single {
            assert!(
                merged[file] == *bytes,
                "{n} shards: {} differs from the single run's",
                file.display()
            );
        }
        // The shards together hold every subject once: each shard's data screen lists only its
        // own subjects, so the shards' rows add up to the single run's (40 subjects, source:
        // demo-data/README.md, plus the header of each file).
        let screened: usize = folders
            .iter()
            .map(|f| {
                std::fs::read_to_string(f.join("data_screen.csv"))
                    .unwrap()
                    .lines()
                    .count()
                    - 1
            })
            .sum();
        assert_eq!(screened, 40, "{n} shards: subjects over the data screens");
        std::fs::remove_dir_all(&out).unwrap();
    }
}

#[test]
fn merge_refuses_shards_of_different_runs_and_names_missing_ones() {
    let dir = tempfile::tempdir().unwrap();
    let seed_1 = shards(&dir.path().join("seed-1"), 3, &[]);
    let seed_2 = shards(&dir.path().join("seed-2"), 3, &["--seed", "2"]);
    let out = dir.path().join("merged");
    let refused = |folders: &[PathBuf], needles: &[&str]| {
        let output = merge(folders, &out);
        let stderr = String::from_utf8_lossy(&output.stderr);
        assert!(!output.status.success(), "merged: {folders:?}");
        for needle in needles {
            assert!(stderr.contains(needle), "{needle:?} not in: {stderr}");
        }
        assert!(!out.exists(), "an output was written for {folders:?}");
    };
    refused(
        &[seed_1[0].clone(), seed_2[1].clone(), seed_1[2].clone()],
        &["not shards of one run", "seed"],
    );
    refused(
        &[seed_1[0].clone(), seed_1[2].clone()],
        &["shard 2 of 3 is missing"],
    );
    refused(
        &[
            seed_1[0].clone(),
            seed_1[1].clone(),
            seed_1[1].clone(),
            seed_1[2].clone(),
        ],
        &["shard 2 of 3 is given twice"],
    );
    // A single run's folder is not a shard.
    let single = dir.path().join("single");
    succeed(&mut fit(&single, &[]));
    refused(&[single], &["run.json", "no shard entry"]);
}
