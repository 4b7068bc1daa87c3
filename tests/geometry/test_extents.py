"""Extents of every primitive and port against their analytic bounding boxes, and clearances from them.

Each expected box is a hand calculation ("analytic") from the solid the engine fills: a box between its
corners; a cylinder with flat end discs (an end disc of radius r normal to the unit axis u reaches
r sqrt(1 - u_i^2) along coordinate i); a wire of radius r is every point within r of its polyline
(round ends); a polygon spans its vertices and its extrusion; a port its gap segment.
"""
import copy

import numpy as np
import pytest

from bodysweep.geometry import examples
from bodysweep.geometry.primitives import Box, Cylinder, Polygon, Port, Wire
from bodysweep.geometry.scene import Scene
from bodysweep.geometry.shapes import clearance_to_box
from bodysweep.geometry.units import from_edge_units


def _same(box, lo, hi):
    assert np.allclose(box[0], lo, rtol=0, atol=1e-15) and np.allclose(box[1], hi, rtol=0, atol=1e-15), (box, lo, hi)


def test_box_extent_analytic():
    _same(Box("b", "m", (2.0, -1.0, 0.5), (-1.0, 3.0, -0.5)).bounds(), (-1, -1, -0.5), (2, 3, 0.5))


@pytest.mark.parametrize("axis", [0, 1, 2])
def test_cylinder_along_an_axis_extent_analytic(axis):
    # analytic: no widening along its own axis, the radius across it
    s, e = np.zeros(3), np.zeros(3)
    s[axis], e[axis] = -0.013, 0.013
    lo, hi = np.full(3, -0.0055), np.full(3, 0.0055)
    lo[axis], hi[axis] = -0.013, 0.013
    _same(Cylinder("capsule", "m", tuple(s), tuple(e), 0.0055).bounds(), lo, hi)
    _same(Cylinder("capsule", "m", tuple(e), tuple(s), 0.0055).bounds(), lo, hi)  # reversed: same box


def test_oblique_cylinder_extent_analytic_and_by_its_rims():
    # axis (0,0,0) -> (3,4,0), u = (0.6, 0.8, 0), r = 1: reach r sqrt(1 - u^2) = (0.8, 0.6, 1.0) (analytic)
    c = Cylinder("rod", "m", (0.0, 0.0, 0.0), (3.0, 4.0, 0.0), 1.0)
    _same(c.bounds(), (-0.8, -0.6, -1.0), (3.8, 4.6, 1.0))
    # the extreme points of a flat-ended cylinder lie on its end rims: sample them densely
    u = np.array([0.6, 0.8, 0.0])
    a, b = np.array([-0.8, 0.6, 0.0]), np.array([0.0, 0.0, 1.0])
    t = np.linspace(0, 2 * np.pi, 20001)
    rim = np.cos(t)[:, None] * a + np.sin(t)[:, None] * b
    pts = np.concatenate([rim, 5.0 * u + rim])
    lo, hi = c.bounds()
    assert np.allclose(pts.min(0), lo, atol=1e-7) and np.allclose(pts.max(0), hi, atol=1e-7)


def test_wire_extents_analytic():
    # radius 0: the polyline's own box; radius r: every point within r of it, so r past each end
    pts = ((0.0, 0.0, 0.0), (0.01, 0.0, 0.0), (0.01, 0.02, 0.005))
    _same(Wire("w", "m", pts).bounds(), (0, 0, 0), (0.01, 0.02, 0.005))
    _same(Wire("w", "m", pts, radius=0.001).bounds(), (-0.001, -0.001, -0.001), (0.011, 0.021, 0.006))


@pytest.mark.parametrize("normal, lo, hi", [
    # points are in the plane's cyclic axes: z -> (x, y), x -> (y, z), y -> (z, x) (analytic)
    ("z", (-1.0, 2.0, 0.5), (3.0, 5.0, 0.75)),
    ("x", (0.5, -1.0, 2.0), (0.75, 3.0, 5.0)),
    ("y", (2.0, 0.5, -1.0), (5.0, 0.75, 3.0)),
])
def test_polygon_extent_analytic(normal, lo, hi):
    p = Polygon("p", "m", normal, 0.5, ((-1.0, 2.0), (3.0, 2.0), (0.0, 5.0)), thickness=0.25)
    _same(p.bounds(), lo, hi)


def test_port_extent_analytic():
    _same(Port("feed", 1, (0.0, 0.0, 0.001), (0.0, 0.0, -0.001), "z").bounds(), (0, 0, -0.001), (0, 0, 0.001))


def test_clearance_of_a_collinear_rod_from_a_box_is_exact():
    lo, hi = (-0.013, -0.0055, -0.0055), (0.013, 0.0055, 0.0055)
    rod = Cylinder("rod", "m", (0.014, 0.0, 0.0), (0.030, 0.0, 0.0), 0.001)
    # analytic: the flat end sits 1 mm past the box face; the radius does not shorten it
    assert clearance_to_box(rod, lo, hi, 1e-4) == pytest.approx(0.001, abs=1e-12)
    # beside the box: 2 mm axis offset beyond the 5.5 mm face, minus 1 mm radius, and 1 mm along x
    side = Cylinder("rod", "m", (0.014, 0.0075, 0.0), (0.030, 0.0075, 0.0), 0.001)
    assert clearance_to_box(side, lo, hi, 1e-4) == pytest.approx(np.hypot(0.001, 0.001), abs=1e-12)
    inside = Cylinder("rod", "m", (0.0, 0.0, 0.0), (0.030, 0.0, 0.0), 0.001)
    assert clearance_to_box(inside, lo, hi, 1e-4) < 0
    # boxes (analytic gap between intervals)
    assert clearance_to_box(Box("b", "m", (0.016, 0.0, 0.0), (0.02, 0.001, 0.001)), lo, hi, 1e-4) == \
        pytest.approx(0.003, abs=1e-12)


def _capsule_with_rods(gap_mm, radius_mm=1.0):
    s = copy.deepcopy(examples.slab_dipole_scene(15.0))
    s["implant"]["capsule"] = {"shape": "cylinder", "axis": "x", "radius_mm": 2.0, "length_mm": 26.0,
                               "eps_r": 2.9, "loss_tangent": 0.005}
    s["concentrators"] = [{"type": "rod_pair", "anchor": "implant", "azimuth_deg": 0.0, "rod_length_mm": 10.0,
                           "gap_mm": gap_mm, "radius_mm": radius_mm, "conductor": "pec"}]
    s["min_clearance_mm"] = 0.5
    return Scene.from_dict(from_edge_units(s))


@pytest.mark.parametrize("gap_mm", [28.0, 32.0, 36.0])
def test_collinear_rod_pair_around_a_long_capsule_is_accepted(gap_mm):
    # a 26 mm capsule ends at +-13 mm; rods from +-gap/2 are (gap - 26) / 2 = 1 ... 5 mm clear (analytic)
    _capsule_with_rods(gap_mm).check()


def test_collinear_rod_pair_too_close_is_refused_with_the_clearance():
    # gap 26.6 mm: 0.3 mm clear (analytic), under the 0.5 mm minimum
    with pytest.raises(ValueError, match=r"is 0\.3 mm from the implant"):
        _capsule_with_rods(26.6).check()
