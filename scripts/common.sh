# Sourced by the other scripts: project root, and set-up steps that several of them need.
set -euo pipefail
ROOT="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
cd "$ROOT"
VENV="$ROOT/.venv"

say() { printf '\n== %s\n' "$*"; }

# The Python reference libraries, in a virtual environment the project owns.
ensure_python() {
  if [ ! -x "$VENV/bin/python" ]; then
    say "creating the Python environment in .venv"
    python3 -m venv "$VENV"
  fi
  if ! "$VENV/bin/python" -c 'import skimage, cv2, pytest, pywt, scipy' 2>/dev/null \
     || ! cmp -s tests/requirements.txt "$VENV/.installed-requirements"; then
    say "installing Python test dependencies"
    "$VENV/bin/pip" install --quiet -r tests/requirements.txt
    cp tests/requirements.txt "$VENV/.installed-requirements"
  fi
}

# The wasm32 target: the core must keep compiling for the browser.
ensure_wasm_target() {
  if ! rustup target list --installed | grep -qx wasm32-unknown-unknown; then
    say "adding the wasm32-unknown-unknown Rust target"
    rustup target add wasm32-unknown-unknown
  fi
}

# The wasm-bindgen CLI at exactly the version of the wasm-bindgen crate in Cargo.lock.
ensure_wasm_bindgen() {
  local want
  want="$(awk '/^name = "wasm-bindgen"$/ {getline; gsub(/"/, "", $3); print $3; exit}' Cargo.lock)"
  export PATH="$ROOT/.tools/bin:$PATH"
  if [ "$(wasm-bindgen --version 2>/dev/null | cut -d' ' -f2)" != "$want" ]; then
    say "installing wasm-bindgen-cli $want into .tools (a few minutes, once)"
    # Not --locked: one of its locked dependencies is missing from the registry.
    cargo install wasm-bindgen-cli --version "$want" --root "$ROOT/.tools"
  fi
}

# Debian's Chromium for the browser tests, and playwright-core to drive it.
ensure_browser() {
  if ! command -v chromium >/dev/null 2>&1; then
    say "installing Chromium from Debian's packages"
    if [ "$(id -u)" = 0 ]; then SUDO=""; else SUDO="sudo"; fi
    $SUDO apt-get update -qq
    DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq chromium chromium-driver >/dev/null
  fi
  ensure_npm
}

# The npm packages pinned in package-lock.json: playwright-core, and ESLint for the gate.
ensure_npm() {
  if [ ! -d node_modules/playwright-core ] || ! cmp -s package-lock.json node_modules/.installed-lock.json; then
    say "installing npm test dependencies"
    npm ci --no-audit --no-fund --loglevel=error
    cp package-lock.json node_modules/.installed-lock.json
  fi
}

# Debian's Slurm and munge for the job-array test (tests/test_slurm.py, tests/slurm/cluster.sh).
ensure_slurm() {
  if ! command -v slurmctld >/dev/null 2>&1 || ! command -v munged >/dev/null 2>&1; then
    say "installing Slurm and munge from Debian's packages"
    if [ "$(id -u)" = 0 ]; then SUDO=""; else SUDO="sudo"; fi
    $SUDO apt-get update -qq
    DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq slurm-wlm munge >/dev/null
  fi
}
