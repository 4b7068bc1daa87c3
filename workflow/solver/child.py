"""The engine's child process for one run: start it, watch its console, say why it ended badly.

The engine changes the working directory and may call ``exit()`` on some errors, so every run is a
fresh interpreter (``python -m bodysweep.workflow.solver.run child ...``, see :mod:`.run`).
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
import time
from pathlib import Path

__all__ = ["CHILD_ERROR", "DIVERGED_RC", "WATCH_S", "start_child", "child_reason"]

CHILD_ERROR = "child_error.json"  # the child's own failure record in its work folder
WATCH_S = 2.0  # seconds between looks at the engine console for a diverged energy
DIVERGED_RC = "diverged"  # start_child's rc when it stopped the engine at a non-finite energy


def _one_line(text: str, limit: int = 500) -> str:
    return " ".join(str(text).split())[:limit]


def start_child(case_dir: Path, port: int, threads: int, work: Path, mode: str, timeout_s: float | None):
    """Run the child; stop it early when its console shows a non-finite field energy.

    Returns ``(rc, log_text)``; ``rc`` is None when the time limit stopped it. A diverged engine may
    go on with NaN fields up to ``max_timesteps`` (seen with 0.0.35); the console is read every
    :data:`WATCH_S` seconds and the child killed at the first NaN / infinite energy figure, which
    stays in the log for :func:`.health.judge_run` to report.
    """
    from .health import DIVERGED_LINE

    cmd = [sys.executable, "-m", "bodysweep.workflow.solver.run", "child", str(case_dir), "--port", str(port),
           "--threads", str(threads), "--work", str(work), "--mode", mode]
    log = work / "console.log"
    deadline = None if timeout_s is None else time.monotonic() + float(timeout_s)
    seen = 0
    with open(log, "wb") as fh:
        proc = subprocess.Popen(cmd, stdout=fh, stderr=subprocess.STDOUT,
                                env={**os.environ, "PYTHONUNBUFFERED": "1"})
        try:
            while True:
                try:
                    rc = proc.wait(timeout=WATCH_S)
                    break
                except subprocess.TimeoutExpired:
                    pass
                if deadline is not None and time.monotonic() > deadline:
                    proc.kill()
                    proc.wait()
                    rc = None
                    break
                with open(log, "rb") as rd:  # only the part written since the last look
                    rd.seek(max(0, seen - 200))
                    chunk = rd.read().decode(errors="replace")
                    seen = rd.tell()
                if DIVERGED_LINE.search(chunk):
                    proc.kill()
                    proc.wait()
                    rc = DIVERGED_RC
                    break
        finally:
            if proc.poll() is None:  # an exception in the parent: never leave the engine running
                proc.kill()
                proc.wait()
    return rc, log.read_text(errors="replace")


def child_reason(rc, work: Path, log_text: str, timeout_s) -> str | None:
    """The failure reason of a child run, or None if it ended cleanly."""
    err = work / CHILD_ERROR
    if err.exists():
        return json.loads(err.read_text())["reason"]
    if rc is None:
        return f"engine run exceeded the time limit of {timeout_s} s and was stopped"
    if rc == DIVERGED_RC:
        return None  # the energy trace in the log gives the reason (health.judge_run)
    if rc != 0:
        tail = [ln for ln in log_text.strip().splitlines() if ln.strip()][-3:]
        how = f"killed by signal {-rc}" if rc < 0 else f"exit code {rc}"
        return _one_line(f"engine process ended with {how}: {' | '.join(tail)}")
    return None
