"""Cost estimates remembered per case, so that planning a study again does not mesh every case again.

The mesh and cost estimate of a case (:func:`bodysweep.workflow.estimate.case_estimate`) is a pure
function of the case's content, which its ``case_id`` identifies, and of the code that meshes and
estimates. The store is ``results/<study>/cost_estimates.json``::

    {"code": "<hash of the mesher / cost model / disk estimate source>",
     "cases": {"<case_id>": CostEstimate.to_dict(), ...}}

A change of that code (or of a case) gives other keys, so a stale estimate is never used. Missing estimates
are computed in worker processes when there are many of them (meshing is pure Python and numpy, one case
at a time per process).
"""
from __future__ import annotations

import hashlib
import json
import os
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path
from typing import Callable

from .atomic import write_text
from .layout import StudyLayout
from .meshing.cost import CostEstimate

FILE_NAME = StudyLayout(Path(".")).cost_file.name
#: below this many missing estimates the work is done in this process (a pool costs about half a second)
PARALLEL_FROM = 64


def code_signature() -> str:
    """Hash of the source files whose change alters an estimate (mesh, cost model, disk estimate, builders)."""
    from importlib.util import find_spec

    import bodysweep.geometry as geometry

    h = hashlib.sha256()
    for mod in ("meshing.mesh", "meshing.mesh_fill", "meshing.cost", "meshing.settings", "budget", "estimate"):
        # the files, found without running them (a warm plan need not import the mesher)
        h.update(Path(find_spec(f"bodysweep.workflow.{mod}").origin).read_bytes())
    h.update(str(geometry.BUILDER_VERSION).encode())
    return h.hexdigest()[:16]


def load(root: Path) -> dict[str, dict]:
    """The remembered estimates (``CostEstimate.to_dict()`` each) of a study folder that are valid for this
    code (empty if none)."""
    try:
        data = json.loads((Path(root) / FILE_NAME).read_text())
    except (OSError, ValueError):
        return {}
    if not isinstance(data, dict) or data.get("code") != code_signature() or not isinstance(data.get("cases"), dict):
        return {}
    return data["cases"]


def save(root: Path, estimates: dict[str, CostEstimate]) -> None:
    """Store exactly ``estimates`` (case_id -> estimate) in an existing study folder; nothing if it does not exist."""
    _write(Path(root), {k: v.to_dict() for k, v in estimates.items()})


def remember(root: Path, new: dict[str, CostEstimate]) -> None:
    """Add ``new`` to the study folder's store, keeping the entries already there that are valid for this code."""
    stored = load(root)
    stored.update({k: v.to_dict() for k, v in new.items()})
    _write(Path(root), stored)


def _write(root: Path, plain: dict[str, dict]) -> None:
    if not root.is_dir():
        return
    write_text(root / FILE_NAME, json.dumps({"code": code_signature(), "cases": plain}, sort_keys=True))


def _restore(est: dict) -> CostEstimate | None:
    """A remembered estimate, or None when the entry does not read as one (then it is computed again)."""
    try:
        return CostEstimate.from_dict(est)
    except (ValueError, TypeError, AttributeError):
        return None


def restore(case_ids: list[str], known: dict[str, dict]) -> dict[str, CostEstimate]:
    """The remembered estimates of ``case_ids`` that read back (the others are missing from the result)."""
    out: dict[str, CostEstimate] = {}
    for cid in case_ids:
        if cid in known and cid not in out:
            restored = _restore(known[cid])
            if restored is not None:
                out[cid] = restored
    return out


def estimates(dicts: list[dict], known: dict[str, dict], compute: Callable[[dict], CostEstimate],
              workers: int | None = None) -> dict[str, CostEstimate | Exception]:
    """Estimates of the cases ``dicts`` (case.json content): from ``known`` where present, else computed.

    Returns case_id -> estimate, or the exception raised for a case the mesher refuses.
    """
    out: dict[str, CostEstimate | Exception | None] = {}
    todo = []
    for d in dicts:
        cid = d["case_id"]
        restored = _restore(known[cid]) if cid in known else None
        if restored is not None:
            out[cid] = restored
        elif cid not in out:
            todo.append(d)
            out[cid] = None  # placeholder
    workers = workers or min(os.cpu_count() or 1, 8)
    if len(todo) >= PARALLEL_FROM and workers > 1:
        with ProcessPoolExecutor(max_workers=workers) as pool:
            results = list(pool.map(_safe_compute, [(compute, d) for d in todo], chunksize=16))
    else:
        results = [_safe_compute((compute, d)) for d in todo]
    for d, r in zip(todo, results):
        out[d["case_id"]] = r
    return out


def _safe_compute(arg):
    compute, d = arg
    try:
        return compute(d)
    except Exception as exc:  # a case the mesher refuses is reported per case, not as a crash
        return exc
