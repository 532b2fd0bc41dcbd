//! Helpers shared by the benchmark examples (not an example itself).

use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;
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

/// Runs `command` (its output discarded) and returns the child's peak resident memory in MB,
/// its wall time and its processor time (user and system) in seconds.
// The child is reaped by wait4 below, which also reports its resource usage.
#[allow(clippy::zombie_processes)]
pub fn measure(command: &mut Command) -> (f64, f64, f64) {
    let start = Instant::now();
    let child = command
        .stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::null())
        .spawn()
        .expect("the binary starts");
    let pid = child.id() as libc::pid_t;
    let mut status = 0;
    // SAFETY: an all-zero rusage is a valid value for wait4 to fill.
    let mut usage: libc::rusage = unsafe { std::mem::zeroed() };
    // SAFETY: `pid` is our own child, not yet waited for; both pointers are to live locals.
    let waited = unsafe { libc::wait4(pid, &mut status, 0, &mut usage) };
    let seconds = start.elapsed().as_secs_f64();
    assert_eq!(
        waited,
        pid,
        "wait4 failed: {}",
        std::io::Error::last_os_error()
    );
    assert!(
        libc::WIFEXITED(status) && libc::WEXITSTATUS(status) == 0,
        "the command failed: {command:?}"
    );
    let processor = |t: libc::timeval| t.tv_sec as f64 + t.tv_usec as f64 * 1e-6;
    // ru_maxrss is in kilobytes on Linux.
    (
        usage.ru_maxrss as f64 / 1024.0,
        seconds,
        processor(usage.ru_utime) + processor(usage.ru_stime),
    )
}
