#!/usr/bin/env bash
# Builds everything: the native CLI and sample generator (release), and checks that the core
# library compiles for wasm32 (the page's bindings arrive in a later change).
source "$(dirname "$0")/common.sh"
ensure_wasm_target
say "building the native CLI (release)"
cargo build --release --locked -p patchgraph
say "building the core library for wasm32"
cargo build --release --locked -p patchgraph --lib --no-default-features --target wasm32-unknown-unknown
echo "built: target/release/patchgraph, target/release/make-samples"
