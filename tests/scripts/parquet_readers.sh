#!/usr/bin/env bash
# Every Parquet file valuedrift writes, read by the Arrow readers researchers use: pyarrow 12
# (the oldest 12.x with a wheel for Python 3.11, so the oldest reader we promise) and the current
# pyarrow, each in its own virtual environment cached under ~/.cache/valuedrift. The demo (with
# its predictive check), an export and a quick plan write into a temporary folder with the release
# binary; every .parquet there is checked against its CSV twin by tests/scripts/check_parquet.py (types:
# text -> string, flags -> bool, numbers -> double or int64; values equal to the CSV's).
#
# R: Debian's package lists offer no r-cran-arrow (checked with apt-cache search; CRAN is out of
# reach here), so no R reader is run.
#
# Needs python3 (3.11) with venv, and network access to PyPI the first time (pip install).
set -euo pipefail
cd "$(dirname "$0")/../.."

export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-$HOME/.cache/valuedrift/target}"
cache="$HOME/.cache/valuedrift"
mkdir -p "$cache"

# venv folder, then the pip requirements; reinstalled only when pyarrow does not import.
make_venv() {
  local venv="$1"
  shift
  if ! "$venv/bin/python" -c "import pyarrow.parquet" >/dev/null 2>&1; then
    rm -rf "$venv"
    python3 -m venv "$venv"
    "$venv/bin/pip" install --quiet --disable-pip-version-check "$@"
  fi
}
# pyarrow 12 wheels are built against NumPy 1.x; NumPy 2 cannot load them.
make_venv "$cache/venv-pyarrow12" "pyarrow==12.0.1" "numpy<2"
make_venv "$cache/venv-pyarrow-current" "pyarrow"

cargo build --release --quiet
bin="$CARGO_TARGET_DIR/release/valuedrift"

work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
out="$work/demo"
"$bin" demo --out "$out" >"$work/demo.log"
"$bin" export --fits "$out" --data demo-data/orchard_trials.csv --model gainloss-linear \
  --out "$out/export" >"$work/export.log"
# The demo writes its predictive check into "$out/check"; a quick plan adds the plan's tables.
"$bin" plan --plan examples/plan/quick-plan.toml --out "$out/plan" >"$work/plan.log" 2>&1

for venv in "$cache/venv-pyarrow12" "$cache/venv-pyarrow-current"; do
  "$venv/bin/python" tests/scripts/check_parquet.py "$out"
done
