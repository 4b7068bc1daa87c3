"""The single-node SLURM itself: a batch job runs under a job id and gets what it asked for."""
from __future__ import annotations

import subprocess
import time

import pytest

pytestmark = [pytest.mark.slurm, pytest.mark.timeout(300)]


def _wait_done(job_id: str, env: dict, timeout_s: float = 60.0) -> None:
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout_s:
        q = subprocess.run(["squeue", "-h", "-j", job_id, "-o", "%T"], capture_output=True, text=True, env=env)
        if q.stdout.strip() in ("", "COMPLETED", "FAILED", "CANCELLED", "TIMEOUT"):
            return
        time.sleep(0.5)
    raise AssertionError(f"SLURM job {job_id} still not done after {timeout_s} s")


def test_node_is_idle(slurm_cluster, slurm_env):
    # sinfo's %t state is "idle" for a node with no jobs (SLURM sinfo man page)
    out = subprocess.run(["sinfo", "-h", "-o", "%t"], capture_output=True, text=True, env=slurm_env, check=True)
    assert set(out.stdout.split()) == {"idle"}  # one line per partition of the node


def test_wrap_job_runs_with_requested_memory_and_time(slurm_cluster, slurm_env, tmp_path):
    log = tmp_path / "wrap.out"
    sub = subprocess.run(
        ["sbatch", "--parsable", "--mem", "123", "-t", "3", "-c", "1", "-o", str(log),
         "--wrap", "echo job=$SLURM_JOB_ID mem=$SLURM_MEM_PER_NODE"],
        capture_output=True, text=True, env=slurm_env, cwd=tmp_path, check=True,
    )
    job_id = sub.stdout.strip().split(";")[0]
    assert job_id.isdigit()
    _wait_done(job_id, slurm_env)
    # the batch script sees its own id and the memory it asked for (sbatch man page: SLURM_MEM_PER_NODE, MB)
    t0 = time.monotonic()
    while not log.exists() and time.monotonic() - t0 < 10:
        time.sleep(0.2)
    assert log.read_text().split() == [f"job={job_id}", "mem=123"]
    rec = slurm_cluster.completed_jobs()[job_id]
    assert rec["JobState"] == "COMPLETED"
    assert rec["TimeLimit"] == "3"          # minutes, as given with -t (sbatch man page)
    assert "mem=123M" in rec["Tres"]
