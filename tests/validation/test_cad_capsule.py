"""An implant capsule read from an STL file against the built-in box capsule of the same shape (coarse, 2.45 GHz).

A self-consistency check, not a comparison with an outside reference: the built-in box capsule is the
source of truth. An implant strip dipole (10 mm, 1 mm gap) in a 14 x 4 x 4 mm capsule (eps_r 3, tan
delta 0.01) 8 mm deep in a skin/muscle slab, under an external strip dipole 8 mm above the skin. The STL
is written in the test with numpy-stl from the very box the built-in capsule makes. Both scenes get the
same automatic mesh (checked), both ports are excited, and S11, S21, S22 must agree within 0.2 dB and the
peak 1 g / 10 g SAR within 2 % (the tolerances the project set for CAD parts). The engine fills a box
and a closed polyhedron by different code, so the difference measures only how the polyhedron is filled.
"""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "geometry"))
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "solver"))

from solver_scenes import write_case  # noqa: E402
from test_cad import box_triangles, write_stl  # noqa: E402

from bodysweep.geometry.primitives import Box, Polyhedron  # noqa: E402
from bodysweep.geometry.scene import Scene  # noqa: E402
from bodysweep.geometry.units import from_edge_units  # noqa: E402
from bodysweep.workflow.meshing.mesh import auto_mesh, check_mesh  # noqa: E402
from bodysweep.workflow.meshing.settings import settings_from_dict  # noqa: E402

pytestmark = [pytest.mark.solver, pytest.mark.validation]

F0 = 2.45e9
CAPSULE_MM = (14.0, 4.0, 4.0)
SOLVER = {"preset": "draft", "cells_per_wavelength": 8, "port_cells": 1, "max_growth_ratio": 2.0,
          "min_cells_per_layer": 1, "air_margin_wavelengths": 0.1, "n_band_points": 11, "threads": 1}
SAR = {"masses_kg": [0.001, 0.01], "max_air_fraction": 0.1}


def _scene(capsule: dict) -> dict:
    return {"phantom": {"type": "layered_slab", "size_x_mm": 60, "size_y_mm": 40,
                        "layers": [{"tissue": "skin_wet", "thickness_mm": 2}, {"tissue": "muscle", "thickness_mm": 18}]},
            "external": {"type": "dipole", "length_mm": 50, "feed_gap_mm": 2, "strip_width_mm": 2, "standoff_mm": 8},
            "implant": {"type": "dipole", "length_mm": 10, "feed_gap_mm": 1, "strip_width_mm": 1, "depth_mm": 8,
                        "capsule": {**capsule, "eps_r": 3.0, "loss_tangent": 0.01}}}


def _db(z) -> float:
    return 20 * np.log10(abs(complex(*z)))


def _run(case_dir: Path, model, plan) -> dict:
    from bodysweep.workflow.finish import finish_case
    from bodysweep.workflow.solver.run import solve_excitation

    write_case(case_dir, model, plan, F0, {**SOLVER, "excite_ports": [1, 2]}, SAR)
    for port in (1, 2):
        st = solve_excitation(case_dir, port, threads=1)
        assert st["status"] == "ok", st["reason"]
    m = finish_case(case_dir)
    assert m["status"] in ("ok", "warning"), m["reason"]
    return m


def test_stl_capsule_matches_box_capsule(tmp_path):
    h = np.asarray(CAPSULE_MM) / 2
    stl = write_stl(tmp_path / "capsule.stl", box_triangles(-h, h))
    box_model = Scene.from_dict(from_edge_units(_scene({"shape": "box", "size_mm": list(CAPSULE_MM)}))).build(F0)
    stl_model = Scene.from_dict(from_edge_units(_scene({"shape": "cad", "file": stl, "unit": "mm"}))).build(F0)
    assert any(isinstance(p, Box) and p.name == "implant_capsule" for p in box_model.primitives)
    assert any(isinstance(p, Polyhedron) and p.name == "implant_capsule" for p in stl_model.primitives)
    settings = settings_from_dict(from_edge_units(SOLVER))
    plan = auto_mesh(stl_model, settings)
    check_mesh(plan, stl_model, settings)
    ref_plan = auto_mesh(box_model, settings)
    for a in "xyz":  # the same mesh: the comparison sees only how each capsule is filled
        assert np.array_equal(plan.lines(a), ref_plan.lines(a)), a
    m_stl = _run(tmp_path / "stl", stl_model, plan)
    m_box = _run(tmp_path / "box", box_model, ref_plan)
    for key in ("S11", "S21", "S22"):
        print(f"{key}: stl {_db(m_stl[key]):.3f} dB, box {_db(m_box[key]):.3f} dB")
        assert abs(_db(m_stl[key]) - _db(m_box[key])) < 0.2, (key, _db(m_stl[key]), _db(m_box[key]))  # 0.2 dB
    for a, b in zip(m_stl["sar"], m_box["sar"]):
        assert a["mass_kg"] == b["mass_kg"]
        rel = abs(a["peak_W_per_kg_per_W"] / b["peak_W_per_kg_per_W"] - 1)
        print(f"peak SAR {a['mass_kg'] * 1e3:g} g: stl {a['peak_W_per_kg_per_W']:.5g}, box "
              f"{b['peak_W_per_kg_per_W']:.5g} W/kg per W ({rel:.2%})")
        assert rel < 0.02, (a["mass_kg"], a["peak_W_per_kg_per_W"], b["peak_W_per_kg_per_W"])  # 2 %
