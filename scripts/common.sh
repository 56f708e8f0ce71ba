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
