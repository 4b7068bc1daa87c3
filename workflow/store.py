"""The shared store of solves: one folder per solve identity, referenced by the cases of any study.

``<store>/<solve_id>/``
    ``solve.json``      what the solve identity is the hash of (scene, frequency, solver settings, ports,
                        versions) plus ``solve_id``; written once, by the first study that needs it
    ``scene.json``, ``preview.png``    the built scene at the case frequency and its preview
    ``excite_<p>/``     ``signals.h5``, ``fields_raw.h5`` (port 1), ``solver.log``, ``status.json`` and
                        ``outcome.json`` (a copy of the status that Snakemake never removes)
    ``logs/``           the scene and solve jobs' logs
    ``.lock``           ``flock`` taken by a solve job for the whole solve (one writer at a time)
``<store>/_refs/<key>.json``
    one file per study folder that refers to the store: ``{"study_root": absolute path}``; the solves a
    study refers to are those of its current ``plan.json``

The store is ``<results_dir>/_solves`` unless ``--solve-store`` or the environment variable
``BODYSWEEP_SOLVE_STORE`` names another folder (for example one on a cluster's shared file system).
Several studies may run at once on one store: a solve job holds the solve folder's lock while it
solves, and a job that finds a finished solve under the lock (written meanwhile by another study's
run, or kept in ``outcome.json`` after Snakemake removed ``status.json`` to rerun the job) takes it
instead of solving again. Every file is renamed into place complete (:mod:`.atomic`).
"""
from __future__ import annotations

import contextlib
import errno
import fcntl
import hashlib
import json
import os
import re
import shutil
from pathlib import Path
from typing import Iterable, Iterator

from .atomic import json_text, write_if_changed
from .casefolder import SCRATCH_DIR, SOLVE_FILE, SolveFolder, read_json
from .layout import DEFAULT_STORE_NAME, StudyLayout

#: environment variable naming the store folder (overridden by ``--solve-store``)
STORE_ENV = "BODYSWEEP_SOLVE_STORE"
REFS = "_refs"
_ID = re.compile(r"^[0-9a-f]{12}$")


def store_root(results_dir: str | os.PathLike = "results", given: str | os.PathLike | None = None) -> Path:
    """The store folder: ``given``, else ``$BODYSWEEP_SOLVE_STORE``, else ``<results_dir>/_solves``."""
    if given:
        return Path(given)
    env = os.environ.get(STORE_ENV)
    if env:
        return Path(env)
    return Path(results_dir) / DEFAULT_STORE_NAME


def solve_record(case: dict) -> dict:
    """The ``solve.json`` content of a case (``case.json`` content with its ``solve_id``).

    The scene keeps the ``file`` of its CAD parts, which the solve id leaves out (it holds their content
    hash): the scene step reads the files from there.
    """
    from .study.cases import solve_content

    content = solve_content(case["scene"], case["frequency_Hz"], case["solver"], case["sar"],
                            case.get("excite_ports", [1]), case["versions"])
    return {**content, "scene": case["scene"], "solve_id": case["solve_id"]}


def write_solve_record(root: Path, case: dict) -> bool:
    """Write ``<root>/<solve_id>/solve.json`` if missing or different; True if written."""
    return SolveFolder(Path(root) / case["solve_id"]).write_record(solve_record(case))


def _ref_path(root: Path, study_root: Path) -> Path:
    key = hashlib.sha256(str(Path(study_root).resolve()).encode()).hexdigest()[:16]
    return Path(root) / REFS / f"{key}.json"


def register_study(root: Path, study_root: Path) -> None:
    """Record that the study folder ``study_root`` refers to solves of the store."""
    write_if_changed(_ref_path(root, study_root), json_text({"study_root": str(Path(study_root).resolve())}))


def _plan_solve_ids(study_root: Path) -> set[str] | None:
    plan = read_json(StudyLayout(Path(study_root)).plan_file)
    if plan is None:
        return None
    return {e["solve_id"] for e in plan.get("cases", []) if e.get("solve_id")}


def references(root: Path) -> tuple[dict[str, list[str]], list[Path]]:
    """``({solve_id: [study folder, ...]}, [stale reference files])`` of the store.

    A reference is stale when its study folder has no ``plan.json`` any more (the study was removed).
    """
    refs: dict[str, list[str]] = {}
    stale = []
    for p in sorted((Path(root) / REFS).glob("*.json")):
        try:
            study_root = json.loads(p.read_text())["study_root"]
        except (ValueError, KeyError, OSError):
            stale.append(p)
            continue
        ids = _plan_solve_ids(Path(study_root))
        if ids is None:
            stale.append(p)
            continue
        for i in ids:
            refs.setdefault(i, []).append(study_root)
    return refs, stale


def solve_ids(root: Path) -> list[str]:
    """Ids of the solve folders in the store."""
    r = Path(root)
    return sorted(p.name for p in r.iterdir() if p.is_dir() and _ID.match(p.name)) if r.is_dir() else []


def folder_bytes(path: Path) -> int:
    return sum(f.stat().st_size for f in Path(path).rglob("*") if f.is_file() and not f.is_symlink())


@contextlib.contextmanager
def solve_lock(solve_dir: Path, wait: bool = True) -> Iterator[bool]:
    """Hold the solve folder's ``flock`` (yields False without waiting if ``wait`` is off and it is held)."""
    solve_dir = Path(solve_dir)
    solve_dir.mkdir(parents=True, exist_ok=True)
    fd = os.open(SolveFolder(solve_dir).lock_file, os.O_RDWR | os.O_CREAT, 0o666)
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | (0 if wait else fcntl.LOCK_NB))
        except OSError as exc:
            if exc.errno in (errno.EWOULDBLOCK, errno.EAGAIN):
                yield False
                return
            raise
        yield True
    finally:
        os.close(fd)


def kept_outcome(solve_dir: Path, port: int) -> dict | None:
    """A finished, successful excitation of ``port`` already in the store (its status), else None.

    The status file when present and ok; otherwise ``outcome.json`` when ok and the files it describes
    are all present (Snakemake removes a job's output, ``status.json``, before it reruns the job).
    """
    exc = SolveFolder(solve_dir).excitation(port)
    for st in (exc.read_status(), exc.read_outcome()):
        if st is not None and st.get("status") == "ok" and not exc.missing_results():
            return st
    return None


def keep_outcome(solve_dir: Path, port: int, status: dict) -> None:
    """Copy an excitation's status to ``outcome.json`` (after ``status.json`` is in place)."""
    SolveFolder(solve_dir).excitation(port).keep_outcome(status)


def solve_state(solve_dir: Path, ports: Iterable[int]) -> str:
    """``solved`` (every port has a status, ok or failed, or a kept outcome), else ``missing``."""
    d = SolveFolder(solve_dir)
    for p in ports:
        if d.excitation(p).read_status() is None and kept_outcome(d.dir, p) is None:
            return "missing"
    return "solved"


def reset_failed_solve(solve_dir: Path, ports: Iterable[int]) -> bool:
    """Remove the failed excitations (and a failed scene) of a solve so that the next run solves them again."""
    d = SolveFolder(solve_dir)
    done = False
    with solve_lock(d.dir):
        sc = d.read_scene()
        if sc is not None and sc.get("status") == "failed":
            d.remove_scene()
            done = True
        for p in ports:
            exc = d.excitation(p)
            st = exc.read_status() or exc.read_outcome()
            if st is not None and st.get("status") != "ok":
                exc.remove_status()
                done = True
    return done


def verify_solve(root: Path, solve_id: str, ports: Iterable[int]) -> list[str]:
    """Problems of one stored solve: ``solve.json`` hashing to its folder name, scene, excitation files."""
    from .study.cases import scene_identity
    from .study.identity import content2case_id

    folder = SolveFolder(Path(root) / solve_id)
    where = f"solve {solve_id}"
    if not folder.dir.is_dir():
        return [f"{where}: folder missing in the store {root}"]
    rec = folder.read_record()
    if rec is None:
        return [f"{where}: {SOLVE_FILE} missing or unreadable"]
    out = []
    content = {k: v for k, v in rec.items() if k != "solve_id"}
    if isinstance(content.get("scene"), dict):
        content["scene"] = scene_identity(content["scene"])  # CAD parts by their hash, not their file
    if content2case_id(content) != solve_id or rec.get("solve_id") != solve_id:
        out.append(f"{where}: {SOLVE_FILE} hashes to {content2case_id(content)}, not to its folder name")
    for f in folder.built_files():
        if not f.exists():
            out.append(f"{where}: {f.name} missing")
    for p in ports:
        exc = folder.excitation(p)
        st = exc.read_status()
        if st is None:
            out.append(f"{where}: {exc.label} missing")
            continue
        if st.get("status") == "ok":
            out += [f"{where}: status ok but {exc.dir.name}/{f} missing" for f in exc.missing_results()]
    return out


def clear_solve_leftovers(solve_dir: Path) -> int:
    """Remove a killed job's temporaries and engine scratch in a solve folder no job holds; how many."""
    d = Path(solve_dir)
    with solve_lock(d, wait=False) as got:
        if not got:
            return 0
        found = [p for p in d.rglob(".*.part*") if p.is_file() and SCRATCH_DIR not in str(p)]
        found += SolveFolder(d).scratch_dirs()
        for p in found:
            if p.is_dir():
                shutil.rmtree(p, ignore_errors=True)
            else:
                p.unlink(missing_ok=True)
    return len(found)


def remove_solve(root: Path, solve_id: str) -> bool:
    """Remove one solve folder unless a job holds its lock; True if removed.

    The folder is renamed away under the lock first, so no reader ever sees it half removed.
    """
    d = Path(root) / solve_id
    if not d.is_dir():
        return False
    with solve_lock(d, wait=False) as got:
        if not got:
            return False
        gone = Path(root) / f".removing.{solve_id}.{os.getpid()}"
        os.replace(d, gone)
    shutil.rmtree(gone, ignore_errors=True)
    return True
