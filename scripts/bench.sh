#!/usr/bin/env bash
# Runs the benchmark (Patchgraph and peers in one run, then wasm in Chromium against native) and
# writes BENCHMARKS.md. scripts/bench.sh --quick uses small images only and prints to a temp file.
source "$(dirname "$0")/common.sh"
ensure_python
ensure_browser
"$ROOT/scripts/build.sh" >/dev/null
out="BENCHMARKS.md"
[ "${1:-}" = "--quick" ] && out="$(mktemp --suffix=.md)"
"$VENV/bin/python" tests/bench/bench.py "$ROOT/target/release/patchgraph" "$out" "$@"
node tests/browser/bench.mjs | tee -a "$out"
echo "written: $out"
