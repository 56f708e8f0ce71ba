"""The README's job-array recipe under a real scheduler: a one-node Slurm cluster on this machine
(tests/slurm/cluster.sh; Debian's slurm-wlm and munge, installed by scripts/test.sh), a job array
of 4 tasks over a folder of 10 images with `batch --shard K/4`. Every image must be processed by
exactly one task, the four reports merged must list each once without error, and the daemons are
stopped afterwards."""
import csv
import io
import os
import subprocess
from pathlib import Path

import numpy as np
import pytest
from skimage import io as skio

ROOT = Path(__file__).resolve().parents[1]
CLUSTER = ROOT / "tests" / "slurm" / "cluster.sh"
TASKS = 4


@pytest.fixture
def cluster(tmp_path):
    d = tmp_path / "slurm"
    d.mkdir()
    start = subprocess.run(["bash", str(CLUSTER), "start", str(d)], capture_output=True, text=True, timeout=120)
    try:
        assert start.returncode == 0, start.stderr
        yield d
    finally:
        subprocess.run(["bash", str(CLUSTER), "stop", str(d)], capture_output=True, timeout=60)


def test_a_job_array_over_shards_processes_every_file_once(cluster, tmp_path):
    exe = Path(os.environ.get("PATCHGRAPH_BIN", ROOT / "target" / "release" / "patchgraph")).resolve()
    src, out = tmp_path / "in", tmp_path / "out"
    src.mkdir()
    rng = np.random.default_rng(7)
    names = []
    for i in range(10):
        img = np.clip(100 + 40 * np.sin(np.arange(48) / (3 + i))[None, :] + 8 * rng.standard_normal((48, 48)), 0, 255)
        names.append(f"scan-{i:02d}.png")
        skio.imsave(src / names[-1], img.astype(np.uint8), check_contrast=False)
    # The README's recipe, with this test's folders and a fast setting.
    setting = tmp_path / "setting.json"
    setting.write_text('{"version": 2, "method": "pixel-graph", "sigma": 8}')
    job = tmp_path / "job.sh"
    job.write_text(
        "#!/bin/bash\n"
        f"#SBATCH --array=1-{TASKS}\n"
        f"#SBATCH --output={tmp_path}/task-%a.log\n"
        f'exec "{exe}" batch "{src}" -o "{out}" --settings "{setting}" '
        f'--shard "${{SLURM_ARRAY_TASK_ID}}/{TASKS}"\n'
    )
    env = dict(os.environ, SLURM_CONF=str(cluster / "slurm.conf"))
    run = subprocess.run(["sbatch", "--wait", str(job)], capture_output=True, text=True, env=env, timeout=300)
    logs = "\n".join(p.read_text() for p in sorted(tmp_path.glob("task-*.log")))
    assert run.returncode == 0, f"{run.stderr}\n{logs}"
    # Four tasks ran (one log each) and wrote one report each.
    assert len(list(tmp_path.glob("task-*.log"))) == TASKS, logs
    reports = sorted(out.glob(f"batch-report-*-of-{TASKS}.csv"))
    assert [r.name for r in reports] == [f"batch-report-{k}-of-{TASKS}.csv" for k in range(1, TASKS + 1)]
    # Merged as the README says (one header kept), every input appears exactly once, no errors.
    rows = []
    for r in reports:
        rows += list(csv.DictReader(io.StringIO(r.read_text())))
    inputs = sorted(Path(row["input"]).name for row in rows)
    assert inputs == sorted(names), inputs
    assert all(not row["error"] for row in rows), rows
    # Each result exists once in the output folder.
    outputs = sorted(p.name for p in out.glob("*.png"))
    assert len(outputs) == len(names), outputs
