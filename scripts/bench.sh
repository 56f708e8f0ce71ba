#!/usr/bin/env bash
# Runs the benchmark (Patchgraph and peers in one run) and writes BENCHMARKS.md.
# scripts/bench.sh --quick uses two small images only (for trying changes, not for the report).
source "$(dirname "$0")/common.sh"
ensure_python
cargo build --release --locked -p patchgraph
out="BENCHMARKS.md"
[ "${1:-}" = "--quick" ] && out="$(mktemp --suffix=.md)"
"$VENV/bin/python" tests/bench/bench.py "$ROOT/target/release/patchgraph" "$out" "$@"
