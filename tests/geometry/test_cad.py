"""CAD parts from STL files: the Polyhedron primitive, reading, checks, placement, identity and bad files.

STL files are written in the tests with numpy-stl from boxes and cylinders of known size, so every
geometric check compares with a hand calculation.
"""
from __future__ import annotations

import hashlib
import math

import numpy as np
import pytest
from stl import mesh as stl_mesh

from bodysweep.geometry.cad import CadPart, check_closed, load_mesh, rotation_matrix
from bodysweep.geometry.primitives import Box, Polyhedron, primitive_from_dict, primitive_to_dict
from bodysweep.geometry.raster import inside
from bodysweep.geometry.scene import Scene
from bodysweep.geometry.shapes import sample_points, translate

#: the 12 outward triangles of a box, as corner indexes (corner k has bits x, y, z)
BOX_FACES = [(0, 2, 1), (1, 2, 3), (4, 5, 6), (5, 7, 6), (0, 1, 4), (1, 5, 4),
             (2, 6, 3), (3, 6, 7), (0, 4, 2), (2, 4, 6), (1, 3, 5), (3, 7, 5)]


def box_triangles(lo, hi) -> np.ndarray:
    """Triangles (12, 3, 3) of the axis-aligned box [lo, hi]."""
    c = np.array([[(hi if k >> i & 1 else lo)[i] for i in range(3)] for k in range(8)], dtype=float)
    return c[np.asarray(BOX_FACES)]


def write_stl(path, triangles) -> str:
    m = stl_mesh.Mesh(np.zeros(len(triangles), dtype=stl_mesh.Mesh.dtype))
    m.vectors[:] = triangles
    m.save(str(path))
    return str(path)


def strip_dipole_mm(length, gap, width, thick) -> np.ndarray:
    """Two boxes (arms) along x centred on the origin, in mm."""
    L, g, w, t = length / 2, gap / 2, width / 2, thick / 2
    return np.concatenate([box_triangles((-L, -w, -t), (-g, w, t)), box_triangles((g, -w, -t), (L, w, t))])


def test_polyhedron_round_trip_bounds_translate():
    tri = box_triangles((0, 0, 0), (1, 2, 3))
    v, f = np.unique(tri.reshape(-1, 3), axis=0, return_inverse=True)
    p = Polyhedron("p", "pec", tuple(map(tuple, v)), tuple(map(tuple, f.reshape(-1, 3))))
    assert primitive_from_dict(primitive_to_dict(p)) == p
    assert p.bounds() == ((0.0, 0.0, 0.0), (1.0, 2.0, 3.0))  # analytic
    q = translate(p, (1.0, -1.0, 0.5))
    assert q.bounds() == ((1.0, -1.0, 0.5), (2.0, 1.0, 3.5))
    pts, r = sample_points(p, 0.5)
    assert r == 0.0 and np.all(pts.min(0) >= 0) and np.all(pts.max(0) <= [1, 2, 3])


def test_polyhedron_inside_matches_box():
    """Ray parity inside test against the analytic box test, on points off the faces."""
    tri = box_triangles((-1.0, -0.5, -0.25), (1.0, 0.5, 0.25))
    v, f = np.unique(tri.reshape(-1, 3), axis=0, return_inverse=True)
    p = Polyhedron("p", "pec", tuple(map(tuple, v)), tuple(map(tuple, f.reshape(-1, 3))))
    b = Box("b", "pec", (-1.0, -0.5, -0.25), (1.0, 0.5, 0.25))
    rng = np.random.default_rng(1)
    pts = rng.uniform(-1.5, 1.5, (4000, 3))
    assert np.array_equal(inside(p, pts), inside(b, pts))


def test_read_scale_hash_and_rotation(tmp_path):
    f = write_stl(tmp_path / "bar.stl", box_triangles((0, 0, 0), (10, 2, 1)))
    v, faces, digest = load_mesh(f, "mm")
    assert len(v) == 8 and len(faces) == 12  # shared corners merged
    assert np.allclose(np.ptp(v, axis=0), [0.010, 0.002, 0.001])  # mm -> m
    with open(f, "rb") as fh:
        assert digest == hashlib.sha256(fh.read()).hexdigest()  # FIPS 180-4 via hashlib
    part = CadPart(f, (0.0, 0.0, 0.0005), (0.002, 0.0, 0.0005), "y", rotation_deg=(0, 0, 90))
    eb = part.build("external")
    lo, hi = eb.primitives[0].bounds()
    # a quarter turn about z takes x to y and y to -x (right hand rule, analytic)
    assert np.allclose(lo, [-0.002, 0.0, 0.0]) and np.allclose(hi, [0.0, 0.010, 0.001])
    assert np.allclose(rotation_matrix((0, 0, 90)) @ [1, 0, 0], [0, 1, 0])
    assert part.to_dict()["sha256"] == digest


def test_feed_axis_must_follow_rotation(tmp_path):
    f = write_stl(tmp_path / "bar.stl", box_triangles((0, 0, 0), (10, 2, 1)))
    with pytest.raises(ValueError, match="no length along feed_axis x"):
        CadPart(f, (0.0, 0.0, 0.0), (0.002, 0.0, 0.0), "x", rotation_deg=(0, 0, 90))


def test_hash_changes_with_content_and_is_checked(tmp_path):
    f = write_stl(tmp_path / "bar.stl", box_triangles((0, 0, 0), (10, 2, 1)))
    a = CadPart(f, (0, 0, 0), (0.001, 0, 0), "x")
    write_stl(f, box_triangles((0, 0, 0), (11, 2, 1)))
    b = CadPart(f, (0, 0, 0), (0.001, 0, 0), "x")
    assert a.sha256 != b.sha256
    with pytest.raises(ValueError, match="content changed"):
        CadPart(f, (0, 0, 0), (0.001, 0, 0), "x", sha256=a.sha256)


def test_open_mesh_refused(tmp_path):
    f = write_stl(tmp_path / "open.stl", box_triangles((0, 0, 0), (10, 2, 1))[:-1])
    with pytest.raises(ValueError) as e:
        load_mesh(f, "mm")
    msg = str(e.value)
    assert "open.stl" in msg and "not closed" in msg and "\n" not in msg


def test_degenerate_triangle_refused():
    v = np.array([[0, 0, 0], [1, 0, 0], [2, 0, 0], [0, 1, 0], [0, 0, 1]], dtype=float)
    assert "zero area" in check_closed(v, np.array([[0, 1, 2], [0, 1, 3], [0, 3, 4], [1, 3, 4]]))


def test_wrong_unit_refused_with_hint(tmp_path):
    f = write_stl(tmp_path / "dipole.stl", strip_dipole_mm(50, 2, 2, 1))
    with pytest.raises(ValueError, match=r"50000 mm across with unit 'm'.*check unit"):
        load_mesh(f, "m")


def test_missing_and_unreadable_file(tmp_path):
    with pytest.raises(ValueError, match="nope.stl: no such file"):
        load_mesh(str(tmp_path / "nope.stl"), "mm")
    bad = tmp_path / "junk.stl"
    bad.write_bytes(b"\x00" * 90)
    with pytest.raises(ValueError, match="junk.stl"):
        load_mesh(str(bad), "mm")


def _scene(file):
    return {"phantom": {"type": "none"},
            "external": {"type": "cad", "file": file, "unit": "mm", "feed_start_m": [-0.001, 0.0, 0.0],
                         "feed_stop_m": [0.001, 0.0, 0.0], "feed_axis": "x", "standoff_m": 0.01}}


def test_scene_with_cad_external_builds_and_round_trips(tmp_path):
    f = write_stl(tmp_path / "dipole.stl", strip_dipole_mm(50, 2, 2, 1))
    s = Scene.from_dict(_scene(f))
    d = s.to_dict()
    assert len(d["external"]["sha256"]) == 64 and "vertices" not in str(d)
    assert Scene.from_dict(d).to_dict() == d
    m = s.build(2.45e9)
    poly = [p for p in m.primitives if isinstance(p, Polyhedron)]
    assert len(poly) == 1
    lo, hi = poly[0].bounds()
    assert math.isclose(lo[2], 0.01, abs_tol=1e-12) and math.isclose(hi[2] - lo[2], 0.001, abs_tol=1e-12)
    port = m.ports[0]
    assert math.isclose(port.stop[0] - port.start[0], 0.002, abs_tol=1e-12)
    assert math.isclose(port.start[2], 0.0105, abs_tol=1e-12)  # centre of the 1 mm thick strip at 10 mm standoff


def test_implant_part_in_capsule_and_outside_capsule(tmp_path):
    f = write_stl(tmp_path / "small.stl", strip_dipole_mm(10, 1, 1, 0.5))
    part = {"type": "cad", "file": f, "unit": "mm", "feed_start_m": [-0.0005, -0.0005, 0.0],
            "feed_stop_m": [0.0005, 0.0005, 0.0], "feed_axis": "x", "depth_m": 0.01}
    scene = {"phantom": {"type": "layered_slab", "size_x_m": 0.06, "size_y_m": 0.06,
                         "layers": [{"tissue": "muscle", "thickness_m": 0.03}]},
             "external": {"type": "dipole", "length_m": 0.05, "feed_gap_m": 0.002, "standoff_m": 0.005},
             "implant": dict(part, capsule={"shape": "box", "size_m": [0.012, 0.004, 0.004], "eps_r": 3.0})}
    m = Scene.from_dict(scene).build(403e6)
    lo, hi = next(p for p in m.primitives if isinstance(p, Polyhedron)).bounds()
    assert np.allclose(lo, [-0.005, -0.0005, -0.01025]) and np.allclose(hi, [0.005, 0.0005, -0.00975])  # analytic
    scene["implant"]["capsule"]["size_m"] = [0.008, 0.004, 0.004]  # shorter than the 10 mm part
    with pytest.raises(ValueError, match="does not fit in its box capsule"):
        Scene.from_dict(scene)
