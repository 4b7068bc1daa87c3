"""The mesher on planar implant antennas: two cells across every gap between neighbouring turns.

Reference: common practice for FDTD meshes of printed traces (neighbouring traces merge on the grid otherwise).
"""
from __future__ import annotations

import numpy as np
import pytest

from bodysweep.geometry.primitives import Polygon
from bodysweep.geometry.scene import Scene
from bodysweep.workflow.meshing.mesh import auto_mesh
from bodysweep.workflow.meshing.settings import settings_from_dict

import sys, pathlib  # noqa: E401
sys.path.insert(0, str(pathlib.Path(__file__).parents[1] / "geometry"))
from test_planar import PLANARS, _scene  # noqa: E402


@pytest.mark.parametrize("kind", ["meander", "spiral"])
def test_mesh_puts_two_cells_across_every_gap_between_turns(kind):
    """Common practice: neighbouring traces stay apart on the FDTD grid only with >= 2 cells across the gap."""
    sc = Scene.from_edge_dict(_scene(PLANARS[kind]))
    model = sc.build(403e6)
    plan = auto_mesh(model, settings_from_dict({"preset": "draft"}))
    gap = 2e-3 - 0.5e-3 if kind == "meander" else 1.5e-3 - 0.5e-3
    el = sc.implant.element
    pts = np.concatenate([np.asarray(p.points) for p in sc.implant.build().primitives
                          if isinstance(p, Polygon) and "radiator" in p.name])
    for i, a in enumerate("xy"):
        lines = np.asarray(getattr(plan, f"lines_{a}"))
        inside = lines[(lines >= pts[:, i].min() - 1e-12) & (lines <= pts[:, i].max() + 1e-12)]
        assert np.max(np.diff(inside)) <= gap / 2 * (1 + 1e-6), (kind, a, el.type)
