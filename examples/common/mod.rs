//! Helpers shared by the benchmark examples (not an example itself).

use std::io::Write;
use std::path::{Path, PathBuf};
use valuedrift::data::{Subject, TrialTable};
use valuedrift::results::trials_table;

/// The release binary beside this example (target/release/valuedrift).
pub fn release_binary() -> PathBuf {
    let exe = std::env::current_exe().expect("the example's path");
    let release = exe
        .parent()
        .and_then(Path::parent)
        .expect("target/release/examples");
    let binary = release.join("valuedrift");
    assert!(
        binary.exists(),
        "{} is missing: run `cargo build --release` first",
        binary.display()
    );
    binary
}

/// Writes `subjects` as CSV trial-table rows to `file`, with the header line when `header`.
pub fn write_subjects(file: &mut impl Write, subjects: Vec<Subject>, header: bool) {
    let table = TrialTable {
        subjects,
        present: vec!["outcome".into()],
    };
    let mut text = Vec::new();
    trials_table(&table)
        .write_csv(&mut text)
        .expect("CSV in memory");
    let body = if header {
        &text[..]
    } else {
        let end = text.iter().position(|&b| b == b'\n').map_or(0, |i| i + 1);
        &text[end..]
    };
    file.write_all(body).expect("the data file is written");
}
