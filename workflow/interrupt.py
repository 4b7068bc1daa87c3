"""Stopping a run cleanly on SIGINT / SIGTERM / SIGHUP, and keeping the work it finished.

``bodysweep run`` starts Snakemake in a session of its own (``setsid``), so every process of the run (the
Snakemake process, its job shells, the step processes, the engine processes they start) carries that
session id, also when a parent has ended and the process was handed to init. A terminal's Ctrl-C reaches
only ``bodysweep run`` (the foreground process group); :func:`stop_run` then stops the whole session:

1. ``SIGINT`` to Snakemake: it stops scheduling and, with a cluster executor, cancels the jobs it
   submitted (the SLURM plugin runs ``scancel`` on them).
2. Every other process of the session is frozen (``SIGSTOP``), sent ``SIGTERM`` and thawed
   (``SIGCONT``): all of them die on the pending ``SIGTERM`` before any of them can notice that its child
   died, so no step records a killed engine as a failed case. Repeated for processes started meanwhile.
3. Whatever is left after the grace period gets ``SIGKILL``.

On a cluster, the SLURM job ids Snakemake reported in the run's log are then looked up with ``squeue``;
those still queued or running are cancelled with ``scancel`` and the report names each job left and why.

Snakemake marks the outputs of a job as incomplete (``.snakemake/incomplete/<base64 of the path>``) when
the job starts and removes the mark when it registers the job's end. A run stopped between the two keeps
the mark although the output is complete (every bodysweep step writes its outputs under a temporary name
and renames them into place, so an output that exists is whole). With ``--rerun-incomplete`` Snakemake
would redo such a job ("Forced execution"). :func:`settle_incomplete` removes the mark of an output of
this study that was written after the mark (the job that wrote it started then), so only the jobs that
did not finish are redone.
"""
from __future__ import annotations

import base64
import os
import re
import shutil
import signal
import subprocess
import time
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

from .layout import StudyLayout
from .runlock import PARENT_ENV, clear_interrupted  # noqa: F401  (PARENT_ENV: pipeline marks its Snakemake)

#: signals that make ``bodysweep run`` stop its run
STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM, signal.SIGHUP)


class RunInterrupted(Exception):
    """``bodysweep run`` received a stop signal; ``signum`` is the signal, ``report`` what was stopped."""

    def __init__(self, signum: int):
        super().__init__(signal.Signals(signum).name)
        self.signum = signum
        self.report: StopReport | None = None


@contextmanager
def stop_signals_raise():
    """Within the block a stop signal raises :class:`RunInterrupted` (main thread only)."""
    def handler(signum, frame):
        raise RunInterrupted(signum)

    old = {s: signal.signal(s, handler) for s in STOP_SIGNALS}
    try:
        yield
    finally:
        for s, h in old.items():
            signal.signal(s, h)


# -- processes of a session --------------------------------------------------------------------------------
def _stat(pid: int) -> list[str] | None:
    """Fields of ``/proc/<pid>/stat`` after the command name (state, ppid, pgrp, session, ...)."""
    try:
        text = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    return text.rsplit(")", 1)[1].split()


def session_members(sid: int) -> list[int]:
    """Live (not zombie) pids whose session id is ``sid``."""
    out = []
    for d in Path("/proc").iterdir():
        if not d.name.isdigit():
            continue
        f = _stat(int(d.name))
        if f and f[0] != "Z" and int(f[3]) == sid:
            out.append(int(d.name))
    return sorted(out)


def _signal_all(pids, sig) -> None:
    for pid in pids:
        try:
            os.kill(pid, sig)
        except (ProcessLookupError, PermissionError):
            pass


def _terminate_frozen(pids: list[int]) -> None:
    """SIGSTOP all, SIGTERM all, SIGCONT all: each dies on its pending SIGTERM as it resumes."""
    _signal_all(pids, signal.SIGSTOP)
    _signal_all(pids, signal.SIGTERM)
    _signal_all(pids, signal.SIGCONT)


@dataclass
class StopReport:
    """What :func:`stop_run` did."""

    signal_name: str
    stopped: list[int] = field(default_factory=list)  # pids of the run's processes that were ended
    killed: list[int] = field(default_factory=list)  # of those, the ones that needed SIGKILL
    left: list[int] = field(default_factory=list)  # pids still alive afterwards (should be empty)
    cluster_cancelled: list[str] = field(default_factory=list)  # SLURM job ids cancelled by bodysweep
    cluster_left: list[tuple[str, str]] = field(default_factory=list)  # (job id, why it is left)
    cluster_checked: int = 0  # SLURM job ids found in the log

    def lines(self) -> list[str]:
        out = [f"interrupted ({self.signal_name}): stopped snakemake and {max(len(self.stopped) - 1, 0)} "
               f"processes it started" + (f" ({len(self.killed)} needed SIGKILL)" if self.killed else "")]
        if self.left:
            out.append(f"still alive after the stop: pids {', '.join(map(str, self.left))}")
        if self.cluster_checked:
            out.append(f"cluster jobs: {self.cluster_checked} submitted by this run, "
                       f"{len(self.cluster_cancelled)} cancelled by bodysweep"
                       + (f" ({', '.join(self.cluster_cancelled)})" if self.cluster_cancelled else "")
                       + ", the others had ended or were cancelled by snakemake")
        for jid, why in self.cluster_left:
            out.append(f"cluster job {jid} is left: {why}")
        return out


def stop_run(proc: subprocess.Popen, signum: int, *, cluster: bool = False, log_path: Path | None = None,
             log_since: int = 0, grace_s: float = 15.0, cluster_grace_s: float = 90.0) -> StopReport:
    """Stop the Snakemake process ``proc`` (a session leader) and every process of its session.

    ``cluster``: Snakemake's executor submits jobs to SLURM; it gets up to ``cluster_grace_s`` to cancel
    them itself before its session is ended, then the job ids of ``log_path`` still known to SLURM are
    cancelled here (``log_since``: where this run's part of the log begins, in bytes). Returns a :class:`StopReport`; no process of the session is left unless the report
    says so (``left``).
    """
    sid = proc.pid
    report = StopReport(signal.Signals(signum).name)
    seen: set[int] = set(session_members(sid))
    if proc.poll() is None:
        try:
            os.kill(proc.pid, signal.SIGINT)
        except ProcessLookupError:
            pass
    if cluster:  # the executor cancels its jobs (scancel runs in this session): let it finish
        t0 = time.monotonic()
        while proc.poll() is None and time.monotonic() - t0 < cluster_grace_s:
            seen.update(session_members(sid))
            time.sleep(0.2)
    else:
        time.sleep(0.3)
    t0 = time.monotonic()
    while time.monotonic() - t0 < grace_s:
        members = session_members(sid)
        seen.update(members)
        others = [p for p in members if p != proc.pid]
        if not others and proc.poll() is not None:
            break
        _terminate_frozen(others)
        time.sleep(0.3)
    rest = session_members(sid)
    if rest:
        report.killed = rest
        _signal_all(rest, signal.SIGKILL)
    if proc.poll() is None:
        try:
            proc.wait(10)
        except subprocess.TimeoutExpired:
            pass
    t0 = time.monotonic()
    while session_members(sid) and time.monotonic() - t0 < 10:
        time.sleep(0.1)
    report.left = session_members(sid)
    report.stopped = sorted(seen)
    if cluster and log_path is not None:
        cancel_cluster_jobs(log_path, report, log_since)
    return report


# -- cluster jobs -------------------------------------------------------------------------------------------
_SUBMITTED = re.compile(r"has been submitted with SLURM jobid (\d+)")


def submitted_cluster_jobs(log_text: str) -> list[str]:
    """SLURM job ids that Snakemake's SLURM executor reported as submitted, in order, without repeats."""
    out: list[str] = []
    for m in _SUBMITTED.finditer(log_text):
        if m.group(1) not in out:
            out.append(m.group(1))
    return out


def cancel_cluster_jobs(log_path: Path, report: StopReport, since: int = 0) -> None:
    """Cancel the jobs of ``log_path`` (from byte ``since``) that SLURM still has queued or running."""
    try:
        text = Path(log_path).read_bytes()[since:].decode(errors="replace")
    except OSError as exc:
        report.cluster_left.append(("(all)", f"the run's log {log_path} cannot be read ({exc}); check squeue"))
        return
    ids = submitted_cluster_jobs(text)
    report.cluster_checked = len(ids)
    if not ids:
        return
    if not shutil.which("squeue") or not shutil.which("scancel"):
        report.cluster_left += [(j, "squeue/scancel not found on this host") for j in ids]
        return
    q = subprocess.run(["squeue", "-h", "-o", "%i %T", "-j", ",".join(ids)], capture_output=True, text=True)
    if q.returncode != 0 and "Invalid job id" not in q.stderr:
        report.cluster_left += [(j, f"squeue failed: {' '.join(q.stderr.split())[:200]}") for j in ids]
        return
    live = [ln.split()[0] for ln in q.stdout.splitlines()
            if ln.split() and ln.split()[0] in ids and ln.split()[1] not in ("COMPLETED", "CANCELLED", "FAILED")]
    if not live:
        return
    c = subprocess.run(["scancel", *live], capture_output=True, text=True)
    if c.returncode != 0:
        report.cluster_left += [(j, f"scancel failed: {' '.join(c.stderr.split())[:200]}") for j in live]
    else:
        report.cluster_cancelled += live


# -- Snakemake's incomplete marks ---------------------------------------------------------------------------
def _marked_path(rel: Path) -> str | None:
    """The output path a mark file under ``.snakemake/incomplete`` stands for (its name, base64)."""
    parts = list(rel.parts)
    text = "".join(p[1:] if p.startswith("@") else p for p in parts)
    try:
        return base64.urlsafe_b64decode(text.encode()).decode()
    except (ValueError, UnicodeDecodeError):
        return None


def settle_incomplete(layout: StudyLayout, workdir: str | Path = ".", also: tuple[Path, ...] = ()) -> list[Path]:
    """Remove Snakemake's incomplete marks of this study's outputs written after the mark (complete).

    Call only while holding the study's run lock (no job of the study is running). ``also``: further
    folders whose outputs this study's jobs write. Returns the outputs whose mark was removed.
    """
    workdir = Path(workdir).resolve()
    marks = workdir / ".snakemake" / "incomplete"
    if not marks.is_dir():
        return []
    roots = [(r if Path(r).is_absolute() else workdir / r).resolve() for r in (layout.root, *also)]
    settled = []
    for mark in sorted(p for p in marks.rglob("*") if p.is_file()):
        name = _marked_path(mark.relative_to(marks))
        if not name:
            continue
        out = Path(name) if Path(name).is_absolute() else workdir / name
        out = Path(os.path.normpath(out))
        if not any(out == r or r in out.parents for r in roots):
            continue  # another study's output: its own run decides
        try:
            written, started = out.stat().st_mtime_ns, mark.stat().st_mtime_ns
        except OSError:
            continue  # not written: the job is redone
        if written >= started:
            mark.unlink(missing_ok=True)
            settled.append(out)
    return settled



# -- around a run -------------------------------------------------------------------------------------------
def profile_submits(profile_dir: Path | None) -> bool:
    """Whether a Snakemake profile folder hands jobs to a cluster scheduler (its ``executor`` is not local)."""
    import yaml

    try:
        conf = yaml.safe_load((Path(profile_dir) / "config.yaml").read_text()) if profile_dir else {}
    except (OSError, yaml.YAMLError):
        return False
    return str((conf or {}).get("executor", "local")) not in ("local", "dryrun", "touch")


def after_stop(layout: StudyLayout, entries: list[dict], workdir: str | Path = ".", store: Path | None = None) -> str:
    """Leave a stopped study clean (call holding its run lock); one line saying what is finished and kept.

    ``store``: the shared store of solves the study's solve jobs write in (:mod:`.store`)."""
    # finished jobs whose end Snakemake did not register are kept
    settle_incomplete(layout, workdir, (store,) if store is not None else ())
    clear_interrupted(layout, workdir, store)
    from .casefolder import CaseFolder, SolveFolder

    done = sum(CaseFolder(layout.case_dir(e["case_id"])).has_metrics() for e in entries)
    solved = sum(SolveFolder(CaseFolder(layout.case_dir(e["case_id"])).solve_link).excitation(p).status_file.exists()
                 for e in entries for p in e["ports"])
    n_solves = sum(len(e["ports"]) for e in entries)
    return f"kept: {done} of {len(entries)} cases finished, {solved} of {n_solves} solver runs done"
