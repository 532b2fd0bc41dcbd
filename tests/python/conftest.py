"""Shared helpers of the Python package's tests: where the repository and the command-line
binary are, and running the binary."""

from __future__ import annotations

import os
import subprocess
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
DEMO_TRIALS = ROOT / "demo-data" / "orchard_trials.csv"
DEMO_DESIGN = ROOT / "demo-data" / "orchard_design.csv"
REFERENCE = ROOT / "tests" / "reference"


def binary() -> Path:
    """The command-line program: $VALUEDRIFT_BIN, else the release build in $CARGO_TARGET_DIR
    (or target/)."""
    given = os.environ.get("VALUEDRIFT_BIN")
    if given:
        return Path(given)
    target = Path(os.environ.get("CARGO_TARGET_DIR", ROOT / "target"))
    return target / "release" / "valuedrift"


def run_cli(*args, check: bool = True) -> subprocess.CompletedProcess:
    """Runs the command line with `args`; with `check`, fails the test when it fails."""
    done = subprocess.run(
        [str(binary()), *map(str, args)], capture_output=True, text=True, cwd=ROOT
    )
    if check and done.returncode != 0:
        pytest.fail(f"valuedrift {' '.join(map(str, args))} failed:\n{done.stderr}")
    return done


def cli_error(*args) -> str:
    """The message the command line prints after `error: ` for a command that must fail."""
    done = run_cli(*args, check=False)
    assert done.returncode != 0, f"expected valuedrift {' '.join(map(str, args))} to fail"
    lines = [l for l in done.stderr.splitlines() if l.startswith("error: ") or l.startswith("  caused by: ")]
    assert lines, done.stderr
    return "\n".join(lines)[len("error: "):]


def same_csv_files(ours: Path, theirs: Path, names=None) -> list[str]:
    """The CSV files of folder `theirs` (or those in `names`), each checked to be byte for byte
    the same in `ours`; returns the names compared."""
    names = names or sorted(p.name for p in theirs.glob("*.csv"))
    assert names, f"no CSV files in {theirs}"
    for name in names:
        assert (ours / name).read_bytes() == (theirs / name).read_bytes(), name
    return names


@pytest.fixture(scope="session")
def cli_binary() -> Path:
    path = binary()
    if not path.is_file():
        pytest.fail(f"{path}: no command-line binary; build it with cargo build --release")
    return path
