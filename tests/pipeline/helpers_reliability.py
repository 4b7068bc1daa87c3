"""Shared helpers of the reliability tests: studies derived from tiny.yaml, `bodysweep run` as a subprocess,
and readers that open every result file with an outside library."""
from __future__ import annotations

import hashlib
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import yaml

TINY = Path(__file__).parent / "data" / "tiny.yaml"


def tiny_study(path: Path, name: str, depths=(6, 9), **solver) -> Path:
    """tiny.yaml under another study name with the given implant depths (one case per depth)."""
    d = yaml.safe_load(TINY.read_text())
    d["study"] = name
    d["sweep"]["blocks"] = [{"grid": {"depth": list(depths)}}]
    d["solver"].update(solver)
    path.write_text(yaml.safe_dump(d, sort_keys=False))
    return path


def bodysweep_cmd(*args: str) -> list[str]:
    return [sys.executable, "-m", "bodysweep.workflow.cli", *args]


def start_run(study: Path, cwd: Path, *extra: str) -> subprocess.Popen:
    """`bodysweep run STUDY` in its own process group (so that os.killpg reaches every job)."""
    return subprocess.Popen(bodysweep_cmd("run", str(study), *extra), cwd=cwd, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, start_new_session=True)


def run(args: list[str], cwd: Path, timeout: float = 300) -> subprocess.CompletedProcess:
    return subprocess.run(bodysweep_cmd(*args), cwd=cwd, capture_output=True, text=True, timeout=timeout)


def wait_for(cond, timeout: float, what: str, poll: float = 0.2, proc: subprocess.Popen | None = None):
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        v = cond()
        if v:
            return v
        if proc is not None and proc.poll() is not None:
            out, err = proc.communicate()
            raise AssertionError(f"run ended (exit {proc.returncode}) before {what}:\n{out[-2000:]}\n{err[-2000:]}")
        time.sleep(poll)
    raise AssertionError(f"timed out after {timeout} s waiting for {what}")


def group_alive(pgid: int) -> list[int]:
    """Pids still alive in process group ``pgid`` (zombies not counted)."""
    alive = []
    for d in Path("/proc").iterdir():
        if not d.name.isdigit():
            continue
        try:
            stat = (d / "stat").read_text()
        except OSError:
            continue
        fields = stat.rsplit(")", 1)[1].split()
        if int(fields[2]) == pgid and fields[0] != "Z":
            alive.append(int(d.name))
    return alive


def _stat_fields(pid: int) -> list[str] | None:
    try:
        return Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    except OSError:
        return None


def descendants(pid: int) -> list[int]:
    """Live pids below ``pid`` in the parent tree (from /proc/<pid>/stat, field ppid)."""
    parent = {}
    for d in Path("/proc").iterdir():
        if d.name.isdigit():
            f = _stat_fields(int(d.name))
            if f and f[0] != "Z":
                parent[int(d.name)] = int(f[1])
    out, todo = [], [pid]
    while todo:
        p = todo.pop()
        kids = [c for c, pp in parent.items() if pp == p]
        out += kids
        todo += kids
    return sorted(out)


def session_alive(sid: int) -> list[int]:
    """Live pids (zombies not counted) of session ``sid``."""
    out = []
    for d in Path("/proc").iterdir():
        if d.name.isdigit():
            f = _stat_fields(int(d.name))
            if f and f[0] != "Z" and int(f[3]) == sid:
                out.append(int(d.name))
    return out


def kill_group(proc: subprocess.Popen, timeout: float = 20) -> None:
    """SIGKILL everything of a `bodysweep run`: the sessions its children lead (`run` starts Snakemake in
    a session of its own) and its process group; wait until none of it is alive."""
    pgid = os.getpgid(proc.pid)
    own = os.getsid(0)
    sessions = {int(f[3]) for f in map(_stat_fields, descendants(proc.pid)) if f} - {own}
    for sid in sessions:
        for pid in session_alive(sid):
            try:
                os.kill(pid, signal.SIGKILL)
            except ProcessLookupError:
                pass
    os.killpg(pgid, signal.SIGKILL)
    proc.wait(timeout=timeout)
    wait_for(lambda: not group_alive(pgid) and not any(session_alive(s) for s in sessions), timeout,
             f"process group {pgid} and sessions {sorted(sessions)} to end")


def final_files(root: Path) -> list[Path]:
    """Files under their final names: no path component below ``root`` is hidden (temporaries and scratch)."""
    return sorted(p for p in root.rglob("*") if p.is_file()
                  and not any(part.startswith(".") for part in p.relative_to(root).parts))


def open_every_file(root: Path) -> dict[str, int]:
    """Open every final-named result file with the library that owns its format; raise if one is unreadable.

    JSON with the standard library (json.loads), HDF5 with h5py (every dataset read in full), Touchstone
    with scikit-rf, Parquet with pandas/pyarrow, CSV with pandas. Returns counts per suffix.
    """
    import h5py
    import pandas as pd
    import skrf

    counts: dict[str, int] = {}
    for p in final_files(root):
        s = p.suffix
        if s == ".json":
            json.loads(p.read_text())
        elif s == ".h5":
            with h5py.File(p, "r") as h5:
                h5.visititems(lambda name, obj: obj[()] if isinstance(obj, h5py.Dataset) else None)
        elif s in (".s1p", ".s2p"):
            assert skrf.Network(str(p)).s.size > 0, p
        elif s == ".parquet":
            pd.read_parquet(p)
        elif s == ".csv":
            pd.read_csv(p)
        else:
            continue
        counts[s] = counts.get(s, 0) + 1
    return counts


def fingerprint(folder: Path) -> dict[str, tuple[int, str]]:
    """``{relative path: (mtime_ns, sha256)}`` of every file below ``folder``."""
    return {str(p.relative_to(folder)): (p.stat().st_mtime_ns, hashlib.sha256(p.read_bytes()).hexdigest())
            for p in sorted(folder.rglob("*")) if p.is_file()}


def plan_ids(root: Path) -> list[str]:
    return [e["case_id"] for e in json.loads((root / "plan.json").read_text())["cases"]]
