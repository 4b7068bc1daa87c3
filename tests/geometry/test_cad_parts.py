"""Passive CAD parts from STL files: a concentrator (metal or dielectric), an implant capsule, an external casing.

The STL files are written in the tests with numpy-stl from boxes of known size, so every geometric check
compares with a hand calculation (analytic); the built-in box capsule is the reference for the STL one.
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from test_cad import box_triangles, write_stl

from bodysweep.geometry.cad import CONCENTRATOR_ANCHORS, CadConcentrator, CadShell
from bodysweep.geometry.concentrators import ANCHORS, CONCENTRATOR_TYPES
from bodysweep.geometry.meshgeom import inner_plane_hints, mesh_distance, surface_points
from bodysweep.geometry.primitives import Box, Polyhedron
from bodysweep.geometry.raster import material_at
from bodysweep.geometry.scene import Scene


def _slab():
    return {"type": "layered_slab", "size_x_m": 0.06, "size_y_m": 0.06,
            "layers": [{"tissue": "skin_wet", "thickness_m": 0.002}, {"tissue": "muscle", "thickness_m": 0.03}]}


def _scene(capsule=None, casing=None, concentrators=(), min_clearance_m=0.5e-3) -> dict:
    ext = {"type": "dipole", "length_m": 0.05, "feed_gap_m": 0.002, "strip_width_m": 0.002, "standoff_m": 0.008}
    if casing is not None:
        ext["casing"] = casing
    imp = {"type": "dipole", "length_m": 0.01, "feed_gap_m": 0.001, "strip_width_m": 0.001, "depth_m": 0.008}
    if capsule is not None:
        imp["capsule"] = capsule
    return {"phantom": _slab(), "external": ext, "implant": imp, "concentrators": list(concentrators),
            "min_clearance_m": min_clearance_m}


def test_registered_with_the_same_anchors():
    assert CONCENTRATOR_TYPES["cad"] is CadConcentrator
    assert CONCENTRATOR_ANCHORS == ANCHORS


def test_metal_and_dielectric_concentrator_placed_by_anchor_offset_rotation(tmp_path):
    f = write_stl(tmp_path / "plate.stl", box_triangles((0, -1, -0.5), (20, 1, 0.5)))
    metal = {"type": "cad", "file": f, "offset_m": [0.0, 0.0, 0.004], "rotation_deg": [0, 0, 90]}
    diel = {"type": "cad", "file": f, "offset_m": [0.0, 0.008, 0.0], "eps_r": 10.0, "loss_tangent": 0.002}
    m = Scene.from_dict(_scene(concentrators=[metal, diel])).build(2.45e9)
    p0 = next(p for p in m.primitives if p.name == "conc0_cad")
    p1 = next(p for p in m.primitives if p.name == "conc1_cad")
    assert isinstance(p0, Polyhedron) and p0.material == "pec" and p0.priority == 100
    # a quarter turn about z takes x to y and y to -x (right hand rule); implant centre at z = -8 mm (analytic)
    assert np.allclose(p0.bounds(), [[-0.001, 0.0, -0.0045], [0.001, 0.020, -0.0035]], atol=1e-12)
    assert np.allclose(p1.bounds(), [[0.0, 0.007, -0.0085], [0.020, 0.009, -0.0075]], atol=1e-12)
    mat = m.material(p1.material)
    assert p1.priority == 50 and mat.kind == "dielectric" and mat.eps_r == 10.0
    # sigma = 2 pi f eps0 eps_r tan(delta) (Pozar, Microwave Engineering, 4th ed., eq. 1.62)
    assert math.isclose(mat.sigma_S_per_m, 2 * math.pi * 2.45e9 * 8.8541878128e-12 * 10.0 * 0.002, rel_tol=1e-9)
    d = Scene.from_dict(_scene(concentrators=[metal, diel])).to_dict()
    assert Scene.from_dict(d).to_dict() == d and len(d["concentrators"][1]["sha256"]) == 64
    assert d["concentrators"][1]["conductor"] == "" and "eps_r" not in d["concentrators"][0]


def test_concentrator_conductor_or_dielectric_not_both(tmp_path):
    f = write_stl(tmp_path / "plate.stl", box_triangles((0, -1, -0.5), (20, 1, 0.5)))
    with pytest.raises(ValueError, match="give conductor .* or eps_r .* not both"):
        CadConcentrator(f, conductor="pec", eps_r=4.0)
    with pytest.raises(ValueError, match="give eps_r too"):
        CadConcentrator(f, loss_tangent=0.01)


def test_concentrator_clearance_to_capsule_is_measured(tmp_path):
    """A plate 1.5 mm above the top face of a 4 mm box capsule (analytic distance 1.5 mm)."""
    plate = write_stl(tmp_path / "plate.stl", box_triangles((-10, -1, -0.5), (10, 1, 0.5)))
    cap = {"shape": "box", "size_m": [0.014, 0.004, 0.004], "eps_r": 3.0}
    conc = {"type": "cad", "file": plate, "offset_m": [0.0, 0.0, 0.004]}  # plate bottom at 3.5 mm above centre
    Scene.from_dict(_scene(capsule=cap, concentrators=[conc], min_clearance_m=1.4e-3))
    with pytest.raises(ValueError, match=r"concentrator 0 \(cad\) is 1.5 mm from the implant"):
        Scene.from_dict(_scene(capsule=cap, concentrators=[conc], min_clearance_m=1.6e-3))


def test_concentrator_holding_the_implant_is_refused(tmp_path):
    """A box around the whole implant: no face near it, yet it holds it (inside test, not edge sampling)."""
    big = write_stl(tmp_path / "big.stl", box_triangles((-12, -5, -5), (12, 5, 5)))
    conc = {"type": "cad", "file": big}
    with pytest.raises(ValueError, match=r"concentrator 0 \(cad\) is 0 mm from the implant"):
        Scene.from_dict(_scene(concentrators=[conc]))
    with pytest.raises(ValueError, match=r"concentrator 0 \(cad\) crosses the implant antenna's conductor"):
        Scene.from_dict(_scene(concentrators=[conc], min_clearance_m=0.0))


def test_thin_concentrator_across_the_external_strip_is_refused(tmp_path):
    """A 0.2 mm wall standing across one arm of the external strip dipole: it cuts the arm."""
    wall = write_stl(tmp_path / "wall.stl", box_triangles((-0.1, -3, -3), (0.1, 3, 3)))
    conc = {"type": "cad", "file": wall, "anchor": "external_feed", "offset_m": [0.010, 0.0, 0.0]}
    with pytest.raises(ValueError, match=r"concentrator 0 \(cad\) crosses the external antenna's conductor"):
        Scene.from_dict(_scene(concentrators=[conc]))
    conc["offset_m"] = [0.030, 0.0, 0.0]  # beyond the 25 mm arm tip
    Scene.from_dict(_scene(concentrators=[conc]))


def test_stl_box_capsule_equals_built_in_box(tmp_path):
    f = write_stl(tmp_path / "cap.stl", box_triangles((-7, -2, -2), (7, 2, 2)))
    built_in = Scene.from_dict(_scene(capsule={"shape": "box", "size_m": [0.014, 0.004, 0.004], "eps_r": 3.0,
                                               "loss_tangent": 0.01})).build(403e6)
    stl_scene = Scene.from_dict(_scene(capsule={"shape": "cad", "file": f, "eps_r": 3.0, "loss_tangent": 0.01}))
    cad = stl_scene.build(403e6)
    box = next(p for p in built_in.primitives if p.name == "implant_capsule")
    poly = next(p for p in cad.primitives if p.name == "implant_capsule")
    assert isinstance(box, Box) and isinstance(poly, Polyhedron)
    assert np.allclose(box.bounds(), poly.bounds(), atol=1e-15) and box.priority == poly.priority
    assert built_in.material("implant_capsule") == cad.material("implant_capsule")
    d = stl_scene.to_dict()
    assert d["implant"]["capsule"]["shape"] == "cad" and Scene.from_dict(d).to_dict() == d


def test_capsule_cutting_the_antenna_is_refused(tmp_path):
    f = write_stl(tmp_path / "short.stl", box_triangles((-4, -2, -2), (4, 2, 2)))  # 8 mm, the dipole is 10 mm
    with pytest.raises(ValueError, match=r"implant dipole: the cad capsule .*short.stl cuts the antenna: .* e\.g\. "
                                         r"\(-5, -0.5, 0\) mm"):
        Scene.from_dict(_scene(capsule={"shape": "cad", "file": f, "eps_r": 3.0}))
    # the same file moved by 3 mm along y still misses the antenna: offset_mm is applied
    ok = write_stl(tmp_path / "long.stl", box_triangles((-7, 1, -2), (7, 5, 2)))
    with pytest.raises(ValueError, match="cuts the antenna"):
        Scene.from_dict(_scene(capsule={"shape": "cad", "file": ok, "eps_r": 3.0}))
    Scene.from_dict(_scene(capsule={"shape": "cad", "file": ok, "eps_r": 3.0, "offset_m": [0.0, -0.003, 0.0]}))


def test_casing_from_file_sets_the_standoff(tmp_path):
    """The standoff is measured to the casing's lowest point: casing bottom 2 mm below the strip (analytic)."""
    f = write_stl(tmp_path / "case.stl", box_triangles((-27, -3, -2), (27, 3, 3)))
    m = Scene.from_dict(_scene(casing={"shape": "cad", "file": f, "eps_r": 3.0})).build(2.45e9)
    casing = next(p for p in m.primitives if p.name == "external_casing")
    arm = next(p for p in m.primitives if p.name == "external_arm0")
    assert math.isclose(casing.bounds()[0][2], 0.008, abs_tol=1e-12)
    assert math.isclose(arm.bounds()[0][2], 0.010, abs_tol=1e-12)
    assert m.material("external_casing").eps_r == 3.0
    short = write_stl(tmp_path / "short.stl", box_triangles((-20, -3, -2), (20, 3, 3)))
    with pytest.raises(ValueError, match="external dipole: the cad casing .*short.stl cuts the antenna"):
        Scene.from_dict(_scene(casing={"shape": "cad", "file": short, "eps_r": 3.0}))


def test_hollow_capsule_gets_lines_on_its_inner_walls(tmp_path):
    """A box shell with 1 mm walls: the inner faces (inward normals) at +-6, +-1, +-1 mm get mesh lines."""
    outer = box_triangles((-7, -2, -2), (7, 2, 2))
    inner = box_triangles((-6, -1, -1), (6, 1, 1))[:, ::-1]  # reversed: normals point into the cavity
    f = write_stl(tmp_path / "shell.stl", np.concatenate([outer, inner]))
    m = Scene.from_dict(_scene(capsule={"shape": "cad", "file": f, "eps_r": 3.0})).build(403e6)
    lines = {(h.axis, round(h.lo * 1e3, 9)) for h in m.hints if "implant_capsule" in h.reason}
    z0 = -8.0
    assert lines == {("x", -6.0), ("x", 6.0), ("y", -1.0), ("y", 1.0), ("z", z0 - 1), ("z", z0 + 1)}
    # the antenna sits in the cavity, which is air; the wall is the capsule; outside is tissue
    probe = np.array([[3.0, 0.8, z0 + 0.8], [3.0, 1.5, z0], [3.0, 3.0, z0], [3.0, 0.0, z0]]) * 1e-3
    assert material_at(m, probe, tol=1e-6) == ["implant_capsule_cavity", "implant_capsule", "muscle", "pec"]
    assert m.material("implant_capsule_cavity").eps_r == 1.0 and m.material("implant_capsule_cavity").sigma_S_per_m == 0


def test_mesh_distance_and_face_points_against_a_box(tmp_path):
    """Distance to a unit box's surface (analytic: outside the Euclidean gap, inside the depth to the nearest face)."""
    tri = box_triangles((0, 0, 0), (1, 1, 1))
    v, f = np.unique(tri.reshape(-1, 3), axis=0, return_inverse=True)
    f = f.reshape(-1, 3)
    pts = np.array([[2.0, 0.5, 0.5], [2.0, 2.0, 0.5], [0.5, 0.5, 0.75], [-1.0, -1.0, -1.0]])
    assert np.allclose(mesh_distance(pts, v, f), [1.0, math.sqrt(2), 0.25, math.sqrt(3)])
    s = surface_points(v, f, 0.1)
    assert np.allclose(mesh_distance(s, v, f), 0.0, atol=1e-12)
    assert np.all(s >= -1e-12) and np.all(s <= 1 + 1e-12) and len(s) > 6 * 100
    assert inner_plane_hints(v, f, "p", "cad") == []  # a plain box has no inner planes


def test_shell_keys_checked(tmp_path):
    f = write_stl(tmp_path / "cap.stl", box_triangles((-7, -2, -2), (7, 2, 2)))
    with pytest.raises(ValueError, match="allowed keys"):
        CadShell.from_dict({"shape": "cad", "file": f, "eps_r": 3.0, "size_m": [1, 1, 1]}, "implant_capsule",
                           "implant capsule")
    with pytest.raises(ValueError, match="needs file"):
        CadShell.from_dict({"shape": "cad", "eps_r": 3.0}, "implant_capsule", "implant capsule")
