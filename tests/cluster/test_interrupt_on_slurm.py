"""SIGINT to `bodysweep run --profile slurm` while its jobs are queued or running: every SLURM job the run
submitted is cancelled (squeue no longer lists any of them), the run exits with code 6 and says how many
cluster jobs it found; the rerun finishes the study.

Outside references: SLURM's `squeue -j` (lists pending and running jobs only) and the SLURM executor
plugin's log line "has been submitted with SLURM jobid N".
"""
from __future__ import annotations

import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
import yaml

from test_study_on_slurm import PARTITION, STUDY, _bodysweep, _test_profile  # noqa: E402  tests/cluster/

pytestmark = [pytest.mark.slurm, pytest.mark.timeout(1500)]


def test_sigint_cancels_the_submitted_jobs(slurm_cluster, slurm_env, tmp_path):
    d = {**STUDY, "study": "slurm-stop"}
    d["sweep"] = {"parameters": {"depth": "scene.implant.depth_mm"}, "blocks": [{"grid": {"depth": [5, 6, 7]}}]}
    study = tmp_path / "study.yaml"
    study.write_text(yaml.safe_dump(d, sort_keys=False))
    profile = _test_profile(tmp_path)
    exe = str(Path(sys.executable).with_name("bodysweep"))
    proc = subprocess.Popen([exe, "run", str(study), "--profile", str(profile), "--partition", PARTITION,
                             "--accept-cost"], cwd=tmp_path, env=slurm_env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, start_new_session=True)
    root = tmp_path / "results" / "slurm-stop"
    try:
        ids: list[str] = []
        t0 = time.monotonic()
        while time.monotonic() - t0 < 600 and proc.poll() is None:
            logs = sorted((root / "logs").glob("snakemake_*.log")) if (root / "logs").is_dir() else []
            text = logs[-1].read_text(errors="replace") if logs else ""
            ids = re.findall(r"has been submitted with SLURM jobid (\d+)", text)
            if any(j.strip() for j in _squeue(ids)):
                break
            time.sleep(0.5)
        assert ids and proc.poll() is None, "no SLURM job was submitted"
        os.kill(proc.pid, signal.SIGINT)
        out, err = proc.communicate(timeout=300)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
    assert proc.returncode == 6, out + err
    assert "cluster jobs: " in out, out
    assert [ln for ln in _squeue(ids) if ln.strip()] == [], "SLURM jobs of the interrupted run are still queued"
    again = _bodysweep(["run", str(study), "--profile", str(profile), "--partition", PARTITION, "--accept-cost"],
                       tmp_path, slurm_env)
    assert again.returncode == 0, (again.stdout + again.stderr)[-4000:]


def _squeue(ids: list[str]) -> list[str]:
    if not ids:
        return []
    q = subprocess.run(["squeue", "-h", "-o", "%i %T", "-j", ",".join(ids)], capture_output=True, text=True)
    return q.stdout.splitlines()
