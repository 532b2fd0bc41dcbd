#!/usr/bin/env bash
# The HTML report in a real browser: `valuedrift demo` (which writes report.html) and a report of
# the demo, its predictive check and a quick plan are opened in headless Chromium (Debian's
# `chromium` package, installed with apt-get when missing). Each page must
#   - hold no address of anything outside the file (no http(s)://, protocol-relative or url()
#     reference) and no script;
#   - render without any console message (a page without scripts has none unless something
#     failed);
#   - have every figure in the rendered document (as many <figure> elements with an <svg> as the
#     file holds, and at least the number expected of its sections);
#   - give a screenshot that is not blank (tests/scripts/check_screenshot.py).
# Uses the release binary built by `cargo test --release`.
set -euo pipefail
cd "$(dirname "$0")/../.."
bin="${CARGO_TARGET_DIR:-$HOME/.cache/valuedrift/target}/release/valuedrift"
[ -x "$bin" ] || { echo "report_browser: $bin missing (run cargo test --release first)" >&2; exit 1; }
if ! command -v chromium >/dev/null 2>&1; then
  echo "report_browser: installing Debian's chromium"
  if [ "$(id -u)" -eq 0 ]; then sudo=""; else sudo="sudo"; fi
  $sudo apt-get update -q
  DEBIAN_FRONTEND=noninteractive $sudo apt-get install -y -q chromium
fi

work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
"$bin" demo --out "$work/demo" > "$work/demo.log"
"$bin" plan --plan examples/plan/quick-plan.toml --out "$work/plan" > "$work/plan.log" 2>&1
"$bin" report --fits "$work/demo" --check "$work/demo/check" --plan "$work/plan" \
  --out "$work/full.html" > /dev/null

browse() {
  # Fresh profile, no background traffic (the machine's network is closed).
  timeout 120 chromium --headless --no-sandbox --disable-gpu --disable-quic --no-first-run \
    --disable-background-networking --disable-component-update --disable-sync \
    --user-data-dir="$work/profile-$RANDOM" --enable-logging=stderr --v=0 "$@"
}

check_page() {
  local page="$1" least="$2" name
  name="$(basename "$page" .html)"
  if grep -Eq 'https?://|(src|href)="//|url\(|<script' "$page"; then
    echo "report_browser: $page refers to something outside the file or holds a script:" >&2
    grep -Eo '.{40}(https?://|(src|href)="//|url\(|<script).{40}' "$page" | head -5 >&2
    exit 1
  fi
  local in_file
  in_file="$(grep -o '<figure><svg' "$page" | wc -l)"
  browse --dump-dom "file://$page" > "$work/$name.dom" 2> "$work/$name.log"
  if grep -q 'CONSOLE' "$work/$name.log"; then
    echo "report_browser: console messages while rendering $page:" >&2
    grep 'CONSOLE' "$work/$name.log" >&2
    exit 1
  fi
  local rendered
  rendered="$(grep -o '<figure><svg' "$work/$name.dom" | wc -l)"
  if [ "$rendered" -ne "$in_file" ] || [ "$rendered" -lt "$least" ]; then
    echo "report_browser: $page: $rendered figures rendered, $in_file in the file, expected at least $least" >&2
    exit 1
  fi
  browse --window-size=1200,2400 --screenshot="$work/$name.png" "file://$page" \
    2> "$work/$name.shot.log" > /dev/null
  python3 tests/scripts/check_screenshot.py "$work/$name.png"
  echo "report_browser: $page: $rendered figures rendered, no console message, no outside reference"
}

# The demo: 7 models' estimates (per-subject and empirical-Bayes strips), 3 selection scopes and
# the check's figures; the full report adds the plan's scatter plots and power curves.
check_page "$work/demo/report.html" 55
check_page "$work/full.html" 70
