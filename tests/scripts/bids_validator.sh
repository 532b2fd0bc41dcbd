#!/usr/bin/env bash
# The events files of `valuedrift export` as a BIDS derivative dataset, checked by the official
# BIDS validator (npm package bids-validator, pinned below; installed into
# ~/.cache/valuedrift/npm when missing). Runs the demo and an export with design matrices into a
# temporary folder and validates the export folder; exits non-zero when the validator reports
# any error (warnings are printed, not fatal).
#
# What is left out of validation, and why: the export folder also holds files the BIDS
# specification does not name — latents.csv/.parquet (a tidy table of every trial) and the design
# matrices (*_design.tsv/.json, one row per scan; BIDS has no suffix for them). The export writes
# them into the dataset's .bidsignore, the validator's documented way to skip files outside the
# specification (bids-validator README, ".bidsignore"); this script adds no ignore of its own, no
# configuration file and no --ignore option, so every other check of the validator applies.
#
# Needs Node 18+ with npm, and network access to the npm registry the first time.
set -euo pipefail
cd "$(dirname "$0")/../.."

VALIDATOR_VERSION=1.15.0
export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-$HOME/.cache/valuedrift/target}"
prefix="$HOME/.cache/valuedrift/npm"
validator="$prefix/node_modules/.bin/bids-validator"
if [ ! -x "$validator" ] || [ "$("$validator" --version 2>/dev/null)" != "$VALIDATOR_VERSION" ]; then
  mkdir -p "$prefix"
  npm install --prefix "$prefix" --no-audit --no-fund --silent "bids-validator@$VALIDATOR_VERSION"
fi

cargo build --release --quiet
bin="$CARGO_TARGET_DIR/release/valuedrift"

work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
"$bin" demo --out "$work/demo" >"$work/demo.log"
"$bin" export --fits "$work/demo" --data demo-data/orchard_trials.csv --model gainloss-linear \
  --task orchard --tr 2 --scans 365 --out "$work/bids" >"$work/export.log"

# The validator exits 1 when it finds errors; --json gives the counts for the closing line.
status=0
"$validator" "$work/bids" --json >"$work/report.json" || status=$?
node -e '
  const r = JSON.parse(require("fs").readFileSync(process.argv[1], "utf8"));
  const show = (kind, list) => list.forEach(i => {
    console.log(`${kind} ${i.key}: ${i.reason}`);
    (i.files || []).slice(0, 5).forEach(f => console.log(`    ${f.file ? f.file.relativePath : ""} ${f.evidence || ""}`));
  });
  show("ERROR", r.issues.errors);
  show("warning", r.issues.warnings);
  console.log(`bids-validator: ${r.issues.errors.length} errors, ${r.issues.warnings.length} warnings on ${r.summary.totalFiles} files`);
' "$work/report.json"
if [ "$status" -ne 0 ]; then
  echo "bids-validator reported errors (exit $status)" >&2
  exit 1
fi
