#!/usr/bin/env bash
# The quick gate (about a minute): formatting (rustfmt.toml) and clippy with warnings as errors,
# natively and for wasm32, and ESLint's recommended rules over the page and the JS tests
# (eslint.config.js). scripts/test.sh runs it first; run it alone before a commit.
source "$(dirname "$0")/common.sh"
ensure_wasm_target
if ! cargo fmt --version >/dev/null 2>&1 || ! cargo clippy --version >/dev/null 2>&1; then
  say "adding rustfmt and clippy to the Rust toolchain"
  rustup component add rustfmt clippy
fi
say "formatting (cargo fmt --check)"
cargo fmt --all -- --check
say "clippy, native (all targets, warnings are errors)"
cargo clippy --release --locked -p patchgraph --all-targets -- -D warnings
say "clippy, wasm32 core"
cargo clippy --release --locked -p patchgraph --lib --no-default-features --target wasm32-unknown-unknown \
  --target-dir target/wasm-base -- -D warnings
say "JS lint (eslint, eslint.config.js)"
ensure_npm
npx --no-install eslint .
echo "gate passed"
