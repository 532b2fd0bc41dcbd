//! Helpers shared by the tests that run the binary on the demo study.

use std::path::{Path, PathBuf};
use std::process::Command;

/// The model that generated the demo data (source: demo-data/README.md).
pub const MODEL: &str = "gainloss-linear";

/// The release binary under test.
pub fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_valuedrift"))
}

/// A file of demo-data/.
pub fn demo_file(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("demo-data")
        .join(name)
}
