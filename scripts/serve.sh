#!/usr/bin/env bash
# For now (before the page exists): builds, then denoises the built-in sample micrograph with the
# CLI and says where the result, its cut map and the metrics are.
source "$(dirname "$0")/common.sh"
"$ROOT/scripts/build.sh"
OUT="$ROOT/dist/demo"
mkdir -p "$OUT"
PG="$ROOT/target/release/patchgraph"
say "denoising the sample images"
for name in cells chart board; do
  "$PG" denoise "sample-images/$name-noisy.png" -o "$OUT/$name-denoised.png" --cut-map "$OUT/$name-cuts.png"
  "$PG" metrics "sample-images/$name-clean.png" "$OUT/$name-denoised.png"
done
echo
echo "Results are in $OUT (denoised images and cut maps); the inputs are in sample-images/."
