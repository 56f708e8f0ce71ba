#!/usr/bin/env bash
# Builds everything: the native CLI and sample generator (release), and the page: the core
# compiled to wasm32 twice, with simd128 and without (the baseline, for browsers without wasm
# SIMD; the worker picks one by feature detection), its JS glue from the pinned wasm-bindgen CLI
# (installed into .tools/ if missing) in www/pkg/, the sample images copied into www/samples/,
# and the one-file offline page dist/patchgraph.html.
source "$(dirname "$0")/common.sh"
ensure_wasm_target
ensure_wasm_bindgen
say "building the native CLI (release)"
cargo build --release --locked -p patchgraph
say "building the core for wasm32 (simd128)"
RUSTFLAGS="-C target-feature=+simd128" cargo build --release --locked -p patchgraph --lib \
  --no-default-features --target wasm32-unknown-unknown --target-dir target/wasm
say "building the core for wasm32 (baseline, no SIMD)"
cargo build --release --locked -p patchgraph --lib \
  --no-default-features --target wasm32-unknown-unknown --target-dir target/wasm-base
say "generating the JS glue"
rm -rf www/pkg
wasm-bindgen --target web --no-typescript --out-dir www/pkg target/wasm/wasm32-unknown-unknown/release/patchgraph.wasm
# Both builds have the same exports, so one glue serves both; only the .wasm differs.
wasm-bindgen --target web --no-typescript --out-dir target/wasm-base/glue target/wasm-base/wasm32-unknown-unknown/release/patchgraph.wasm
cmp -s www/pkg/patchgraph.js target/wasm-base/glue/patchgraph.js || { echo "the two wasm builds need different glue" >&2; exit 1; }
cp target/wasm-base/glue/patchgraph_bg.wasm www/pkg/patchgraph_base_bg.wasm
mkdir -p www/samples
cp sample-images/*.png www/samples/
say "writing the one-file page dist/patchgraph.html"
wasm-bindgen --target no-modules --no-typescript --out-dir target/wasm/no-modules target/wasm/wasm32-unknown-unknown/release/patchgraph.wasm
wasm-bindgen --target no-modules --no-typescript --out-dir target/wasm-base/no-modules target/wasm-base/wasm32-unknown-unknown/release/patchgraph.wasm
node scripts/make-single-file.mjs www target/wasm/no-modules/patchgraph.js target/wasm/no-modules/patchgraph_bg.wasm \
  target/wasm-base/no-modules/patchgraph_bg.wasm dist/patchgraph.html
echo "built: target/release/patchgraph, www/pkg/ ($(du -h www/pkg/patchgraph_bg.wasm | cut -f1) of wasm)"
