"""Shared fixtures: the CLI binary built by scripts/test.sh, and a helper to call it."""
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests" / "bench"))


@pytest.fixture(scope="session")
def patchgraph():
    exe = Path(os.environ.get("PATCHGRAPH_BIN", ROOT / "target" / "release" / "patchgraph"))
    if not exe.exists():
        pytest.fail(f"{exe} is missing: build with `cargo build --release` (scripts/test.sh does)")

    def call(*args):
        out = subprocess.run([str(exe), *map(str, args), "--json"], capture_output=True, text=True)
        assert out.returncode == 0, out.stderr
        return json.loads(out.stdout)

    return call
