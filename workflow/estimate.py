"""Mesh and cost estimate of one case from its ``case.json`` content (no solver run, no openEMS import).

The one place where a case becomes a :class:`~bodysweep.workflow.solver.cost.CostEstimate`: ``plan`` and
``run`` (budget checks, :mod:`bodysweep.workflow.cost_cache`) and the cluster job sizing
(:mod:`bodysweep.workflow.cluster`) all call :func:`case_estimate`.
"""
from __future__ import annotations

from dataclasses import replace

from .solver.cost import CostEstimate


def case_estimate(case: dict) -> CostEstimate:
    """Mesh the case's scene at its frequency and estimate its cost, with the disk it will need.

    Raises whatever the scene builders or the mesher raise for a case they refuse (``ValueError`` ...).
    """
    from bodysweep.geometry.scene import Scene

    from .budget import case_disk_estimate
    from .solver.backend import get_backend
    from .solver.settings import settings_from_dict

    backend = get_backend()
    model = Scene.from_dict(case["scene"]).build(float(case["frequency_Hz"]))
    settings = settings_from_dict(case.get("solver"))
    est = backend.estimate(backend.mesh(model, settings), model, settings)
    disk = case_disk_estimate(case, float(est.cells))
    return replace(est, disk_bytes=float(disk["disk_B"]), scratch_bytes=float(disk["scratch_B"]))
