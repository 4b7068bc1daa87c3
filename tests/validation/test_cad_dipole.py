"""A dipole read from an STL file against the same dipole built from box primitives (coarse mesh, 2.45 GHz),
and a round-wire dipole (built-in cylinders) against its STL twin (faceted prisms).

Two rectangular arms (50 mm tip to tip, 2 mm feed gap, 2 mm wide, 1 mm thick) 8 mm above a skin/muscle
slab. The STL is written in the test with numpy-stl from the same dimensions; the reference replaces the
part's polyhedron by two boxes with the very same corner coordinates, on the same mesh and port. The
two must give the same S11 within 0.2 dB and the same peak 1 g / 10 g SAR within 2 % (tolerances of the
project's acceptance criteria for a CAD part; the engine fills both by the same edge rule, so the
difference measures only how the polyhedron is filled).

The round wire (radius 1 mm, 2 mm cells at the wire) has mesh lines on its surface; the engine decided a node
there by the rounding of its distance to the axis (standoff + radius - radius came out 1e-18 m beyond the
radius), so the wire's underside was lost and S11 came out 4.4 dB off its STL twin. Same tolerances.
"""
from __future__ import annotations

import dataclasses
import json
import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "geometry"))
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "solver"))

from test_cad import strip_dipole_mm, write_stl  # noqa: E402

from bodysweep.geometry.primitives import Box, Cylinder, Polyhedron  # noqa: E402
from bodysweep.geometry.scene import Scene  # noqa: E402
from bodysweep.geometry.units import from_edge_units  # noqa: E402
from bodysweep.workflow.meshing.mesh import auto_mesh, check_mesh  # noqa: E402
from bodysweep.workflow.meshing.settings import settings_from_dict  # noqa: E402

pytestmark = [pytest.mark.solver, pytest.mark.validation]

F0 = 2.45e9
LENGTH_MM, GAP_MM, WIDTH_MM, THICK_MM, STANDOFF_MM = 50.0, 2.0, 2.0, 1.0, 8.0
SOLVER = {"preset": "draft", "cells_per_wavelength": 8, "port_cells": 1, "max_growth_ratio": 2.0,
          "min_cells_per_layer": 1, "air_margin_wavelengths": 0.1, "n_band_points": 11, "threads": 1}


def _scene(stl: str) -> dict:
    return {"phantom": {"type": "layered_slab", "size_x_mm": 70, "size_y_mm": 40,
                        "layers": [{"tissue": "skin_wet", "thickness_mm": 2}, {"tissue": "muscle", "thickness_mm": 18}]},
            "external": {"type": "cad", "file": stl, "unit": "mm", "feed_axis": "x",
                         "feed_start_mm": [-GAP_MM / 2, -WIDTH_MM / 2, 0.0],
                         "feed_stop_mm": [GAP_MM / 2, WIDTH_MM / 2, 0.0], "standoff_mm": STANDOFF_MM}}


def _run(case_dir: Path, model, plan) -> dict:
    from bodysweep.workflow.finish import finish_case
    from bodysweep.workflow.solver.run import solve_excitation

    case_dir.mkdir(parents=True)
    case = {"case_id": case_dir.name, "label": "test", "study": "tests", "parameters": {}, "frequency_Hz": F0,
            "scene": {}, "solver": SOLVER, "sar": {"masses_kg": [0.001, 0.01], "max_air_fraction": 0.1},
            "versions": {}}
    (case_dir / "case.json").write_text(json.dumps(case))
    (case_dir / "scene.json").write_text(json.dumps(model.to_dict()))
    (case_dir / "mesh_plan.json").write_text(json.dumps(plan.to_dict()))
    st = solve_excitation(case_dir, 1, threads=1)
    assert st["status"] == "ok", st["reason"]
    m = finish_case(case_dir)
    assert m["status"] in ("ok", "warning"), m["reason"]
    return m


def test_stl_dipole_matches_box_dipole(tmp_path):
    stl = write_stl(tmp_path / "dipole.stl", strip_dipole_mm(LENGTH_MM, GAP_MM, WIDTH_MM, THICK_MM))
    model = Scene.from_dict(from_edge_units(_scene(stl))).build(F0)
    poly = [p for p in model.primitives if isinstance(p, Polyhedron)]
    assert len(poly) == 1
    v = np.asarray(poly[0].vertices)
    boxes = []
    for i, side in enumerate((v[:, 0] < 0, v[:, 0] > 0)):  # the two arms, corners taken from the same vertices
        arm = v[side]
        boxes.append(Box(f"external_arm{i}", poly[0].material, tuple(arm.min(0)), tuple(arm.max(0)),
                         priority=poly[0].priority))
    reference = dataclasses.replace(model, primitives=tuple(
        q for p in model.primitives for q in (boxes if isinstance(p, Polyhedron) else [p])))
    settings = settings_from_dict(from_edge_units(SOLVER))
    plan = auto_mesh(model, settings)
    check_mesh(plan, model, settings)
    m_stl = _run(tmp_path / "stl", model, plan)
    m_box = _run(tmp_path / "box", reference, plan)
    s_stl, s_box = (20 * np.log10(abs(complex(*m["S11"]))) for m in (m_stl, m_box))
    assert abs(s_stl - s_box) < 0.2, (s_stl, s_box)  # acceptance criterion of the CAD import: 0.2 dB
    for a, b in zip(m_stl["sar"], m_box["sar"]):
        assert a["mass_kg"] == b["mass_kg"]
        rel = abs(a["peak_W_per_kg_per_W"] / b["peak_W_per_kg_per_W"] - 1)
        assert rel < 0.02, (a["mass_kg"], a["peak_W_per_kg_per_W"], b["peak_W_per_kg_per_W"])  # criterion: 2 %


def prism_mm(x0: float, x1: float, radius: float, n: int) -> np.ndarray:
    """Triangles (2 n sides + 2 n caps, shape (4 n, 3, 3)) of an n-sided prism along x inscribed in a circle, mm."""
    th = 2 * np.pi * np.arange(n) / n
    ring = np.stack([np.cos(th), np.sin(th)], 1) * radius
    tris = []
    for k in range(n):
        a, b = ring[k], ring[(k + 1) % n]
        tris += [[(x0, *a), (x1, *b), (x1, *a)], [(x0, *a), (x0, *b), (x1, *b)],
                 [(x0, 0, 0), (x0, *b), (x0, *a)], [(x1, 0, 0), (x1, *a), (x1, *b)]]
    return np.asarray(tris, float)


def test_round_wire_dipole_matches_its_stl_twin(tmp_path):
    radius, n_sides = 1.0, 64  # the 64-sided prism's cross-section is 0.16 % smaller than the circle (analytic)
    half, g = LENGTH_MM / 2, GAP_MM / 2
    stl = write_stl(tmp_path / "wire.stl", np.concatenate([prism_mm(-half, -g, radius, n_sides),
                                                           prism_mm(g, half, radius, n_sides)]))
    wire = {"type": "dipole", "length_mm": LENGTH_MM, "feed_gap_mm": GAP_MM, "wire_radius_mm": radius, "axis": "x",
            "position_mm": [0, 0], "standoff_mm": STANDOFF_MM, "conductor": "pec"}
    cad = dict(_scene(stl)["external"], feed_start_mm=[-g, 0.0, 0.0], feed_stop_mm=[g, 0.0, 0.0])
    settings = settings_from_dict(from_edge_units(SOLVER))
    results = {}
    for name, ext in (("wire", wire), ("stl", cad)):
        model = Scene.from_dict(from_edge_units(dict(_scene(stl), external=ext))).build(F0)
        plan = auto_mesh(model, settings)  # each on its own automatic mesh, as a study would run it
        check_mesh(plan, model, settings)
        results[name] = (_run(tmp_path / name, model, plan), plan, model)
    (m_wire, p_wire, model_wire), (m_stl, p_stl, _) = results["wire"], results["stl"]
    assert any(isinstance(p, Cylinder) for p in model_wire.primitives)
    # the wire's underside at z = standoff is a mesh line of both meshes (the extent of both parts)
    for plan in (p_wire, p_stl):
        assert np.min(np.abs(plan.lines_z - STANDOFF_MM * 1e-3)) < 1e-12
    s_wire, s_stl = (20 * np.log10(abs(complex(*m["S11"]))) for m in (m_wire, m_stl))
    assert abs(s_wire - s_stl) < 0.2, (s_wire, s_stl)  # acceptance criterion of the CAD import: 0.2 dB
    for a, b in zip(m_wire["sar"], m_stl["sar"]):
        rel = abs(a["peak_W_per_kg_per_W"] / b["peak_W_per_kg_per_W"] - 1)
        assert rel < 0.02, (a["mass_kg"], a["peak_W_per_kg_per_W"], b["peak_W_per_kg_per_W"])  # criterion: 2 %
