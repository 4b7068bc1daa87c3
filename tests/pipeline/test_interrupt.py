"""A sweep killed with SIGKILL in the middle of a solver job, then run again (real openEMS, tiny study).

1. The tiny study with one depth runs to the end: one finished case.
2. The study gains a second depth; `bodysweep run` starts in its own process group, and when the new
   case's engine is running (its scratch folder exists, no status yet, a solver child process alive)
   the whole group gets SIGKILL.
3. Every file left under its final name opens with the library of its format (json, h5py, scikit-rf,
   pandas), the killed case has no status or metrics, and no Snakemake lock file is left (bodysweep runs
   Snakemake without its directory lock).
4. The second run removes the temporaries and the engine scratch in the store, leaves the finished case's files untouched
   (same mtime and SHA-256), solves the killed case from scratch; tables are complete, verify passes.
"""
import json
import os
from pathlib import Path

import pandas as pd
import pytest

from helpers_reliability import (descendants, fingerprint, final_files, kill_group, open_every_file, plan_ids, run,
                                 session_alive, start_run, tiny_study, wait_for)

pytestmark = [pytest.mark.pipeline, pytest.mark.timeout(600)]


def run_processes(proc) -> list[int]:
    """Live pids of a `bodysweep run`: itself, its descendants and every process of the sessions they lead
    (Snakemake runs in a session of its own; orphans keep their session)."""
    pids = {proc.pid, *descendants(proc.pid)}
    for sid in {p for p in pids}:
        pids.update(session_alive(sid))
    return sorted(p for p in pids if Path(f"/proc/{p}").exists())


def _solver_child_alive(proc) -> bool:
    for pid in run_processes(proc):
        try:
            args = Path(f"/proc/{pid}/cmdline").read_bytes().split(b"\0")
        except OSError:
            continue
        if b"bodysweep.workflow.solver.run" in args and b"child" in args:
            return True
    return False


@pytest.mark.solver
def test_sigkill_mid_solve_then_rerun(tmp_path):
    study = tiny_study(tmp_path / "study.yaml", "tiny_kill", depths=(6,))
    first = run(["run", str(study), "--cores", "2"], tmp_path)
    assert first.returncode == 0, first.stdout + first.stderr
    root = tmp_path / "results" / "tiny_kill"
    (done_id,) = plan_ids(root)
    done_dir = root / "cases" / done_id
    before = fingerprint(done_dir)

    tiny_study(study, "tiny_kill", depths=(6, 9))
    proc = start_run(study, tmp_path, "--cores", "2")
    try:
        def killed_case_running():
            if not (root / "plan.json").exists():
                return None
            new = [c for c in plan_ids(root) if c != done_id]
            if len(new) != 1:
                return None
            exc = root / "cases" / new[0] / "solve" / "excite_1"  # its solve in the shared store
            running = (exc / ".engine_run" / "sim").is_dir() and not (exc / "status.json").exists()
            return new[0] if running and _solver_child_alive(proc) else None

        killed_id = wait_for(killed_case_running, 240, "the new case's engine to run", proc=proc)
    finally:
        if proc.poll() is None:
            kill_group(proc)
    assert proc.returncode == -9  # SIGKILL, not a normal end
    killed_dir = root / "cases" / killed_id

    # nothing half-written under a final name: every file opens with its format's own reader
    counts = open_every_file(root.parent)  # the study folder and the shared store of solves
    assert counts[".json"] >= 4 and counts[".h5"] >= 3 and counts[".s1p"] == 1, counts
    assert not (killed_dir / "solve" / "excite_1" / "status.json").exists()
    assert not (killed_dir / "metrics.json").exists()
    assert fingerprint(done_dir) == before  # the killed run did not touch the finished case
    # bodysweep runs Snakemake without its directory lock (the study's run lock and the solve folders'
    # locks exclude concurrent writers), so a kill leaves no Snakemake lock file to clean up
    assert not list((tmp_path / ".snakemake" / "locks").glob("*.lock"))
    assert (killed_dir / "solve" / "excite_1" / ".engine_run").is_dir()  # the engine's scratch is still there

    again = run(["run", str(study), "--cores", "2"], tmp_path)
    out = again.stdout + again.stderr
    assert again.returncode == 0, out
    assert "interrupted" in again.stdout and "stale Snakemake lock" in again.stdout
    assert "running 1 of 2 cases" in again.stdout  # only the killed case was scheduled
    assert fingerprint(done_dir) == before  # finished case: same files, same mtimes, same bytes
    st = json.loads((killed_dir / "solve" / "excite_1" / "status.json").read_text())
    assert st["status"] == "ok" and st["decay_reached"], st
    assert json.loads((killed_dir / "metrics.json").read_text())["status"] in ("ok", "warning")
    assert not list((tmp_path / ".snakemake" / "locks").glob("*.lock"))
    assert not [p for p in root.rglob("*") if p.name.startswith(".")]  # no temporaries, no scratch left
    s = pd.read_parquet(root / "tables" / "summary.parquet")
    assert sorted(s["case_id"]) == sorted([done_id, killed_id]) and s["status"].isin(("ok", "warning")).all()
    assert s["S11_dB"].notna().all() and s["S21_dB"].notna().all()
    open_every_file(root)
    v = run(["verify", str(study)], tmp_path)
    assert v.returncode == 0, v.stdout + v.stderr
    assert len(final_files(root)) > 20


def test_writer_killed_mid_write_leaves_the_old_file_and_a_temporary_that_run_removes(tmp_path):
    """SIGKILL while a file is being replaced: the final name still holds the previous complete content (POSIX
    rename(2) is atomic), the partial data sit in a hidden temporary, and clear_interrupted removes it."""
    import signal
    import subprocess
    import sys

    from bodysweep.workflow.layout import StudyLayout
    from bodysweep.workflow.runlock import clear_interrupted, stale_temporaries

    layout = StudyLayout.of("s", tmp_path)
    final = layout.case_dir("aaaaaaaaaaaa") / "metrics.json"
    final.parent.mkdir(parents=True)
    final.write_text(json.dumps({"status": "ok", "S11": [0.5, 0.0]}))
    code = ("import sys, time; from bodysweep.workflow.atomic import atomic_path\n"
            "with atomic_path(sys.argv[1]) as tmp:\n"
            "    fh = open(tmp, 'w'); fh.write('{\"status\": \"ok\", \"S11\": [0.9'); fh.flush()\n"
            "    print('writing', flush=True); time.sleep(60)\n")
    w = subprocess.Popen([sys.executable, "-c", code, str(final)], stdout=subprocess.PIPE, text=True)
    try:
        assert w.stdout.readline().strip() == "writing"
    finally:
        w.send_signal(signal.SIGKILL)
        w.wait(10)
    assert json.loads(final.read_text()) == {"status": "ok", "S11": [0.5, 0.0]}  # old content, whole
    (tmp,) = stale_temporaries(layout)
    assert tmp.name.startswith(".metrics.json.") and tmp.name.endswith(".part.json")
    with pytest.raises(ValueError):
        json.loads(tmp.read_text())  # the temporary really is half-written
    assert clear_interrupted(layout, tmp_path) == {"snakemake_locks": 0, "temporaries": 1}
    assert [p.name for p in final.parent.iterdir()] == ["metrics.json"]
