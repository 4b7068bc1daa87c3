"""Round parts mesh where they are: a thick round-wire dipole meshes and runs (it was refused for sliver
cells made by false extents along the wire's own axis).

Reference for the expected mesh lines: the analytic extent of a flat-ended cylinder (no widening along
its own axis; see tests/geometry/test_extents.py).
"""
from __future__ import annotations

import json

import numpy as np
import pytest

from bodysweep.geometry.scene import Scene
from bodysweep.geometry.units import from_edge_units
from bodysweep.workflow.meshing.mesh import auto_mesh, check_mesh
from bodysweep.workflow.meshing.settings import settings_from_dict

F0 = 2.45e9
SCENE = {"phantom": {"type": "none"},
         "external": {"type": "dipole", "length_mm": 55.0, "feed_gap_mm": 2.0, "wire_radius_mm": 1.8, "axis": "x",
                      "position_mm": [0.0, 0.0], "standoff_mm": 10.0, "conductor": "pec"},
         "concentrators": [], "materials": [], "min_clearance_mm": 0.5}
SOLVER = {"preset": "standard", "cells_per_wavelength": 6, "air_margin_wavelengths": 0.1, "boundary": "mur",
          "end_criterion_dB": -30.0, "n_band_points": 11, "threads": 1}


def _scene():
    return Scene.from_dict(from_edge_units(SCENE))


def test_thick_wire_dipole_meshes_on_its_real_ends():
    model = _scene().build(F0)
    settings = settings_from_dict(SOLVER)
    plan = auto_mesh(model, settings)
    check_mesh(plan, model, settings)  # refused before: 0.2 mm slivers at -1.0 ... -0.8 mm
    x = plan.lines_x
    # analytic: conductor edges at the feed gap +-1 mm and the tips +-27.5 mm; the radius (1.8 mm) is no
    # extent along x, so no line at +-(1 - 1.8) = -+0.8 mm or +-(27.5 + 1.8) = +-29.3 mm
    for v in (-0.0275, -0.001, 0.001, 0.0275):
        assert np.min(np.abs(x - v)) < 1e-12, v
    for v in (-0.0293, -0.0008, 0.0008, 0.0293):
        assert np.min(np.abs(x - v)) > 1e-4, v
    # across the wire its radius is an extent: the standoff puts its lowest point at z = 10 mm, its axis at
    # 11.8 mm, its top at 13.6 mm (analytic)
    for v in (0.010, 0.0136):
        assert np.min(np.abs(plan.lines_z - v)) < 1e-12, v


@pytest.mark.solver
def test_thick_wire_dipole_runs(tmp_path):
    from bodysweep.workflow.finish import finish_case
    from bodysweep.workflow.solver.run import solve_excitation

    case = {"case_id": "thickwire", "label": "test", "study": "tests", "parameters": {}, "frequency_Hz": F0,
            "scene": _scene().to_dict(), "solver": SOLVER, "sar": {"masses_kg": [0.001]}, "versions": {}}
    (tmp_path / "case.json").write_text(json.dumps(case))
    st = solve_excitation(tmp_path, 1, threads=1)
    assert st["status"] == "ok" and st["decay_reached"], st["reason"]
    m = finish_case(tmp_path)
    assert m["status"] in ("ok", "warning"), m["reason"]
    s11 = complex(*m["S11"])
    assert np.isfinite(s11) and abs(s11) < 1.0  # a passive one-port reflects less than it receives
