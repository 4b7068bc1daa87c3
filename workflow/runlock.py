"""One run per study at a time, and the clean-up after a run that was killed.

``bodysweep run`` holds an exclusive lock on ``results/<study>/run.lock`` for as long as it and the
Snakemake process it starts are alive:

* The lock is an ``flock(2)`` on the open file. The kernel drops it when the last process holding the
  file open ends, however it ends (``SIGKILL``, power loss of a node excepted), so the lock itself is
  never stale. The file stays behind; its content (pid, host, start time, command, log) only says who
  held the lock last and names the other run in the refusal message.
* The Snakemake process inherits the locked file descriptor, so a Snakemake left running after its
  ``bodysweep run`` parent was killed alone still holds the lock.
* A ``snakemake`` started by hand on the same study (``snakemake --configfile STUDY``) does not take this
  lock; :func:`other_snakemake_runs` finds it among the live processes and the run is refused as well.

Once the lock is held no other run of the study is alive, so what an interrupted run left is stale and
:func:`clear_interrupted` removes it: Snakemake's lock files that cover only this study's files (after
``SIGKILL`` they stay in ``.snakemake/locks/`` and make every later run fail with "Directory cannot be
locked"), hidden ``.<name>.<random>.part<suffix>`` temporaries of :mod:`.atomic`, and the engine's scratch
folders ``excite_<p>/.engine_run``. Snakemake's ``--unlock`` is not used: it deletes every lock of the
working directory, also those of another study running there at the same time.
"""
from __future__ import annotations

import errno
import fcntl
import json
import os
import shutil
import socket
import sys
import time
from dataclasses import dataclass
from pathlib import Path

from .casefolder import SCRATCH_DIR, SolveFolder
from .layout import StudyLayout

LOCK_NAME = "run.lock"
#: environment variable naming the ``bodysweep run`` that started a Snakemake process
PARENT_ENV = "BODYSWEEP_RUN_PID"


class StudyBusy(RuntimeError):
    """Another run of the same study is alive; the message names it."""


def _describe(info: dict) -> str:
    if not info:
        return "another bodysweep run (no details recorded)"
    parts = [f"pid {info.get('pid')}"]
    if info.get("host"):
        parts.append(f"on {info['host']}")
    if info.get("started"):
        parts.append(f"started {info['started']}")
    text = "another bodysweep run (" + ", ".join(parts) + ")"
    if info.get("log"):
        text += f", log {info['log']}"
    return text


@dataclass
class StudyLock:
    """The exclusive run lock of one study (a context manager).

    Parameters
    ----------
    layout : StudyLayout
        The study's output tree; the lock file is ``layout.root / "run.lock"``.
    info : dict
        What to record in the lock file besides pid, host and start time (e.g. ``{"log": ...}``).
    """

    layout: StudyLayout
    info: dict | None = None
    fd: int | None = None

    @property
    def path(self) -> Path:
        return self.layout.root / LOCK_NAME

    def acquire(self) -> "StudyLock":
        """Take the lock without waiting; raise :class:`StudyBusy` naming the holder if it is taken."""
        self.layout.root.mkdir(parents=True, exist_ok=True)
        fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o666)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as exc:
            os.close(fd)
            if exc.errno not in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
                raise
            info = read_lock_info(self.path)
            holder = _describe(info)
            if info.get("pid") and not _alive(int(info["pid"])):
                # the bodysweep process ended alone; its Snakemake (which holds the lock too) goes on
                pids = other_snakemake_runs(self.layout)
                holder += f", which has ended; its snakemake (pid {', '.join(map(str, pids)) or '?'}) is still running"
            raise StudyBusy(f"study {self.layout.root.name!r} is being run by {holder}; "
                            f"wait for it to end or stop it (results folder {self.layout.root})") from None
        record = {"pid": os.getpid(), "host": socket.gethostname(),
                  "started": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
                  "command": " ".join(sys.argv), **(self.info or {})}
        # a refused run reads this record without the lock: between truncate and write it finds it empty
        # and then names the holder without details
        os.ftruncate(fd, 0)
        os.pwrite(fd, (json.dumps(record, sort_keys=True) + "\n").encode(), 0)
        self.fd = fd
        return self

    def release(self) -> None:
        """Close this process's descriptor. No ``LOCK_UN``: that would free the lock also for a child
        sharing the open file description (a Snakemake still alive); the kernel frees it with the last one."""
        if self.fd is not None:
            os.close(self.fd)
            self.fd = None

    def __enter__(self) -> "StudyLock":
        return self.acquire() if self.fd is None else self

    def __exit__(self, *exc) -> None:
        self.release()


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def read_lock_info(path: Path) -> dict:
    """The record of the last holder of a lock file (empty when missing or unreadable)."""
    try:
        return json.loads(Path(path).read_text() or "{}")
    except (OSError, ValueError):
        return {}


# -- Snakemake processes ---------------------------------------------------------------------------------
def _proc_args(pid: int) -> list[str]:
    try:
        raw = Path(f"/proc/{pid}/cmdline").read_bytes()
    except OSError:
        return []
    return [a.decode(errors="replace") for a in raw.split(b"\0") if a]


def _is_snakemake(args: list[str]) -> bool:
    if not args:
        return False
    if Path(args[0]).name.startswith("snakemake"):
        return True
    return any(a == "-m" and b == "snakemake" for a, b in zip(args, args[1:])) or \
        (len(args) > 1 and Path(args[1]).name == "snakemake")


def _option_values(args: list[str], name: str) -> list[str]:
    """Values given to a long option (``--name v1 v2 ...`` or ``--name=v``), up to the next option."""
    out: list[str] = []
    for k, a in enumerate(args):
        if a == name:
            for b in args[k + 1:]:
                if b.startswith("-"):
                    break
                out.append(b)
        elif a.startswith(name + "="):
            out.append(a.split("=", 1)[1])
    return out


def _study_root_of(args: list[str], cwd: Path) -> Path | None:
    """``<results_dir>/<study>`` a Snakemake command line works on, resolved (None if not a study run)."""
    import yaml

    workdir = Path(next(iter(_option_values(args, "--directory") + _option_values(args, "-d")), cwd))
    workdir = workdir if workdir.is_absolute() else cwd / workdir
    config = dict(v.split("=", 1) for v in _option_values(args, "--config") if "=" in v)
    files = _option_values(args, "--configfile")
    given = config.get("study_file") or (files[-1] if files else None)
    if not given:
        return None
    study_file = Path(given)
    study_file = study_file if study_file.is_absolute() else cwd / study_file
    name = config.get("study_name")  # given by `bodysweep run`
    if not name:
        try:
            name = yaml.safe_load(study_file.read_text()).get("study")
        except Exception:
            return None
    results = Path(config.get("results_dir", "results"))
    results = results if results.is_absolute() else workdir / results
    return (results / str(name)).resolve()


#: Snakemake options of invocations that solve nothing (dry runs, e.g. ``pipeline.scheduled_jobs``)
_NOT_A_RUN = ("--unlock", "--dry-run", "--dryrun", "-n", "--summary", "--detailed-summary", "--list-rules")


def other_snakemake_runs(layout: StudyLayout, exclude: tuple[int, ...] = ()) -> list[int]:
    """Pids of live Snakemake processes (other than ``exclude`` and this one) working on this study.

    Linux only (reads ``/proc``); elsewhere the list is empty.
    """
    root = layout.root.resolve()
    found = []
    proc = Path("/proc")
    if not proc.is_dir():
        return []
    for d in proc.iterdir():
        if not d.name.isdigit():
            continue
        pid = int(d.name)
        if pid == os.getpid() or pid in exclude:
            continue
        args = _proc_args(pid)
        if not _is_snakemake(args) or any(a in _NOT_A_RUN for a in args):
            continue
        try:
            cwd = Path(os.readlink(d / "cwd"))
        except OSError:
            continue
        if _study_root_of(args, cwd) == root:
            found.append(pid)
    return sorted(found)


def started_by(pid: int) -> int | None:
    """The pid of the ``bodysweep run`` that started process ``pid`` (from its environment), else None."""
    try:
        env = Path(f"/proc/{pid}/environ").read_bytes().split(b"\0")
    except OSError:
        return None
    for item in env:
        if item.startswith(PARENT_ENV.encode() + b"="):
            try:
                return int(item.split(b"=", 1)[1])
            except ValueError:
                return None
    return None


def describe_snakemake(pids: list[int]) -> str:
    """Who runs the study: ``snakemake (pid N) started by bodysweep run (pid M, ...)`` or ``... outside bodysweep``."""
    parts = []
    for pid in pids:
        parent = started_by(pid)
        if parent is None:
            parts.append(f"snakemake (pid {pid}) started outside bodysweep")
        else:
            state = "still running" if _alive(parent) else "which has ended"
            parts.append(f"snakemake (pid {pid}) started by bodysweep run (pid {parent}, {state})")
    return " and ".join(parts)


# -- after an interrupted run -----------------------------------------------------------------------------
def _inside(path: Path, root: Path) -> bool:
    try:
        path.relative_to(root)
        return True
    except ValueError:
        return False


def stale_snakemake_locks(layout: StudyLayout, workdir: str | Path = ".", store: Path | None = None) -> list[Path]:
    """Snakemake lock files in ``<workdir>/.snakemake/locks`` that list only files of this study (and of
    the shared store of solves ``store``, at least one file being the study's own)."""
    workdir = Path(workdir).resolve()
    root = (layout.root if layout.root.is_absolute() else workdir / layout.root).resolve()
    extra = [(Path(store) if Path(store).is_absolute() else workdir / store).resolve()] if store is not None else []
    out = []
    for f in sorted((workdir / ".snakemake" / "locks").glob("*.lock")):
        try:
            keys = [k.strip() for k in f.read_text().splitlines() if k.strip()]
        except OSError:
            continue
        paths = [Path(k) if Path(k).is_absolute() else workdir / k for k in keys]
        paths = [Path(os.path.normpath(p)) for p in paths]
        if (paths and all(any(_inside(p, r) for r in [root, *extra]) for p in paths)
                and any(_inside(p, root) for p in paths)):
            out.append(f)
    return out


def stale_temporaries(layout: StudyLayout) -> list[Path]:
    """Leftover atomic-write temporaries and engine scratch folders below the study's folder."""
    if not layout.root.is_dir():
        return []
    tmp = [p for p in layout.root.rglob(".*.part*") if p.is_file() and SCRATCH_DIR not in p.parts]
    scratch = ([d for c in sorted(layout.cases_dir.iterdir()) for d in SolveFolder(c).scratch_dirs() if d.name == SCRATCH_DIR]
               if layout.cases_dir.is_dir() else [])
    return sorted(tmp) + scratch


def clear_interrupted(layout: StudyLayout, workdir: str | Path = ".", store: Path | None = None) -> dict[str, int]:
    """Remove what a killed run of this study left (call only while holding its :class:`StudyLock`).

    Returns
    -------
    dict
        ``{"snakemake_locks": n, "temporaries": n}``: how many lock files and temporaries (files or
        scratch folders) were removed.
    """
    locks = stale_snakemake_locks(layout, workdir, store)
    for f in locks:
        f.unlink(missing_ok=True)
    temps = stale_temporaries(layout)
    for p in temps:
        if p.is_dir():
            shutil.rmtree(p, ignore_errors=True)
        else:
            p.unlink(missing_ok=True)
    n_solves = 0
    if store is not None and layout.cases_dir.is_dir():  # the study's solves that no job holds now
        from .store import clear_solve_leftovers

        for d in sorted({p.resolve() for p in layout.cases_dir.glob("*/solve") if p.is_dir()}):
            n_solves += clear_solve_leftovers(d)
    return {"snakemake_locks": len(locks), "temporaries": len(temps) + n_solves}
