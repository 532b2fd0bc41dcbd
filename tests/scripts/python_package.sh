#!/usr/bin/env bash
# The Python package (pyproject.toml, python/valuedrift/, src/python/): builds the wheel with
# maturin (cargo feature `python`, the shared CARGO_TARGET_DIR), installs it into a virtual
# environment cached under ~/.cache/valuedrift/venv-python, and runs tests/python with pytest
# (which also runs the release binary, to compare the package's outputs with the command line's,
# and executes the example notebook examples/python/from_python.ipynb with nbclient).
#
# pip-installs into that environment, only when one of them does not import: maturin, pytest,
# numpy, pandas, polars, pyarrow, nbclient, nbformat, ipykernel. Needs python3 (3.9 or later) with
# venv, and network access to PyPI the first time.
set -euo pipefail
cd "$(dirname "$0")/../.."

export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-$HOME/.cache/valuedrift/target}"
venv="$HOME/.cache/valuedrift/venv-python"
python="$venv/bin/python"

if [ ! -x "$python" ]; then
  python3 -m venv "$venv"
fi
# Module name to import, then the pip requirement that provides it.
needs=(maturin:maturin pytest:pytest numpy:numpy pandas:pandas polars:polars pyarrow:pyarrow
  nbclient:nbclient nbformat:nbformat ipykernel:ipykernel)
missing=()
for pair in "${needs[@]}"; do
  if ! "$python" -c "import ${pair%%:*}" >/dev/null 2>&1; then
    missing+=("${pair#*:}")
  fi
done
if [ "${#missing[@]}" -gt 0 ]; then
  "$venv/bin/pip" install --quiet --disable-pip-version-check "${missing[@]}"
fi

# The binding code's lints (the default build does not compile it, so .ci/run's clippy does not
# see it).
PYO3_PYTHON="$python" cargo clippy --quiet --all-targets --features python -- -D warnings

# The command-line binary the tests compare with.
cargo build --release --quiet --bin valuedrift
export VALUEDRIFT_BIN="$CARGO_TARGET_DIR/release/valuedrift"

work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
start=$(date +%s)
"$venv/bin/maturin" build --release --quiet --interpreter "$python" --out "$work/wheels"
"$venv/bin/pip" install --quiet --disable-pip-version-check --force-reinstall --no-deps \
  "$work"/wheels/valuedrift-*.whl
echo "wheel built and installed in $(($(date +%s) - start)) s"

# From the tests' folder, so that the installed package is imported (not python/valuedrift).
cd tests/python
"$python" -m pytest -q -p no:cacheprovider .
