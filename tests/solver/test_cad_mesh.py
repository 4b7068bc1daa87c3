"""Mesh lines for a CAD part: on its bounding box and at its feed; a part thinner than a cell is refused."""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "geometry"))

from test_cad import strip_dipole_mm, write_stl  # noqa: E402

from bodysweep.geometry.scene import Scene  # noqa: E402
from bodysweep.workflow.meshing.mesh import MeshRefused, auto_mesh, check_mesh  # noqa: E402
from bodysweep.workflow.meshing.settings import settings_from_dict  # noqa: E402


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


def _capsule_model(tmp_path, wall_mm):
    from test_cad import box_triangles

    outer = box_triangles((-7, -3, -3), (7, 3, 3))
    inner = box_triangles((-7 + wall_mm, -3 + wall_mm, -3 + wall_mm), (7 - wall_mm, 3 - wall_mm, 3 - wall_mm))[:, ::-1]
    f = write_stl(tmp_path / "shell.stl", np.concatenate([outer, inner]))
    imp = {"type": "dipole", "length_m": 0.01, "feed_gap_m": 0.001, "strip_width_m": 0.001, "depth_m": 0.008,
           "capsule": {"shape": "cad", "file": f, "eps_r": 3.0}}
    ext = {"type": "dipole", "length_m": 0.05, "feed_gap_m": 0.002, "strip_width_m": 0.002, "standoff_m": 0.005}
    phantom = {"type": "layered_slab", "size_x_m": 0.05, "size_y_m": 0.04,
               "layers": [{"tissue": "muscle", "thickness_m": 0.02}]}
    return Scene.from_dict({"phantom": phantom, "external": ext, "implant": imp}).build(2.45e9)


def test_hollow_capsule_walls_get_lines(tmp_path):
    """1 mm walls of a 14 x 6 x 6 mm shell: lines on the inner faces, the wall spans a cell (analytic positions)."""
    model = _capsule_model(tmp_path, 1.0)
    settings = settings_from_dict({"preset": "draft"})
    plan = auto_mesh(model, settings)
    check_mesh(plan, model, settings)
    for axis, values in (("x", (-0.007, -0.006, 0.006, 0.007)), ("y", (-0.003, -0.002, 0.002, 0.003)),
                         ("z", (-0.011, -0.010, -0.006, -0.005))):
        ln = plan.lines(axis)
        for v in values:
            assert np.min(np.abs(ln - v)) < 1e-12, (axis, v)


def test_capsule_wall_thinner_than_a_cell_is_refused(tmp_path):
    """0.1 mm walls with 0.5 mm merge distance: the wall's two faces merge into one line and would vanish."""
    model = _capsule_model(tmp_path, 0.1)
    settings = settings_from_dict({"preset": "draft", "min_cell_m": 0.5e-3})
    plan = auto_mesh(model, settings)
    with pytest.raises(MeshRefused, match=r"implant_capsule: the 0.1 mm between its faces at x = -7 and -6.9 mm "
                                          r".*min_cell_mm \(now 0.5 mm\)"):
        check_mesh(plan, model, settings)
