"""A case that fails for a passing reason (its engine process killed) through the command line: the run
says so with exit 3, `run --skip-failed` reruns nothing and leaves every file as it was, `run
--retry-failed` reruns exactly the failed case (the finished one stays byte-identical) and then succeeds.

test_failures.py covers a case that fails for a reason of its own (energy decay not reached) and the
job counts Snakemake schedules; this file covers the end-to-end command-line behaviour.
Reference: common practice for batch pipelines (a failed job does not stop the others; reruns redo only what failed)."""
import json
import os
import signal
from pathlib import Path

import pandas as pd
import pytest

from helpers_reliability import (fingerprint, kill_group, plan_ids, run, start_run, tiny_study,
                                 wait_for)

pytestmark = [pytest.mark.pipeline, pytest.mark.solver, pytest.mark.timeout(600)]


def _engine_child(root: Path):
    """``(pid, case_id)`` of a running engine child process working below ``root``'s results folder, else None.

    The engine runs in the case's solve folder of the store (``_solves/<solve_id>``); plan.json names
    the case of that solve. Processes are looked up by their command line (bodysweep runs Snakemake in a
    session of its own, so the run's process group does not hold them)."""
    for pid in [int(d.name) for d in Path("/proc").iterdir() if d.name.isdigit()]:
        try:
            args = [a.decode() for a in Path(f"/proc/{pid}/cmdline").read_bytes().split(b"\0") if a]
        except OSError:
            continue
        if "bodysweep.workflow.solver.run" in args and "child" in args and any(str(root.parent) in a for a in args):
            for a in args:
                p = Path(a)
                if p.parent.name == "cases" and len(p.name) == 12:
                    return pid, p.name
                if p.parent.parent.name == "cases" and len(p.parent.name) == 12:
                    return pid, p.parent.name
                if p.parent.name == "_solves" and len(p.name) == 12:
                    cases = json.loads((root / "plan.json").read_text())["cases"]
                    return pid, next(e["case_id"] for e in cases if e["solve_id"] == p.name)
    return None


def test_killed_engine_fails_its_case_only_and_retry_reruns_only_it(tmp_path):
    study = tiny_study(tmp_path / "study.yaml", "tiny_retry")
    root = tmp_path / "results" / "tiny_retry"
    proc = start_run(study, tmp_path, "--cores", "2")
    try:
        pid, bad = wait_for(lambda: _engine_child(root), 240, "an engine process", proc=proc)
        os.kill(pid, signal.SIGKILL)  # the engine of one case dies; the pipeline itself goes on
        out, err = proc.communicate(timeout=400)
    finally:
        if proc.poll() is None:
            kill_group(proc)
    assert proc.returncode == 3, out + err  # exit 3: some cases failed
    (good,) = [c for c in plan_ids(root) if c != bad]
    assert f"failed {bad}" in out and good not in out.split("done:")[1], out
    m = json.loads((root / "cases" / bad / "metrics.json").read_text())
    assert m["status"] == "failed" and "killed by signal 9" in m["reason"], m  # the reason says what happened
    assert json.loads((root / "cases" / good / "metrics.json").read_text())["status"] in ("ok", "warning")
    good_files, bad_files = fingerprint(root / "cases" / good), fingerprint(root / "cases" / bad)

    skip = run(["run", str(study), "--skip-failed", "--cores", "2"], tmp_path)
    assert skip.returncode == 3, skip.stdout + skip.stderr
    assert "1 cases failed in an earlier run and are kept as failed" in skip.stdout
    assert "running 0 of 2 cases" in skip.stdout
    assert fingerprint(root / "cases" / good) == good_files and fingerprint(root / "cases" / bad) == bad_files

    retry = run(["run", str(study), "--retry-failed", "--cores", "2"], tmp_path)
    assert retry.returncode == 0, retry.stdout + retry.stderr
    assert "retrying 1 failed cases" in retry.stdout and "running 1 of 2 cases" in retry.stdout
    assert fingerprint(root / "cases" / good) == good_files  # the finished case was not rerun
    assert json.loads((root / "cases" / bad / "metrics.json").read_text())["status"] in ("ok", "warning")
    s = pd.read_parquet(root / "tables" / "summary.parquet")
    assert sorted(s["case_id"]) == sorted([good, bad]) and s["status"].isin(("ok", "warning")).all()
    assert s["reason"].fillna("").eq("").all()
    v = run(["verify", str(study)], tmp_path)
    assert v.returncode == 0, v.stdout + v.stderr
