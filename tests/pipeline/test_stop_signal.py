"""Clean interrupts: SIGINT / SIGTERM to `bodysweep run` stops its Snakemake and every process that started,
exits with code 6 (README, exit code table), and the next run redoes exactly the solver runs that had not
finished (counted from Snakemake's own "Job stats" table).

Outside references: process sessions and signals as POSIX and Linux proc(5) define them (session id is
field 6 of /proc/<pid>/stat, a process keeps its session when its parent dies); Snakemake 9's
incomplete-output marks (`.snakemake/incomplete/<urlsafe base64 of the output path>`, written when a job
starts, removed when Snakemake registers its end; snakemake/persistence/file.py) and its "Job stats" table.
"""
import base64
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from bodysweep.workflow.interrupt import session_members, settle_incomplete, stop_run, submitted_cluster_jobs
from bodysweep.workflow.layout import StudyLayout
from bodysweep.workflow.pipeline import parse_job_stats, scheduled_jobs

from helpers_reliability import descendants, kill_group, plan_ids, run, session_alive, start_run, tiny_study, wait_for

pytestmark = [pytest.mark.pipeline]


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


def _processes_in(folder: Path) -> list[int]:
    """Pids whose working directory is ``folder`` or below (every process of a run started there)."""
    out = []
    for d in Path("/proc").iterdir():
        if not d.name.isdigit():
            continue
        try:
            cwd = Path(os.readlink(d / "cwd"))
        except OSError:
            continue
        if (cwd == folder or folder in cwd.parents) and _alive(int(d.name)):
            out.append(int(d.name))
    return out


def _run_pids(proc) -> list[int]:
    pids = {proc.pid, *descendants(proc.pid)}
    for sid in list(pids):
        pids.update(session_alive(sid))
    return sorted(p for p in pids if _alive(p))


def _engines(pids) -> list[int]:
    """Of ``pids``, the solver's engine processes (`bodysweep.workflow.solver.run child`, openEMS inside)."""
    out = []
    for pid in pids:
        try:
            args = Path(f"/proc/{pid}/cmdline").read_bytes().split(b"\0")
        except OSError:
            continue
        if b"bodysweep.workflow.solver.run" in args and b"child" in args:
            out.append(pid)
    return out


def _snakemake_mark(workdir: Path, output_rel: str) -> Path:
    """Where Snakemake 9 keeps the incomplete mark of ``output_rel`` (persistence/file.py, _record_path)."""
    return workdir / ".snakemake" / "incomplete" / base64.urlsafe_b64encode(output_rel.encode()).decode()


@pytest.mark.solver
@pytest.mark.timeout(900)
def test_sigint_mid_run_stops_everything_and_the_rerun_solves_only_the_unfinished(tmp_path):
    study = tiny_study(tmp_path / "study.yaml", "tiny_stop", depths=(6, 7, 8, 9))
    root = tmp_path / "results" / "tiny_stop"
    proc = start_run(study, tmp_path, "--cores", "2")
    try:
        def some_solved_some_running():
            if not (root / "plan.json").exists():
                return None
            ids = plan_ids(root)
            solved = [c for c in ids if (root / "cases" / c / "solve" / "excite_1" / "status.json").exists()]
            running = [c for c in ids if (root / "cases" / c / "solve" / "excite_1" / ".engine_run" / "sim").is_dir()
                       and not (root / "cases" / c / "solve" / "excite_1" / "status.json").exists()]
            if solved and running and _engines(_run_pids(proc)):
                return _run_pids(proc)
            return None

        before = wait_for(some_solved_some_running, 600, "one solve done and another engine running", proc=proc)
        assert _engines(before)
        os.kill(proc.pid, signal.SIGINT)  # what `kill -INT` does: the signal reaches bodysweep only
        out, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            kill_group(proc)
    assert proc.returncode == 6, out + err  # README: exit code 6, interrupted
    assert "interrupted (SIGINT)" in out and "kept:" in out, out
    assert [ln for ln in err.splitlines() if ln.strip() and not ln.startswith("warning: ")] == [
        "bodysweep: error: interrupted by SIGINT; stopped the run"], err
    # nothing of the run is left: every pid seen before the signal has ended, none works in the folder
    assert [p for p in before if _alive(p)] == []
    assert _processes_in(tmp_path) == []
    assert not list((tmp_path / ".snakemake" / "locks").glob("*.lock"))  # Snakemake released its locks

    ids = plan_ids(root)
    solved = {c: (root / "cases" / c / "solve" / "excite_1" / "status.json") for c in ids
              if (root / "cases" / c / "solve" / "excite_1" / "status.json").exists()}
    assert 1 <= len(solved) < len(ids), solved
    for c, st in solved.items():  # a solve killed by the stop never records a failure
        assert json.loads(st.read_text())["status"] == "ok", (c, st.read_text())
    mtimes = {c: st.stat().st_mtime_ns for c, st in solved.items()}

    # Snakemake stopped between a solve's end and registering it keeps that output's incomplete mark
    # (the "Forced execution" reruns); make one such mark, dated when its job started
    some = sorted(solved)[0]
    # the solve's status lies in the shared store of solves (results/_solves/<solve_id>/, README)
    rel = os.path.relpath((root / "cases" / some / "solve").resolve(), tmp_path) + "/excite_1/status.json"
    mark = _snakemake_mark(tmp_path, rel)
    mark.parent.mkdir(parents=True, exist_ok=True)
    mark.write_text(json.dumps({"external_jobid": None}))
    started = mtimes[some] - 5_000_000_000
    os.utime(mark, ns=(started, started))
    # Snakemake itself reads the mark: its dry run schedules the finished solve again
    dry = scheduled_jobs(study, workdir=tmp_path)
    assert dry.get("solve") == len(ids) - len(solved) + 1, dry

    again = run(["run", str(study), "--cores", "2"], tmp_path, timeout=600)
    assert again.returncode == 0, again.stdout + again.stderr
    assert "kept 1 outputs that an interrupted run finished" in again.stdout, again.stdout
    log = sorted((root / "logs").glob("snakemake_*.log"))[-1].read_text()
    stats = parse_job_stats(log[log.rindex("Job stats"):])
    assert stats.get("solve", 0) == len(ids) - len(solved), stats  # exactly the unfinished solver runs
    for c, st in solved.items():
        assert st.stat().st_mtime_ns == mtimes[c]  # kept, not redone
    for c in ids:
        assert json.loads((root / "cases" / c / "metrics.json").read_text())["status"] in ("ok", "warning")


def test_lock_refusal_names_a_snakemake_started_by_bodysweep(tmp_path):
    """A Snakemake left by an ended `bodysweep run` (its environment names that run) is named as such."""
    study = tiny_study(tmp_path / "study.yaml", "tiny_named", depths=(6,))
    dead = subprocess.Popen(["true"])
    dead.wait()
    fake = subprocess.Popen(["bash", "-c", 'exec -a snakemake "$0" -c "import time; time.sleep(120)" '
                             '--configfile study.yaml --cores 1', sys.executable], cwd=tmp_path,
                            env={**os.environ, "BODYSWEEP_RUN_PID": str(dead.pid)})
    try:
        layout = StudyLayout.of("tiny_named", tmp_path / "results")
        from bodysweep.workflow.runlock import other_snakemake_runs

        wait_for(lambda: other_snakemake_runs(layout), 10, "the stand-in process to show up")
        r = run(["run", str(study)], tmp_path)
        assert r.returncode == 5, r.stdout + r.stderr
        assert (f"snakemake (pid {fake.pid}) started by bodysweep run (pid {dead.pid}, which has ended)"
                in r.stderr), r.stderr
        assert "outside bodysweep" not in r.stderr
    finally:
        fake.kill()
        fake.wait(10)


_TREE = """
import os, subprocess, sys, time
signal_mode = sys.argv[1]
if signal_mode == "ignore":
    import signal
    signal.signal(signal.SIGINT, signal.SIG_IGN)
# a job shell, a step process and an engine below it, and one orphan whose parent has ended
subprocess.Popen(["bash", "-c", "sleep 300 & sleep 300; wait"])
subprocess.Popen(["bash", "-c", "(sleep 300 &) ; exit 0"])
print("ready", flush=True)
time.sleep(300)
"""


@pytest.mark.parametrize("mode", ["normal", "ignore"])
def test_stop_run_ends_the_whole_session(tmp_path, mode):
    """A stand-in Snakemake with job processes (and an orphan) in its own session: stop_run leaves none of
    them alive, also when the leader ignores SIGINT (then SIGTERM/SIGKILL end it)."""
    proc = subprocess.Popen([sys.executable, "-c", _TREE, mode], stdout=subprocess.PIPE, text=True,
                            start_new_session=True)
    try:
        assert proc.stdout.readline().strip() == "ready"
        wait_for(lambda: len(session_members(proc.pid)) >= 5, 10, "the session's processes")
        members = session_members(proc.pid)
        t0 = time.monotonic()
        report = stop_run(proc, signal.SIGTERM, grace_s=3.0)
        assert time.monotonic() - t0 < 30
        assert report.left == [] and session_members(proc.pid) == []
        assert [p for p in members if _alive(p)] == []
        assert set(members) <= set(report.stopped)
        assert report.lines()[0].startswith("interrupted (SIGTERM): stopped snakemake and")
    finally:
        if proc.poll() is None:
            proc.kill()
        for p in session_members(proc.pid):
            os.kill(p, signal.SIGKILL)


def test_cluster_job_ids_from_the_executor_log():
    """Job ids as the SLURM executor plugin logs them ("Job 3 has been submitted with SLURM jobid 41 ...")."""
    text = ("Job 3 has been submitted with SLURM jobid 41 (log: a.log).\nother\n"
            "Job 4 has been submitted with SLURM jobid 42 (log: b.log).\n"
            "Job 3 has been submitted with SLURM jobid 41 (log: a.log).\n")
    assert submitted_cluster_jobs(text) == ["41", "42"]
    assert submitted_cluster_jobs("Nothing to be done.") == []


def test_settle_incomplete_keeps_only_outputs_written_after_their_mark(tmp_path):
    layout = StudyLayout.of("s", tmp_path / "results")
    other = StudyLayout.of("t", tmp_path / "results")
    files = {}
    for name, lay in (("new", layout), ("old", layout), ("missing", layout), ("other", other)):
        f = lay.case_dir(f"{name:a<12}"[:12]) / "excite_1" / "status.json"
        rel = str(f.relative_to(tmp_path))
        mark = _snakemake_mark(tmp_path, rel)
        mark.parent.mkdir(parents=True, exist_ok=True)
        mark.write_text("{}")
        t_mark = time.time_ns() - 10_000_000_000
        os.utime(mark, ns=(t_mark, t_mark))
        if name != "missing":
            f.parent.mkdir(parents=True, exist_ok=True)
            f.write_text("{}")
            t = t_mark + (5_000_000_000 if name in ("new", "other") else -5_000_000_000)
            os.utime(f, ns=(t, t))
        files[name] = (f, mark)
    settled = settle_incomplete(layout, tmp_path)
    assert settled == [files["new"][0].resolve()]
    assert not files["new"][1].exists()
    for name in ("old", "missing", "other"):  # stale, unwritten, or another study's: Snakemake decides
        assert files[name][1].exists(), name


def test_cluster_jobs_left_are_named_with_the_reason(tmp_path, monkeypatch):
    """Without squeue/scancel on this host every job id of the log is named as left, with that reason."""
    from bodysweep.workflow.interrupt import StopReport, cancel_cluster_jobs

    log = tmp_path / "run.log"
    log.write_text("earlier run: Job 1 has been submitted with SLURM jobid 7 (log: x).\n")
    since = log.stat().st_size
    with open(log, "a") as fh:
        fh.write("Job 2 has been submitted with SLURM jobid 8 (log: y).\nJob 3 has been submitted with SLURM jobid 9 (log: z).\n")
    monkeypatch.setenv("PATH", str(tmp_path))  # no squeue, no scancel
    report = StopReport("SIGINT")
    cancel_cluster_jobs(log, report, since)
    assert report.cluster_checked == 2 and report.cluster_cancelled == []
    assert report.cluster_left == [("8", "squeue/scancel not found on this host"),
                                   ("9", "squeue/scancel not found on this host")]
    lines = report.lines()
    assert "cluster job 8 is left: squeue/scancel not found on this host" in lines


def test_sigterm_while_snakemake_plans_stops_the_run(tmp_path):
    """SIGTERM to `bodysweep run` as soon as its Snakemake is up: exit 6, no process of the run is left."""
    study = tiny_study(tmp_path / "study.yaml", "tiny_term", depths=(6, 9))
    proc = start_run(study, tmp_path, "--cores", "1")
    try:
        def snakemake_up():
            kids = []
            for p in descendants(proc.pid):
                try:
                    if b"-m\0snakemake\0" in Path(f"/proc/{p}/cmdline").read_bytes() and os.getsid(p) == p:
                        kids.append(p)  # Snakemake, leading a session of its own
                except OSError:
                    continue
            return kids or None

        (sm,) = wait_for(snakemake_up, 120, "the run's snakemake", proc=proc)
        time.sleep(2.0)
        before = _run_pids(proc)
        os.kill(proc.pid, signal.SIGTERM)
        out, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            kill_group(proc)
    assert proc.returncode == 6, out + err
    assert "interrupted (SIGTERM)" in out and "interrupted by SIGTERM" in err, out + err
    assert sm in before and [p for p in before if _alive(p)] == []
    assert _processes_in(tmp_path) == []
