"""The mesh of a solve, computed once and stored in its folder (``mesh.json``, :class:`.casefolder.SolveFolder`).

The mesh and cost estimate of a solve are a pure function of its inputs (scene, frequency, solver settings;
``solve.json``) and of the code that meshes and estimates. The first stage that needs them meshes and
stores them; every later one reads them back: the cluster sizing of the solve job (Snakemake's main
process, before the scene job on a cluster), the scene step (which has the built scene at hand), each
solve job's engine process and the engine-SAR run of port 1. The record::

    {"source": "<hash of the inputs that decide the mesh>", "code": "<hash of mesher and cost model>",
     "status": "ok", "mesh": MeshPlan.to_dict(), "estimate": CostEstimate.to_dict()}

or, for a scene the mesher refuses, ``"status": "failed"`` with ``"reason"`` (read back as the same
``ValueError``). A record whose ``source`` or ``code`` differs is stale and is computed again; a hand mesh
(``mesh_plan.json``) is not this module's business (the solve step prefers it).

The mesher and the cost model are handed in as functions, so that this module imports no backend (the
openEMS backend's engine process uses it as well as the solver-neutral :mod:`.estimate`).
"""
from __future__ import annotations

import functools
import hashlib
import json
from pathlib import Path
from typing import Callable

from .casefolder import SolveFolder
from .meshing.cost import CostEstimate
from .meshing.mesh import MeshPlan

#: the solver settings that do not change the mesh or its estimate (run-only, finish-only)
_NOT_MESH = ("threads", "n_band_points")


def mesh_source(inputs: dict) -> str:
    """Hash of what decides the mesh and its estimate: scene, frequency, solver settings (without the
    run-only ``threads`` and the finish-only ``n_band_points``)."""
    solver = {k: v for k, v in (inputs.get("solver") or {}).items() if k not in _NOT_MESH}
    text = json.dumps({"scene": inputs.get("scene"), "frequency_Hz": inputs.get("frequency_Hz"), "solver": solver},
                      sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode()).hexdigest()[:16]


@functools.lru_cache(maxsize=1)
def mesh_code() -> str:
    """Hash of the source files whose change alters a mesh or its estimate, and of the builders' version."""
    import bodysweep.geometry as geometry

    from .meshing import cost, mesh, mesh_fill, settings

    h = hashlib.sha256()
    for mod in (mesh, mesh_fill, cost, settings):
        h.update(Path(mod.__file__).read_bytes())
    h.update(str(geometry.BUILDER_VERSION).encode())
    return h.hexdigest()[:16]


def read_stored(folder: SolveFolder, inputs: dict) -> tuple[MeshPlan, CostEstimate] | None:
    """The stored mesh and estimate when the record is valid for these inputs and this code, else None.

    Raises ``ValueError`` with the mesher's reason when the stored record is a refusal.
    """
    rec = folder.read_mesh()
    if not isinstance(rec, dict) or rec.get("source") != mesh_source(inputs) or rec.get("code") != mesh_code():
        return None
    if rec.get("status") == "failed":
        raise ValueError(str(rec.get("reason") or "mesh refused"))
    try:
        return MeshPlan.from_dict(rec["mesh"]), CostEstimate.from_dict(rec["estimate"])
    except (KeyError, TypeError, ValueError):  # not a record of this code after all: mesh again
        return None


def _model(folder: SolveFolder, inputs: dict):
    """The built scene: ``scene.json`` when present and not a failure record, else built from the inputs."""
    from bodysweep.geometry.model import SceneModel

    d = folder.read_scene()
    if isinstance(d, dict) and d.get("status") != "failed" and "frequency_Hz" in d:
        return SceneModel.from_dict(d)
    from bodysweep.geometry.scene import Scene

    return Scene.from_dict(inputs["scene"]).build(float(inputs["frequency_Hz"]))


def stored_mesh(folder: SolveFolder | str | Path, mesh_fn: Callable, estimate_fn: Callable, model=None,
                inputs: dict | None = None, write: bool = True) -> tuple[MeshPlan, CostEstimate]:
    """The mesh and cost estimate of a solve: read from ``mesh.json``, else computed and stored.

    Parameters
    ----------
    folder : SolveFolder or path
        The solve folder (or a case folder run on its own).
    mesh_fn, estimate_fn : callable
        The backend's ``mesh(model, settings)`` and ``estimate(plan, model, settings)``.
    model : SceneModel, optional
        The built scene if the caller has it (else from ``scene.json`` or built from the inputs).
    inputs : dict, optional
        The folder's inputs (``solve.json`` / ``case.json`` content) if already read.
    write : bool
        Store a computed mesh (off for callers that must not write, e.g. ``plan``).

    Raises
    ------
    ValueError
        The mesher refuses the scene (also stored, and raised again on the next read).
    """
    folder = folder if isinstance(folder, SolveFolder) else SolveFolder(Path(folder))
    inputs = inputs if inputs is not None else folder.read_inputs()
    got = read_stored(folder, inputs)
    if got is not None:
        return got
    from .meshing.settings import settings_from_dict

    head = {"source": mesh_source(inputs), "code": mesh_code()}
    model = model if model is not None else _model(folder, inputs)
    settings = settings_from_dict(inputs.get("solver") or {})
    try:
        plan = mesh_fn(model, settings)
    except ValueError as exc:
        if write:
            folder.write_mesh({**head, "status": "failed", "reason": " ".join(str(exc).split())})
        raise
    est = estimate_fn(plan, model, settings)
    if write:
        folder.write_mesh({**head, "status": "ok", "mesh": plan.to_dict(), "estimate": est.to_dict()})
    return plan, est
