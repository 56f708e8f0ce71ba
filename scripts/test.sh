#!/usr/bin/env bash
# Installs what the tests need (wasm32 target, pinned wasm-bindgen CLI, Python reference
# libraries, Debian's Chromium, Slurm and munge, npm's playwright-core and ESLint) and runs every
# test.
source "$(dirname "$0")/common.sh"
ensure_wasm_target
bash "$ROOT/scripts/check.sh"
ensure_python
ensure_browser
ensure_slurm
"$ROOT/scripts/build.sh"
say "Rust tests (unit, closed forms, invariants, CLI contract)"
cargo test --release --locked -p patchgraph
say "sample images are what the generator makes"
tmp="$(mktemp -d)"; trap 'rm -rf "$tmp"' EXIT
"$ROOT/target/release/make-samples" "$tmp" >/dev/null
for f in sample-images/*.png; do
  cmp -s "$f" "$tmp/$(basename "$f")" || { echo "$f differs from the generator's output: run target/release/make-samples"; exit 1; }
done
echo "sample images match"
say "cross-checks against reference libraries (pytest)"
PATCHGRAPH_BIN="$ROOT/target/release/patchgraph" "$VENV/bin/python" -m pytest -q tests
say "wasm module and page in Chromium (node --test)"
PATCHGRAPH_BIN="$ROOT/target/release/patchgraph" node --test --test-concurrency=1 tests/browser/
