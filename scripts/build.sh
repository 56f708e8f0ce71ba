#!/usr/bin/env bash
# Builds everything: the native CLI and sample generator (release), and the page: the core
# compiled to wasm32 with simd128, its JS glue from the pinned wasm-bindgen CLI (installed into
# .tools/ if missing) in www/pkg/, the sample images copied into www/samples/, and the one-file
# offline page dist/patchgraph.html.
source "$(dirname "$0")/common.sh"
ensure_wasm_target
ensure_wasm_bindgen
say "building the native CLI (release)"
cargo build --release --locked -p patchgraph
say "building the core for wasm32 (simd128)"
RUSTFLAGS="-C target-feature=+simd128" cargo build --release --locked -p patchgraph --lib \
  --no-default-features --target wasm32-unknown-unknown --target-dir target/wasm
say "generating the JS glue"
rm -rf www/pkg
wasm-bindgen --target web --no-typescript --out-dir www/pkg target/wasm/wasm32-unknown-unknown/release/patchgraph.wasm
mkdir -p www/samples
cp sample-images/*.png www/samples/
say "writing the one-file page dist/patchgraph.html"
wasm-bindgen --target no-modules --no-typescript --out-dir target/wasm/no-modules target/wasm/wasm32-unknown-unknown/release/patchgraph.wasm
node scripts/make-single-file.mjs www target/wasm/no-modules/patchgraph.js target/wasm/no-modules/patchgraph_bg.wasm dist/patchgraph.html
echo "built: target/release/patchgraph, www/pkg/ ($(du -h www/pkg/patchgraph_bg.wasm | cut -f1) of wasm)"
