//! Output folders never mix runs: runs killed with SIGKILL at several moments leave the complete
//! old or the complete new result set, byte for byte; an existing result is replaced only with
//! `--replace`; leftovers of killed runs are removed (or an old set moved back) by the next run;
//! progress lines appear in logs.
//!
//! The workload is `export` of the demo study (demo-data/orchard_trials.csv: 40 subjects, two runs
//! each, with onsets) at the values that generated it (demo-data/generating_values.csv), with
//! design matrices: a few hundred files. The process is killed with `Child::kill`, which sends
//! SIGKILL on Unix (Rust standard library documentation, `std::process::Child::kill`). The
//! moments are found by polling the staging folder, never by timing; whichever moment a kill
//! actually hits, the folder must hold one whole set.

use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};

use crate::common::{MODEL, bin, contents, demo_file};

/// A fit folder holding parameters.csv (the layout of `valuedrift fit`: subject, group, model,
/// parameter, estimate) at the generating values of the demo study.
fn generating_fits(dir: &Path) -> PathBuf {
    let text = std::fs::read_to_string(demo_file("generating_values.csv")).unwrap();
    let mut lines = text.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    let mut out = String::from("subject,group,model,parameter,estimate\n");
    for line in lines {
        let cells: Vec<&str> = line.split(',').collect();
        for (name, value) in header.iter().zip(&cells).skip(2) {
            out.push_str(&format!(
                "{},{},{MODEL},{name},{value}\n",
                cells[0], cells[1]
            ));
        }
    }
    let fits = dir.join("fits");
    std::fs::create_dir_all(&fits).unwrap();
    std::fs::write(fits.join("parameters.csv"), out).unwrap();
    fits
}

/// The export command: `scale` chooses between two different result sets of the same files.
fn export(fits: &Path, out: &Path, scale: &str, replace: bool) -> Command {
    let mut command = bin();
    command
        .args(["export", "--model", MODEL, "--scale", scale])
        .args(["--tr", "2", "--scans", "370"])
        .arg("--fits")
        .arg(fits)
        .arg("--data")
        .arg(demo_file("orchard_trials.csv"))
        .arg("--out")
        .arg(out);
    if replace {
        command.arg("--replace");
    }
    command
}

fn succeed(mut command: Command) -> Output {
    let output = command.output().expect("the binary runs");
    assert!(
        output.status.success(),
        "command failed:\n{}",
        String::from_utf8_lossy(&output.stderr)
    );
    output
}

/// Names in `dir` that are hidden siblings of `name` (staging or old folders of valuedrift).
fn leftovers(dir: &Path, name: &str) -> Vec<String> {
    let prefix = format!(".{name}.valuedrift-");
    std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n.starts_with(&prefix))
        .collect()
}

fn copy_folder(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).unwrap();
    for (relative, bytes) in contents(from) {
        let path = to.join(relative);
        std::fs::create_dir_all(path.parent().unwrap()).unwrap();
        std::fs::write(path, bytes).unwrap();
    }
}

/// When to kill the running export.
#[derive(Clone, Copy, Debug)]
enum Moment {
    /// At once after starting it.
    Start,
    /// As soon as its staging folder exists.
    StagingAppears,
    /// Once its staging folder holds half the files of a complete set.
    HalfStaged,
    /// Once its staging folder holds as many entries as a complete set (the last file is being
    /// written, or the swap into place is under way).
    AllStaged,
}

/// Number of entries (files and folders) below `dir`, or None while it does not exist.
fn entries_below(dir: &Path) -> Option<usize> {
    let mut count = 0;
    let mut pending = vec![dir.to_path_buf()];
    while let Some(folder) = pending.pop() {
        let Ok(entries) = std::fs::read_dir(&folder) else {
            if folder == dir {
                return None;
            }
            continue;
        };
        for entry in entries.flatten() {
            count += 1;
            if entry.file_type().is_ok_and(|t| t.is_dir()) {
                pending.push(entry.path());
            }
        }
    }
    Some(count)
}

/// Runs `command`, kills it with SIGKILL at `moment` (or lets it finish if it ends first) and
/// waits for it.
fn kill_at(mut command: Command, out: &Path, moment: Moment, complete: usize) {
    let mut child = command
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("the binary starts");
    let staging = out.parent().unwrap().join(format!(
        ".{}.valuedrift-staging-{}",
        out.file_name().unwrap().to_string_lossy(),
        child.id()
    ));
    let wanted = match moment {
        Moment::Start => None,
        Moment::StagingAppears => Some(0),
        Moment::HalfStaged => Some(complete / 2),
        Moment::AllStaged => Some(complete),
    };
    if let Some(wanted) = wanted {
        loop {
            if child.try_wait().unwrap().is_some() {
                break;
            }
            if entries_below(&staging).is_some_and(|n| n >= wanted) {
                break;
            }
            std::thread::yield_now();
        }
    }
    // Killing a process that already ended is not an error worth failing on: it finished first.
    let _ = child.kill();
    child.wait().unwrap();
}

#[test]
fn sigkill_at_any_moment_leaves_the_old_or_the_new_set() {
    let dir = tempfile::tempdir().unwrap();
    let fits = generating_fits(dir.path());
    // Reference runs: the old set (raw modulators) and the new set (z-scored modulators) differ
    // in every events and design file (src/cli/mod.rs, export --scale).
    let old_ref = dir.path().join("reference-old");
    let new_ref = dir.path().join("reference-new");
    succeed(export(&fits, &old_ref, "none", false));
    succeed(export(&fits, &new_ref, "zscore", false));
    let old = contents(&old_ref);
    let new = contents(&new_ref);
    assert_ne!(old, new, "the two reference sets must differ");
    // Events and design files of 40 subjects × 2 runs, each a TSV and a JSON sidecar (source:
    // demo-data/orchard_trials.csv and the export help), plus the tables beside them.
    assert!(
        new.len() >= 4 * 80,
        "only {} files in the new set",
        new.len()
    );
    let complete = entries_below(&new_ref).unwrap();

    let moments = [
        Moment::Start,
        Moment::StagingAppears,
        Moment::HalfStaged,
        Moment::AllStaged,
        Moment::AllStaged,
    ];
    let mut outcomes = Vec::new();
    for (i, &moment) in moments.iter().enumerate() {
        // A run that replaces an existing set, and one that writes a new folder.
        for existing in [true, false] {
            let out = dir.path().join(format!("out-{i}-{existing}"));
            if existing {
                copy_folder(&old_ref, &out);
            }
            kill_at(export(&fits, &out, "zscore", true), &out, moment, complete);
            let state = if out.exists() {
                let now = contents(&out);
                if now == new {
                    "new"
                } else if existing && now == old {
                    "old"
                } else {
                    panic!(
                        "{moment:?}, existing {existing}: {} holds {} files, neither the old \
                         nor the new set",
                        out.display(),
                        now.len()
                    );
                }
            } else {
                assert!(
                    !existing,
                    "{moment:?}: the existing set disappeared from {}",
                    out.display()
                );
                "absent"
            };
            outcomes.push(format!("{moment:?}/{existing}: {state}"));

            // The next run succeeds, writes the new set and leaves nothing beside it.
            let had_leftover = !leftovers(dir.path(), &format!("out-{i}-{existing}")).is_empty();
            let rerun = succeed(export(&fits, &out, "zscore", true));
            let stderr = String::from_utf8_lossy(&rerun.stderr);
            assert_eq!(contents(&out), new, "{moment:?}: rerun result");
            assert!(
                leftovers(dir.path(), &format!("out-{i}-{existing}")).is_empty(),
                "{moment:?}: staging folders left after the rerun"
            );
            if had_leftover {
                assert!(
                    stderr.contains("left by a stopped run") || stderr.contains("restored"),
                    "{moment:?}: the rerun should say it removed the leftover; stderr:\n{stderr}"
                );
            }
        }
    }
    eprintln!("kill outcomes: {}", outcomes.join("; "));
}

#[test]
fn an_existing_result_is_replaced_only_when_asked() {
    let dir = tempfile::tempdir().unwrap();
    let fits = generating_fits(dir.path());
    let out = dir.path().join("export");
    succeed(export(&fits, &out, "none", false));
    let first = contents(&out);

    // Without --replace: refused, with a message saying how to replace, and nothing changed.
    let refused = export(&fits, &out, "zscore", false).output().unwrap();
    let stderr = String::from_utf8_lossy(&refused.stderr);
    assert_eq!(refused.status.code(), Some(1), "{stderr}");
    assert!(
        stderr.contains(&out.display().to_string()) && stderr.contains("--replace"),
        "{stderr}"
    );
    assert_eq!(contents(&out), first);
    assert!(leftovers(dir.path(), "export").is_empty());

    // With --replace: the whole folder is the new set; a file of the old one does not survive.
    std::fs::write(out.join("notes.txt"), "mine").unwrap();
    succeed(export(&fits, &out, "zscore", true));
    let second = contents(&out);
    assert!(!second.contains_key(Path::new("notes.txt")));
    assert_ne!(second, first);
    assert!(leftovers(dir.path(), "export").is_empty());
}

#[test]
fn a_leftover_of_a_dead_process_is_removed_and_an_old_set_moved_back() {
    let dir = tempfile::tempdir().unwrap();
    let fits = generating_fits(dir.path());
    let out = dir.path().join("export");
    // The id of a process that has ended (it was waited for, so it no longer runs).
    let mut ended = Command::new(env!("CARGO_BIN_EXE_valuedrift"))
        .arg("--version")
        .stdout(Stdio::null())
        .spawn()
        .unwrap();
    let pid = ended.id();
    ended.wait().unwrap();

    // A staging folder full of files, as a killed run leaves it.
    let staging = dir.path().join(format!(".export.valuedrift-staging-{pid}"));
    std::fs::create_dir_all(&staging).unwrap();
    for k in 0..50 {
        std::fs::write(staging.join(format!("part{k}.tsv")), "x").unwrap();
    }
    let run = succeed(export(&fits, &out, "none", false));
    let stderr = String::from_utf8_lossy(&run.stderr);
    assert!(!staging.exists(), "the stale staging folder is still there");
    assert!(
        stderr.contains("left by a stopped run") && stderr.contains(&pid.to_string()),
        "{stderr}"
    );
    let set = contents(&out);

    // An old set moved aside by the two-rename replacement, with the destination missing (a kill
    // between the renames): the next run moves it back before anything else.
    let aside = dir.path().join(format!(".export.valuedrift-old-{pid}"));
    std::fs::rename(&out, &aside).unwrap();
    let refused = export(&fits, &out, "zscore", false).output().unwrap();
    let stderr = String::from_utf8_lossy(&refused.stderr);
    assert!(stderr.contains("restored"), "{stderr}");
    // Restored, it is an existing result again: refused without --replace.
    assert_eq!(refused.status.code(), Some(1), "{stderr}");
    assert_eq!(contents(&out), set);
    assert!(!aside.exists());
}

#[test]
fn compare_adds_to_the_fit_folder_and_keeps_its_files() {
    // compare writes into the --fits folder by default (src/cli/mod.rs, compare --out); a second
    // run needs --replace and keeps the fit's files either way.
    let dir = tempfile::tempdir().unwrap();
    let fits = dir.path().join("fits");
    std::fs::create_dir_all(&fits).unwrap();
    // Two models' BIC for four subjects in two groups (the columns compare reads, src/group/
    // selection.rs `read_fit_summary`).
    let mut summary =
        String::from("subject,group,model,log_likelihood,n_params,n_trials,aic,bic\n");
    for (s, group) in [("s1", "a"), ("s2", "a"), ("s3", "b"), ("s4", "b")] {
        summary.push_str(&format!("{s},{group},m1,-100,3,100,206,213.8\n"));
        summary.push_str(&format!("{s},{group},m2,-98,4,100,204,214.4\n"));
    }
    std::fs::write(fits.join("fit_summary.csv"), &summary).unwrap();
    let compare = |replace: bool| {
        let mut c = bin();
        c.args(["compare", "--fits"]).arg(&fits);
        if replace {
            c.arg("--replace");
        }
        c.output().unwrap()
    };
    let first = compare(false);
    assert!(
        first.status.success(),
        "{}",
        String::from_utf8_lossy(&first.stderr)
    );
    let after_first = contents(&fits);
    assert!(after_first.contains_key(Path::new("model_selection.csv")));
    assert_eq!(
        after_first[Path::new("fit_summary.csv")],
        summary.as_bytes()
    );
    let again = compare(false);
    let stderr = String::from_utf8_lossy(&again.stderr);
    assert_eq!(again.status.code(), Some(1), "{stderr}");
    assert!(stderr.contains("--replace"), "{stderr}");
    assert_eq!(contents(&fits), after_first);
    let replaced = compare(true);
    assert!(
        replaced.status.success(),
        "{}",
        String::from_utf8_lossy(&replaced.stderr)
    );
    // Same inputs and seed: the same files again, the fit's own file untouched.
    assert_eq!(contents(&fits), after_first);
    assert!(leftovers(dir.path(), "fits").is_empty());
}

#[test]
fn progress_lines_appear_when_stderr_is_a_file() {
    let dir = tempfile::tempdir().unwrap();
    let fits = generating_fits(dir.path());
    let log = std::fs::File::create(dir.path().join("log")).unwrap();
    let status = export(&fits, &dir.path().join("export"), "none", false)
        .stdout(Stdio::null())
        .stderr(log)
        .status()
        .unwrap();
    assert!(status.success());
    let log = std::fs::read_to_string(dir.path().join("log")).unwrap();
    // 40 subjects in the demo data (demo-data/README.md), so the final line of the export's one
    // step (each subject's latents, events and design files together) reads 40/40.
    for (what, total) in [(
        "exporting: latents, events and design files of subjects",
        40,
    )] {
        let line = log
            .lines()
            .find(|l| l.starts_with(&format!("progress: {what} {total}/{total} ")))
            .unwrap_or_else(|| panic!("no final progress line of {what:?} in:\n{log}"));
        let rest = line
            .strip_prefix(&format!(
                "progress: {what} {total}/{total} (100.0 %), elapsed "
            ))
            .unwrap_or_else(|| panic!("unexpected format: {line}"));
        let (elapsed, left) = rest.split_once(", time left ").expect(line);
        for clock in [elapsed, left] {
            let parts: Vec<&str> = clock.split(':').collect();
            assert!(
                parts.len() == 3 && parts.iter().all(|p| p.parse::<u64>().is_ok()),
                "not H:MM:SS: {clock} in {line}"
            );
        }
        assert_eq!(left, "0:00:00", "{line}");
    }
}

#[test]
fn simulate_refuses_an_existing_file_without_replace() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("trials.csv");
    std::fs::write(&out, "keep me\n").unwrap();
    let params = dir.path().join("params.csv");
    std::fs::copy(demo_file("generating_values.csv"), &params).unwrap();
    let run = |replace: bool| {
        let mut c = bin();
        c.args(["simulate", "--model", MODEL, "--params"])
            .arg(&params)
            .arg("--design")
            .arg(demo_file("orchard_design.csv"))
            .arg("--out")
            .arg(&out);
        if replace {
            c.arg("--replace");
        }
        c.output().unwrap()
    };
    let refused = run(false);
    let stderr = String::from_utf8_lossy(&refused.stderr);
    assert_eq!(refused.status.code(), Some(1), "{stderr}");
    assert!(
        stderr.contains("already exists") && stderr.contains("--replace"),
        "{stderr}"
    );
    assert_eq!(std::fs::read_to_string(&out).unwrap(), "keep me\n");
    let replaced = run(true);
    assert!(
        replaced.status.success(),
        "{}",
        String::from_utf8_lossy(&replaced.stderr)
    );
    // The simulated table starts with the trial table's header (source: demo-data/README.md,
    // the same command wrote demo-data/orchard_trials.csv).
    let text = std::fs::read_to_string(&out).unwrap();
    assert!(
        text.starts_with("subject,"),
        "{}",
        &text[..text.len().min(80)]
    );
    assert!(leftovers(dir.path(), "trials.csv").is_empty());
}

#[test]
fn single_file_outputs_are_refused_before_any_work() {
    // simulate and density check the replace rule first: an existing --out is refused even
    // when the inputs would fail later (here the parameter and input files do not exist), and
    // the existing file is left as it was.
    let dir = tempfile::tempdir().unwrap();
    let existing = dir.path().join("existing.csv");
    std::fs::write(&existing, "kept\n").unwrap();
    let missing = dir.path().join("missing.csv");
    for args in [
        vec![
            "simulate",
            "--model",
            MODEL,
            "--params",
            missing.to_str().unwrap(),
            "--design",
            demo_file("orchard_design.csv").to_str().unwrap(),
            "--out",
            existing.to_str().unwrap(),
        ],
        vec![
            "density",
            "--input",
            missing.to_str().unwrap(),
            "--output",
            existing.to_str().unwrap(),
        ],
    ] {
        let output = bin().args(&args).output().unwrap();
        let stderr = String::from_utf8_lossy(&output.stderr);
        assert!(!output.status.success());
        assert!(
            stderr.contains("already exists") && stderr.contains("--replace"),
            "{}: {stderr}",
            args[0]
        );
        assert_eq!(std::fs::read_to_string(&existing).unwrap(), "kept\n");
    }
}
