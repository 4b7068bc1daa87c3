"""Mesh lines for a CAD part: on its bounding box and at its feed; a part thinner than a cell is refused."""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "geometry"))

from test_cad import strip_dipole_mm, write_stl  # noqa: E402

from bodysweep.geometry.scene import Scene  # noqa: E402
from bodysweep.workflow.solver.mesh import MeshRefused, auto_mesh, check_mesh  # noqa: E402
from bodysweep.workflow.solver.settings import settings_from_dict  # noqa: E402


def _model(tmp_path, thick_mm):
    f = write_stl(tmp_path / "d.stl", strip_dipole_mm(50, 2, 2, thick_mm))
    ext = {"type": "cad", "file": f, "unit": "mm", "feed_start_m": [-0.001, -0.001, 0.0],
           "feed_stop_m": [0.001, 0.001, 0.0], "feed_axis": "x", "standoff_m": 0.005}
    return Scene.from_dict({"phantom": {"type": "none"}, "external": ext}).build(2.45e9)


def test_lines_on_bounding_box_and_feed(tmp_path):
    model = _model(tmp_path, 1.0)
    settings = settings_from_dict({"preset": "draft"})
    plan = auto_mesh(model, settings)
    check_mesh(plan, model, settings)
    # analytic: tips at +-25 mm, feed gap ends at +-1 mm, strip edges at +-1 mm, faces at z = 5 and 6 mm
    for axis, values in (("x", (-0.025, -0.001, 0.001, 0.025)), ("y", (-0.001, 0.001)), ("z", (0.005, 0.006))):
        ln = plan.lines(axis)
        for v in values:
            assert np.min(np.abs(ln - v)) < 1e-12, (axis, v)


def test_part_thinner_than_a_cell_is_refused(tmp_path):
    model = _model(tmp_path, 0.035)  # a 35 um copper trace drawn as a solid
    settings = settings_from_dict({"preset": "draft", "min_cell_m": 0.5e-3})
    plan = auto_mesh(model, settings)
    with pytest.raises(MeshRefused, match=r"external_cad: the part is 0.035 mm thick along z.*min_cell_mm"):
        check_mesh(plan, model, settings)
