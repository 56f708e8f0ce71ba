#!/usr/bin/env bash
# Runs the benchmark (Patchgraph and peers in one run, wasm in Chromium against native, then the
# very large images through the CLI and the page) and writes BENCHMARKS.md.
# scripts/bench.sh --quick uses small images only, skips the large ones, and writes a temp file.
source "$(dirname "$0")/common.sh"
ensure_python
ensure_browser
"$ROOT/scripts/build.sh" >/dev/null
out="BENCHMARKS.md"
[ "${1:-}" = "--quick" ] && out="$(mktemp --suffix=.md)"
"$VENV/bin/python" tests/bench/bench.py "$ROOT/target/release/patchgraph" "$out" "$@"
work="$(mktemp -d)"; trap 'rm -rf "$work"' EXIT
# The browser comparison on camera 512 x 512 at sigma 25 from the development set.
"$VENV/bin/python" -c "import sys; sys.path.insert(0, 'tests/bench'); import devset, skimage.io as io; \
io.imsave('$work/camera512-s25.png', devset.add_noise(devset.grey_images()['camera512'], 25), check_contrast=False)"
node tests/browser/bench.mjs "$work/camera512-s25.png" | tee -a "$out"
if [ "${1:-}" != "--quick" ]; then
  "$VENV/bin/python" tests/bench/estimate.py "$ROOT/target/release/patchgraph" | tee -a "$out"
  "$VENV/bin/python" tests/bench/large.py "$ROOT/target/release/patchgraph" "$work/large" | tee -a "$out"
  node tests/browser/bench-large.mjs "$work/large" | tee -a "$out"
fi
echo "written: $out"
