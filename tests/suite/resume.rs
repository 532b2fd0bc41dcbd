//! `fit --resume`: a real fitting process killed with SIGKILL and resumed writes the outputs of
//! an uninterrupted run byte for byte (common practice for checkpointed batch jobs: a restart
//! must not change results), never leaves partial results in --out, refuses a journal of other
//! inputs, and drops a record torn by a crash (common practice for append-only logs).

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::Duration;

use crate::common::{bin, contents, demo_file, succeed};

/// `fit` run in folder `dir` with paths relative to it (so that every run records the same
/// command line): data `data`, models `models`, output folder `out`, ten starts, two threads.
fn fit(dir: &Path, data: &str, models: &str, extra: &[&str]) -> Command {
    let mut command = bin();
    command
        .current_dir(dir)
        .args(["fit", "--data", data, "--model", models, "--out", "out"])
        .args(["--starts", "10", "--threads", "2"])
        .args(extra);
    command
}

/// The journal of output folder `out` in `dir` (the working folder beside it, README).
fn journal(dir: &Path) -> PathBuf {
    dir.join(".out.valuedrift-journal").join("fits.journal")
}

/// Complete lines of the journal (the header and the finished pairs); 0 while it is missing.
fn lines(journal: &Path) -> usize {
    std::fs::read(journal).map_or(0, |b| b.iter().filter(|&&c| c == b'\n').count())
}

/// Starts `command`, waits (polling its journal) until the journal holds at least `pairs`
/// finished pairs, kills the process with SIGKILL and returns how many pairs the journal then
/// holds. Fails when the process ends by itself first.
fn kill_after(command: &mut Command, journal: &Path, pairs: usize) -> usize {
    let mut child = command
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    while lines(journal) < pairs + 1 {
        if let Some(status) = child.try_wait().unwrap() {
            panic!("the fit ended ({status}) before its journal held {pairs} pairs");
        }
        std::thread::sleep(Duration::from_millis(5));
    }
    // Child::kill sends SIGKILL on Unix.
    child.kill().unwrap();
    child.wait().unwrap();
    lines(journal) - 1
}

/// The number N of "resuming: N of the …" in a run's error output.
fn resumed_pairs(stderr: &[u8]) -> usize {
    let text = String::from_utf8_lossy(stderr);
    let line = text
        .lines()
        .find(|l| l.starts_with("resuming: "))
        .unwrap_or_else(|| panic!("no resuming line in:\n{text}"));
    line["resuming: ".len()..]
        .split(' ')
        .next()
        .unwrap()
        .parse()
        .unwrap()
}

/// A fresh folder `name` in `root` holding a copy of the demo data as d.csv.
fn folder_with_data(root: &Path, name: &str) -> PathBuf {
    let dir = root.join(name);
    std::fs::create_dir(&dir).unwrap();
    std::fs::copy(demo_file("orchard_trials.csv"), dir.join("d.csv")).unwrap();
    dir
}

/// Asserts that folder `out` holds the files of `reference`, each with the same bytes.
fn assert_same_files(reference: &BTreeMap<PathBuf, Vec<u8>>, out: &Path) {
    let outputs = contents(out);
    assert_eq!(
        outputs.keys().collect::<Vec<_>>(),
        reference.keys().collect::<Vec<_>>()
    );
    for (file, bytes) in reference {
        assert!(
            outputs[file] == *bytes,
            "{} differs from the uninterrupted run's",
            file.display()
        );
    }
}

/// Three models on the 40 demo subjects: 120 pairs, a few seconds of fitting.
const MODELS: &str = "gainloss-linear,delta-linear,gainloss-exponential";

#[test]
fn killed_twice_and_resumed_equals_an_uninterrupted_run_byte_for_byte() {
    let root = tempfile::tempdir().unwrap();
    let whole = folder_with_data(root.path(), "whole");
    succeed(&mut fit(&whole, "d.csv", MODELS, &[]));
    let reference = contents(&whole.join("out"));
    assert!(
        !journal(&whole).exists(),
        "a finished run removes its journal"
    );

    let dir = folder_with_data(root.path(), "killed");
    let first = kill_after(&mut fit(&dir, "d.csv", MODELS, &[]), &journal(&dir), 20);
    assert!(
        !dir.join("out").exists(),
        "a killed run leaves nothing in --out"
    );
    let second = kill_after(
        &mut fit(&dir, "d.csv", MODELS, &["--resume"]),
        &journal(&dir),
        70,
    );
    assert!(
        first >= 20 && (70..120).contains(&second),
        "{first} {second}"
    );
    assert!(!dir.join("out").exists());
    let resumed = succeed(&mut fit(&dir, "d.csv", MODELS, &["--resume"]));
    // Common practice: each pair comes from the journal or is fitted now, never both.
    assert_eq!(resumed_pairs(&resumed.stderr), second);
    assert!(
        String::from_utf8_lossy(&resumed.stderr)
            .contains(&format!("fitting the other {}", 120 - second)),
    );
    assert_same_files(&reference, &dir.join("out"));
    assert!(!journal(&dir).parent().unwrap().exists());
}

#[test]
fn resume_refuses_changed_inputs_keeps_the_journal_and_drops_a_torn_record() {
    let root = tempfile::tempdir().unwrap();
    let model_file = |dir: &Path| {
        let text = std::fs::read_to_string(
            Path::new(env!("CARGO_MANIFEST_DIR")).join("models/gainloss-linear.toml"),
        )
        .unwrap();
        std::fs::write(dir.join("m.toml"), text).unwrap();
    };
    // The reference: --resume without a journal says so and fits everything.
    let whole = folder_with_data(root.path(), "whole");
    model_file(&whole);
    let reference_run = succeed(&mut fit(&whole, "d.csv", "m.toml", &["--resume"]));
    assert!(String::from_utf8_lossy(&reference_run.stderr).contains("no journal"));
    let reference = contents(&whole.join("out"));

    let dir = folder_with_data(root.path(), "killed");
    model_file(&dir);
    let journal = journal(&dir);
    let done = kill_after(&mut fit(&dir, "d.csv", "m.toml", &[]), &journal, 5);
    let journalled = std::fs::read(&journal).unwrap();
    let refused = |extra: &[&str], expected: &str| {
        let output = fit(&dir, "d.csv", "m.toml", extra).output().unwrap();
        let stderr = String::from_utf8_lossy(&output.stderr);
        assert!(
            !output.status.success() && stderr.contains(expected),
            "{stderr}"
        );
        assert_eq!(std::fs::read(&journal).unwrap(), journalled, "journal kept");
        assert!(!dir.join("out").exists());
    };
    // A fresh run does not throw the journal away.
    refused(&[], "give --resume to continue it");
    // Changed data: one response time of the first trial (0.7233 s in the demo data).
    let data = std::fs::read_to_string(dir.join("d.csv")).unwrap();
    std::fs::write(dir.join("d.csv"), data.replacen("0.7233", "0.7234", 1)).unwrap();
    refused(&["--resume"], "the data file's bytes, by SHA-256");
    std::fs::write(dir.join("d.csv"), &data).unwrap();
    // Changed model definition: a start range.
    let model = std::fs::read_to_string(dir.join("m.toml")).unwrap();
    let changed = model.replacen("start = [0.05, 0.7]", "start = [0.05, 0.6]", 1);
    assert_ne!(changed, model);
    std::fs::write(dir.join("m.toml"), changed).unwrap();
    refused(&["--resume"], "the definition of model gainloss-linear");
    std::fs::write(dir.join("m.toml"), &model).unwrap();
    // Changed reading: a missing-value token, said in words (common practice: an error message
    // names what changed in the user's terms, not the program's internals).
    refused(
        &["--resume", "--missing", "NA,-99"],
        "how the data file is read (--columns, --by, --choice-codes, --missing) (journal: \
         columns by their own names, choices by their labels a and b, missing only empty cells; \
         now: columns by their own names, choices by their labels a and b, missing \"NA\" \"-99\")",
    );

    // A record torn by a crash: the first half of a copy of the last record, without its end.
    let text = String::from_utf8(journalled.clone()).unwrap();
    let last = text.lines().last().unwrap();
    let mut torn = journalled.clone();
    torn.extend_from_slice(&last.as_bytes()[..last.len() / 2]);
    std::fs::write(&journal, torn).unwrap();
    let resumed = succeed(&mut fit(&dir, "d.csv", "m.toml", &["--resume"]));
    assert!(String::from_utf8_lossy(&resumed.stderr).contains("torn last record"));
    assert_eq!(resumed_pairs(&resumed.stderr), done);
    assert_same_files(&reference, &dir.join("out"));
}

#[test]
fn hierarchical_fit_resumed_equals_an_uninterrupted_run_byte_for_byte() {
    // The per-subject stage is journalled; the EM runs again on the resume (README). A short EM
    // keeps the test quick: the outputs must be equal whatever its length.
    let options = [
        "--hierarchical",
        "--by",
        "group",
        "--em-iterations",
        "5",
        "--ibic-samples",
        "200",
    ];
    let root = tempfile::tempdir().unwrap();
    let whole = folder_with_data(root.path(), "whole");
    succeed(&mut fit(&whole, "d.csv", "gainloss-linear", &options));
    let dir = folder_with_data(root.path(), "killed");
    let done = kill_after(
        &mut fit(&dir, "d.csv", "gainloss-linear", &options),
        &journal(&dir),
        10,
    );
    let mut resume = options.to_vec();
    resume.push("--resume");
    let resumed = succeed(&mut fit(&dir, "d.csv", "gainloss-linear", &resume));
    assert_eq!(resumed_pairs(&resumed.stderr), done);
    assert_same_files(&contents(&whole.join("out")), &dir.join("out"));
}
