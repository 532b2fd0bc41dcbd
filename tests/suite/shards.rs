//! `fit --shard I/N` and `merge`: the shards of a fit merged give the folder of a single run,
//! byte for byte (the design of src/cli/merge.rs; common practice for splitting independent
//! per-subject fits over a job array), and merge refuses shards of different runs and names a
//! missing shard.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;

use crate::common::{MODEL, bin, contents, demo_file, succeed};

/// `fit` of the demo data with two starts into `out`, with `extra` options.
fn fit(out: &Path, extra: &[&str]) -> Command {
    fit_data(&demo_file("orchard_trials.csv"), out, extra)
}

/// `fit` of `data` with two starts into `out`, with `extra` options.
fn fit_data(data: &Path, out: &Path, extra: &[&str]) -> Command {
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

/// A single `fit` of the demo data with `extra` options into `dir`/fit: that path, removed
/// again for the merges to write to, and the files the fit wrote there.
fn single_fit(dir: &Path, extra: &[&str]) -> (PathBuf, BTreeMap<PathBuf, Vec<u8>>) {
    let out = dir.join("fit");
    succeed(&mut fit(&out, extra));
    let single = contents(&out);
    std::fs::remove_dir_all(&out).unwrap();
    (out, single)
}

/// Fits shards 1..=n of the demo data into `dir`/shard-<i> with `extra` options; their folders.
fn shards(dir: &Path, n: usize, extra: &[&str]) -> Vec<PathBuf> {
    shards_of(&demo_file("orchard_trials.csv"), dir, n, extra)
}

/// Fits shards 1..=n of `data` into `dir`/shard-<i> with `extra` options; their folders.
fn shards_of(data: &Path, dir: &Path, n: usize, extra: &[&str]) -> Vec<PathBuf> {
    run_shards(dir, n, extra, |out, options| fit_data(data, out, options))
}

/// Runs `command(out, options)` for shards 1..=n, `out` = `dir`/shard-<i> and the options
/// `--shard i/n` and `extra`; the folders.
fn run_shards(
    dir: &Path,
    n: usize,
    extra: &[&str],
    command: impl Fn(&Path, &[&str]) -> Command,
) -> Vec<PathBuf> {
    (1..=n)
        .map(|i| {
            let out = dir.join(format!("shard-{i}"));
            let shard = format!("{i}/{n}");
            let mut options = vec!["--shard", shard.as_str()];
            options.extend_from_slice(extra);
            succeed(&mut command(&out, &options));
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

/// Asserts that `merge` of `folders` into `out` fails with every one of `needles` in its error
/// output and writes nothing.
fn refused(folders: &[PathBuf], out: &Path, needles: &[&str]) {
    let output = merge(folders, out);
    let stderr = String::from_utf8_lossy(&output.stderr);
    assert!(!output.status.success(), "merged: {folders:?}");
    for needle in needles {
        assert!(stderr.contains(needle), "{needle:?} not in: {stderr}");
    }
    assert!(!out.exists(), "an output was written for {folders:?}");
}

/// Asserts that merge refuses shard 2 of 3 of `seed_2` (another seed) among shards 1 and 3 of
/// `seed_1`, and names shard 2 as missing when it is left out.
fn refuses_other_seed_and_names_missing(seed_1: &[PathBuf], seed_2: &[PathBuf], out: &Path) {
    refused(
        &[seed_1[0].clone(), seed_2[1].clone(), seed_1[2].clone()],
        out,
        &["not shards of one run", "seed"],
    );
    refused(
        &[seed_1[0].clone(), seed_1[2].clone()],
        out,
        &["shard 2 of 3 is missing"],
    );
}

/// Asserts that `merged` has the files of `single`, each with the same bytes.
fn assert_same_files(
    single: &BTreeMap<PathBuf, Vec<u8>>,
    merged: &BTreeMap<PathBuf, Vec<u8>>,
    case: &str,
) {
    assert_eq!(
        merged.keys().collect::<Vec<_>>(),
        single.keys().collect::<Vec<_>>(),
        "{case}: files"
    );
    for (file, bytes) in single {
        assert!(
            merged[file] == *bytes,
            "{case}: {} differs from the single run's",
            file.display()
        );
    }
}

#[test]
fn merged_shards_equal_a_single_run_byte_for_byte() {
    let dir = tempfile::tempdir().unwrap();
    // The single run and the merges write to the same path, since run.json records the command
    // line with its --out (a merged run records the shards' command line without --shard and
    // with the merge's --out).
    let (out, single) = single_fit(dir.path(), &[]);
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
        assert_same_files(&single, &contents(&out), &format!("{n} shards"));
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
fn merged_shards_keep_a_single_runs_pairs_not_fitted_and_trimming() {
    // The demo with three participants cut to their first 30 trials: with 10 responses needed
    // per free parameter (the default) the screen sets them aside (README, data screen), and
    // --trim-above 0.9 sets aside slow times of every participant, so run.json lists pairs not
    // fitted and trimming per subject, which merge gathers from the shards. Of 3 shards, sub-02
    // is in shard 3, sub-12 in 1 and sub-21 in 2 (by the hash), so the shards' lists must be
    // put back in table order.
    let dir = tempfile::tempdir().unwrap();
    let demo = std::fs::read_to_string(demo_file("orchard_trials.csv")).unwrap();
    let cut: String = demo
        .lines()
        .filter(|line| {
            let mut cells = line.split(',');
            let subject = cells.next().unwrap_or_default();
            let trial: usize = cells.nth(2).and_then(|t| t.parse().ok()).unwrap_or(0);
            !(["sub-02", "sub-12", "sub-21"].contains(&subject) && trial > 30)
        })
        .map(|line| format!("{line}\n"))
        .collect();
    let data = dir.path().join("cut.csv");
    std::fs::write(&data, cut).unwrap();
    let options = ["--trim-above", "0.9"];
    let out = dir.path().join("fit");
    succeed(&mut fit_data(&data, &out, &options));
    let single = contents(&out);
    let record: serde_json::Value = serde_json::from_slice(&single[Path::new("run.json")]).unwrap();
    assert_eq!(
        record["not_fitted"].as_array().unwrap().len(),
        3,
        "{record}"
    );
    assert!(
        !record["data_screen"]["trimmed_per_subject"]
            .as_array()
            .unwrap()
            .is_empty()
    );
    std::fs::remove_dir_all(&out).unwrap();
    let folders = shards_of(&data, &dir.path().join("shards"), 3, &options);
    let output = merge(&folders, &out);
    assert!(
        output.status.success(),
        "{}",
        String::from_utf8_lossy(&output.stderr)
    );
    assert_same_files(&single, &contents(&out), "3 shards, pairs not fitted");
}

#[test]
fn merge_refuses_shards_of_different_runs_and_names_missing_ones() {
    let dir = tempfile::tempdir().unwrap();
    let seed_1 = shards(&dir.path().join("seed-1"), 3, &[]);
    let seed_2 = shards(&dir.path().join("seed-2"), 3, &["--seed", "2"]);
    let out = dir.path().join("merged");
    refuses_other_seed_and_names_missing(&seed_1, &seed_2, &out);
    let refused = |folders: &[PathBuf], needles: &[&str]| refused(folders, &out, needles);
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
    // Shard 1's folder relabelled as shard 2 in its run.json: its data screen lists shard 1's
    // subjects, not those the hash gives shard 2.
    let relabelled = dir.path().join("relabelled");
    std::fs::create_dir(&relabelled).unwrap();
    for entry in std::fs::read_dir(&seed_1[0]).unwrap() {
        let path = entry.unwrap().path();
        std::fs::copy(&path, relabelled.join(path.file_name().unwrap())).unwrap();
    }
    let run_json = relabelled.join("run.json");
    let mut record: serde_json::Value =
        serde_json::from_slice(&std::fs::read(&run_json).unwrap()).unwrap();
    record["shard"]["index"] = serde_json::json!(2);
    std::fs::write(&run_json, serde_json::to_vec(&record).unwrap()).unwrap();
    refused(
        &[seed_1[0].clone(), relabelled, seed_1[2].clone()],
        &["data_screen.csv", "does not hold this shard's fit"],
    );
}

#[test]
fn shards_run_with_other_thread_counts_or_program_paths_merge_into_the_single_run() {
    // Common practice: a job array's nodes differ in cores and in where the tool is installed,
    // and fits do not depend on the number of threads (the determinism this project keeps);
    // so shards that differ only in --threads and in the program's path are one run, and the
    // merge gives the single run's folder byte for byte (its record takes shard 1's command
    // line). Another seed is still refused (merge_refuses_shards_of_different_runs_…).
    let dir = tempfile::tempdir().unwrap();
    let (out, single) = single_fit(dir.path(), &[]);
    let copy = dir.path().join("elsewhere").join("valuedrift-copy");
    std::fs::create_dir_all(copy.parent().unwrap()).unwrap();
    std::fs::copy(bin().get_program(), &copy).unwrap();
    let folders = run_shards(&dir.path().join("shards"), 3, &[], |shard_out, options| {
        let mut command = fit_data(&demo_file("orchard_trials.csv"), shard_out, options);
        if options.contains(&"2/3") {
            let args: Vec<_> = command.get_args().map(|a| a.to_owned()).collect();
            let mut other = Command::new(&copy);
            let mut threads_next = false;
            for arg in args {
                other.arg(if std::mem::take(&mut threads_next) {
                    "2".into()
                } else {
                    threads_next = arg == "--threads";
                    arg
                });
            }
            command = other;
        }
        command
    });
    let record = |i: usize| -> serde_json::Value {
        serde_json::from_slice(&std::fs::read(folders[i].join("run.json")).unwrap()).unwrap()
    };
    assert_ne!(
        record(0)["command_line"],
        record(1)["command_line"],
        "shard 2 ran with another program path and thread count"
    );
    merged(&folders, &out);
    assert_same_files(
        &single,
        &contents(&out),
        "shard 2 with 2 threads, another path",
    );
}

/// `merge` of `folders` into `out`, asserting that it succeeded.
fn merged(folders: &[PathBuf], out: &Path) {
    let output = merge(folders, out);
    assert!(
        output.status.success(),
        "{}",
        String::from_utf8_lossy(&output.stderr)
    );
}

#[test]
fn hierarchical_fit_from_merged_shards_equals_a_single_run() {
    // One group prior per group of the demo (two cohorts, source: demo-data/README.md): the
    // shards fit their subjects, merge runs the EM steps from exactly those fits (common
    // practice: the EM needs every subject each iteration, so it runs on one node).
    let dir = tempfile::tempdir().unwrap();
    let options = ["--hierarchical", "--by", "group"];
    let (out, single) = single_fit(dir.path(), &options);
    assert!(single.contains_key(Path::new("eb_group_priors.csv")));
    let folders = shards(&dir.path().join("shards"), 3, &options);
    // A shard runs no EM: it has no group tables, only its fits and their optima.
    assert!(!folders[0].join("eb_group_priors.csv").exists());
    assert!(folders[0].join("shard_em_starts.csv").exists());
    merged(&folders, &out);
    assert_same_files(&single, &contents(&out), "3 hierarchical shards");
    // Merge runs shard 1's recorded command again (for the EM steps): recorded on a node with
    // far more cores than this machine's, its --threads is capped here rather than refused, and
    // every table is the single run's.
    let run_json = folders[0].join("run.json");
    let mut first: serde_json::Value =
        serde_json::from_slice(&std::fs::read(&run_json).unwrap()).unwrap();
    let at = first["command_line"]
        .as_array()
        .unwrap()
        .iter()
        .position(|a| a == "--threads")
        .unwrap()
        + 1;
    first["command_line"][at] = serde_json::json!("4096");
    std::fs::write(&run_json, serde_json::to_vec(&first).unwrap()).unwrap();
    let again = dir.path().join("again");
    merged(&folders, &again);
    let again = contents(&again);
    for (file, bytes) in single.iter().filter(|(f, _)| *f != Path::new("run.json")) {
        assert!(again[file] == *bytes, "{} differs", file.display());
    }
}

/// `check` of the fit in `fits` of `data` (with the demo's model) with 20 replicates into `out`,
/// with `extra` options.
fn check(fits: &Path, data: &Path, out: &Path, extra: &[&str]) -> Command {
    let mut command = bin();
    command
        .args(["check", "--fits", fits.to_str().unwrap(), "--data"])
        .arg(data)
        .args(["--model", MODEL, "--sims", "20"])
        .args(["--out", out.to_str().unwrap()])
        .args(extra);
    command
}

/// Checks shards 1..=n of the fit in `fits` of `data` into `dir`/shard-<i> with `extra` options.
fn check_shards(fits: &Path, data: &Path, dir: &Path, n: usize, extra: &[&str]) -> Vec<PathBuf> {
    run_shards(dir, n, extra, |out, options| {
        check(fits, data, out, options)
    })
}

#[test]
fn merged_check_shards_equal_a_single_check_byte_for_byte() {
    // Pooled statistics and figures need every subject's replicates: the shards keep them and
    // merge pools them (common practice: byte-identity with a single run). The demo gets a
    // column `half` (early/late half of the 240 trials, source: demo-data/README.md) checked
    // with --by half; sub-01 lists its late trials first, so the levels' order of first
    // appearance is that of the whole table, not of a shard without sub-01.
    let dir = tempfile::tempdir().unwrap();
    let demo = std::fs::read_to_string(demo_file("orchard_trials.csv")).unwrap();
    let mut halves = String::new();
    for (k, line) in demo.lines().enumerate() {
        let cells: Vec<&str> = line.split(',').collect();
        let half = match (k, cells[0], cells[3].parse::<usize>().unwrap_or(0) <= 120) {
            (0, _, _) => "half",
            (_, "sub-01", true) | (_, _, false) => "late",
            _ => "early",
        };
        halves.push_str(&format!("{line},{half}\n"));
    }
    let data = dir.path().join("halves.csv");
    std::fs::write(&data, halves).unwrap();
    let fits = dir.path().join("fit");
    succeed(&mut fit_data(&data, &fits, &[]));
    let out = dir.path().join("check");
    let options = ["--by", "half"];
    succeed(&mut check(&fits, &data, &out, &options));
    let single = contents(&out);
    assert!(single.contains_key(Path::new("check_choices.svg")));
    assert!(single.contains_key(Path::new("run.json")));
    std::fs::remove_dir_all(&out).unwrap();
    for n in [1, 3] {
        let shard_dir = dir.path().join(format!("{n}-shards"));
        let mut folders = check_shards(&fits, &data, &shard_dir, n, &options);
        folders.reverse();
        merged(&folders, &out);
        assert_same_files(&single, &contents(&out), &format!("{n} check shards"));
        std::fs::remove_dir_all(&out).unwrap();
    }
    // The trial table changed after the shards ran (one more line) is refused by its checksum.
    let text = std::fs::read_to_string(&data).unwrap();
    let last = text.lines().last().unwrap();
    std::fs::write(&data, format!("{text}{last}\n")).unwrap();
    let folders = shard_folders(&dir.path().join("3-shards"), 3);
    refused(
        &folders,
        &out,
        &["halves.csv", "has changed since the shards ran"],
    );
}

/// The folders `dir`/shard-1 … shard-`n` of [`run_shards`].
fn shard_folders(dir: &Path, n: usize) -> Vec<PathBuf> {
    (1..=n).map(|i| dir.join(format!("shard-{i}"))).collect()
}

#[test]
fn merge_refuses_mixed_and_foreign_check_shards_and_names_missing_ones() {
    let dir = tempfile::tempdir().unwrap();
    let fits = dir.path().join("fit");
    succeed(&mut fit(&fits, &[]));
    let data = demo_file("orchard_trials.csv");
    let seed_1 = check_shards(&fits, &data, &dir.path().join("seed-1"), 3, &[]);
    let seed_2 = check_shards(
        &fits,
        &data,
        &dir.path().join("seed-2"),
        3,
        &["--seed", "2"],
    );
    let fit_shards = shards(&dir.path().join("fit-shards"), 3, &[]);
    let out = dir.path().join("merged");
    refuses_other_seed_and_names_missing(&seed_1, &seed_2, &out);
    refused(
        &[seed_1[0].clone(), fit_shards[1].clone(), seed_1[2].clone()],
        &out,
        &["not shards of one run", "command"],
    );
}

/// A plan like examples/plan/quick-plan.toml, shrunk (3 and 4 participants per group, 40 and 60
/// trials, 2 studies), written into `dir` with the demo design; its path.
fn small_plan(dir: &Path) -> PathBuf {
    let quick = Path::new(env!("CARGO_MANIFEST_DIR")).join("examples/plan/quick-plan.toml");
    // The design beside the plan, so that a test may change it.
    std::fs::copy(demo_file("orchard_design.csv"), dir.join("design.csv")).unwrap();
    let text = std::fs::read_to_string(quick)
        .unwrap()
        .replace("\"../../demo-data/orchard_design.csv\"", "\"design.csv\"")
        .replace("participants = [4, 8]", "participants = [3, 4]")
        .replace("trials = [60, 120]", "trials = [40, 60]")
        .replace("studies = 3", "studies = 2");
    assert!(
        text.contains("studies = 2"),
        "the quick plan changed: {text}"
    );
    let path = dir.join("plan.toml");
    std::fs::write(&path, text).unwrap();
    path
}

/// `plan` of `plan` into `out` with `extra` options.
fn plan(plan: &Path, out: &Path, extra: &[&str]) -> Command {
    let mut command = bin();
    command
        .args(["plan", "--plan", plan.to_str().unwrap(), "--threads", "1"])
        .args(["--out", out.to_str().unwrap()])
        .args(extra);
    command
}

#[test]
fn merged_plan_shards_equal_a_single_plan_byte_for_byte() {
    // Studies are independent given the seed and their labels, so shards of the studies merged
    // give a single run's summaries (common practice: byte-identity with a single run).
    let dir = tempfile::tempdir().unwrap();
    let file = small_plan(dir.path());
    let out = dir.path().join("plan");
    succeed(&mut plan(&file, &out, &[]));
    let single = contents(&out);
    assert!(single.contains_key(Path::new("plan_power.csv")));
    std::fs::remove_dir_all(&out).unwrap();
    for n in [1, 3] {
        let mut folders = run_shards(&dir.path().join(format!("{n}-shards")), n, &[], |out, o| {
            plan(&file, out, o)
        });
        folders.reverse();
        merged(&folders, &out);
        assert_same_files(&single, &contents(&out), &format!("{n} plan shards"));
        std::fs::remove_dir_all(&out).unwrap();
    }
    // A plan file changed after the shards ran is refused, and nothing is written.
    let text = std::fs::read_to_string(&file).unwrap();
    std::fs::write(&file, text.replace("target_r = 0.8", "target_r = 0.9")).unwrap();
    let folders = shard_folders(&dir.path().join("3-shards"), 3);
    refused(&folders, &out, &["have changed since the shards ran"]);
    // So is a design file changed after the shards ran (its rows are not in the plan file).
    std::fs::write(&file, &text).unwrap();
    let design = dir.path().join("design.csv");
    let rows = std::fs::read_to_string(&design).unwrap();
    // The last row's effort_a (the seventh column) moved by 0.1.
    let (head, last) = rows.trim_end().rsplit_once('\n').unwrap();
    let mut cells: Vec<String> = last.split(',').map(str::to_string).collect();
    let effort: f64 = cells[6].parse().unwrap();
    cells[6] = format!(
        "{}",
        if effort > 0.5 {
            effort - 0.1
        } else {
            effort + 0.1
        }
    );
    std::fs::write(&design, format!("{head}\n{}\n", cells.join(","))).unwrap();
    refused(
        &folders,
        &out,
        &["its design", "have changed since the shards ran"],
    );
    // And shards simulated on different designs are not one run.
    let other = run_shards(&dir.path().join("other-design"), 3, &[], |out, o| {
        plan(&file, out, o)
    });
    std::fs::write(&design, &rows).unwrap();
    refused(
        &[folders[0].clone(), other[1].clone(), folders[2].clone()],
        &out,
        &["not shards of one run", "design_sha256"],
    );
}
