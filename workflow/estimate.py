"""Mesh and cost estimate of one case or one solve (no solver run, no openEMS import).

The one place where a case becomes a :class:`~bodysweep.workflow.meshing.cost.CostEstimate`: ``plan`` and
``run`` (budget checks, :mod:`bodysweep.workflow.cost_cache`) call :func:`case_estimate`, which takes a
solve's stored mesh (``mesh.json``, :mod:`bodysweep.workflow.meshrecord`) when the store has a valid one;
the cluster job sizing (:mod:`bodysweep.workflow.cluster`) and the scene step call :func:`solve_estimate`,
which reads the stored mesh or meshes once and stores it.
"""
from __future__ import annotations

from dataclasses import replace
from pathlib import Path

from .meshing.cost import CostEstimate


def _with_disk(case: dict, est: CostEstimate) -> CostEstimate:
    from .budget import case_disk_estimate

    disk = case_disk_estimate(case, float(est.cells))
    return replace(est, disk_bytes=float(disk["disk_B"]), scratch_bytes=float(disk["scratch_B"]))


def case_estimate(case: dict, store: str | Path | None = None) -> CostEstimate:
    """Mesh the case's scene at its frequency and estimate its cost, with the disk it will need.

    ``store``: the store of solves; when the case's solve folder there holds a valid stored mesh, its
    estimate is taken instead of meshing again (nothing is written).

    Raises whatever the scene builders or the mesher raise for a case they refuse (``ValueError`` ...).
    """
    if store is not None and case.get("solve_id"):
        from .casefolder import SolveFolder
        from .meshrecord import read_stored

        got = read_stored(SolveFolder(Path(store) / case["solve_id"]), case)
        if got is not None:
            return _with_disk(case, got[1])
    from bodysweep.geometry.scene import Scene

    from .solver.backend import get_backend
    from .meshing.settings import settings_from_dict

    backend = get_backend()
    model = Scene.from_dict(case["scene"]).build(float(case["frequency_Hz"]))
    settings = settings_from_dict(case.get("solver"))
    return _with_disk(case, backend.estimate(backend.mesh(model, settings), model, settings))


def solve_estimate(solve_dir: str | Path, model=None) -> CostEstimate:
    """The cost estimate of a prepared solve folder (or case folder) from its stored mesh, meshing and
    storing it first when no stage did (``model``: the built scene, if the caller has it).

    Raises ``ValueError`` for a scene the mesher refuses (the refusal is stored too).
    """
    from .meshrecord import stored_mesh
    from .solver.backend import get_backend

    backend = get_backend()
    return stored_mesh(solve_dir, backend.mesh, backend.estimate, model=model)[1]
