"""Planar implant antennas (geometry/planar.py): shapes against hand calculations, checks, round trips, mesh.

References: trace lengths and areas are analytic (sums of straight runs, the shoelace formula, the arc length of
an Archimedean spiral integrated with scipy.integrate.quad); "two cells across every gap" is common practice for
FDTD meshes of printed traces.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad

from bodysweep.geometry.antennas import ImplantAntenna
from bodysweep.geometry.planar import InvertedF, MeanderLine, Slab, Spiral
from bodysweep.geometry.primitives import Box, Polygon, Wire
from bodysweep.geometry.scene import Scene

SUB = {"thickness_m": 1.0e-3, "eps_r": 10.2, "loss_tangent": 0.0035}
SUP = {"thickness_m": 0.5e-3, "eps_r": 10.2, "loss_tangent": 0.0035}


def _length(c) -> float:
    return float(np.sum(np.linalg.norm(np.diff(np.asarray(c), axis=0), axis=1)))


def _area(poly: Polygon) -> float:  # shoelace formula
    p = np.asarray(poly.points)
    return 0.5 * abs(float(np.dot(p[:, 0], np.roll(p[:, 1], -1)) - np.dot(p[:, 1], np.roll(p[:, 0], -1))))


def _by_name(eb, suffix):
    return [p for p in eb.primitives if p.name.endswith(suffix)]


def test_inverted_f_patch_ground_pin_and_feed():
    L, W, h, t, d, pin = 10e-3, 8e-3, 1e-3, 0.5e-3, 2.5e-3, 3e-3
    a = InvertedF(L, W, (12e-3, 10e-3), SUB, d, pin_position_m=pin, superstrate=SUP)
    eb = a.build("implant")
    patch, = _by_name(eb, "radiator0")
    ground, = _by_name(eb, "ground")
    assert _area(patch) == pytest.approx(L * W, rel=1e-12)  # analytic
    assert _area(ground) == pytest.approx(12e-3 * 10e-3, rel=1e-12)
    assert patch.elevation == pytest.approx(h / 2) and ground.elevation == pytest.approx(-h / 2)
    wire, = _by_name(eb, "pin")
    assert isinstance(wire, Wire)
    assert wire.points == ((-L / 2, -W / 2 + pin, -h / 2), (-L / 2, -W / 2 + pin, h / 2))
    # the port is the feed probe: from the ground to the patch, d from the pin along +x
    assert eb.feed_axis == "z"
    assert eb.feed_start == pytest.approx((-L / 2 + d, -W / 2 + pin, -h / 2))
    assert eb.feed_stop == pytest.approx((-L / 2 + d, -W / 2 + pin, h / 2))
    sub, = _by_name(eb, "substrate")
    sup, = _by_name(eb, "superstrate")
    assert isinstance(sub, Box) and sub.bounds()[0][2] == pytest.approx(-h / 2) and sub.bounds()[1][2] == pytest.approx(h / 2)
    assert sup.bounds()[0][2] == pytest.approx(h / 2) and sup.bounds()[1][2] == pytest.approx(h / 2 + t)
    assert {m.name: m.eps_r for m in eb.materials} == {"implant_substrate": 10.2, "implant_superstrate": 10.2}
    # no pin when asked
    assert not _by_name(InvertedF(L, W, (12e-3, 10e-3), SUB, d, shorting_pin=False).build("implant"), "pin")


def test_meander_centre_line_length_and_gaps():
    n, p, H, w = 5, 2e-3, 6e-3, 0.5e-3
    m = MeanderLine(n, p, H, w, (14e-3, 10e-3), SUB, 1e-3)
    c = m.centreline()
    lead = p  # default lead: one pitch
    # analytic: lead + n legs of H + (n - 1) joins of p
    assert _length(c) == pytest.approx(lead + n * H + (n - 1) * p, rel=1e-12)
    assert (c[:, 0].min() + c[:, 0].max()) == pytest.approx(0.0, abs=1e-15)  # centred
    legs_x = np.unique(np.round(c[1:, 0], 12))
    assert np.diff(legs_x) == pytest.approx(p)  # gap between legs' edges: p - w
    m2 = MeanderLine(n, p, H, w, (16e-3, 10e-3), SUB, 1e-3, lead_length_m=3e-3)
    assert _length(m2.centreline()) == pytest.approx(3e-3 + n * H + (n - 1) * p, rel=1e-12)


def test_square_spiral_length_and_pitch():
    R, p, w = 5e-3, 1.5e-3, 0.5e-3
    for N in (1, 2, 2.5):
        s = Spiral("square", N, R, p, w, (12e-3, 12e-3), SUB, 2e-3)
        c = s.centreline()
        # analytic: turn t has sides 2R - 2tp (twice) and 2R - (2t + 1)p (twice): 8R - 8tp - 2p per turn
        full = int(N)
        expect = sum(8 * R - 8 * t * p - 2 * p for t in range(full))
        sides = [2 * R - 2 * full * p, 2 * R - 2 * full * p, 2 * R - (2 * full + 1) * p]
        expect += sum(sides[: int(round((N - full) * 4))])
        assert _length(c) == pytest.approx(expect, rel=1e-12)
    c = Spiral("square", 2, R, p, w, (12e-3, 12e-3), SUB, 2e-3).centreline()
    # parallel runs of neighbouring turns are one pitch apart (bottom runs at y = -R, -(R - p))
    assert c[0, 1] == pytest.approx(-R) and c[4, 1] == pytest.approx(-(R - p))


def test_circular_spiral_length_against_the_arc_length_integral():
    R, p, N = 5e-3, 1.2e-3, 2.0
    s = Spiral("circular", N, R, p, 0.4e-3, (12e-3, 12e-3), SUB, 1e-3, segments_per_turn=96)
    # arc length of r = R - p theta / 2 pi: integral of sqrt(r^2 + (dr/dtheta)^2) (analytic, by quad)
    ref, _ = quad(lambda th: math.hypot(R - p * th / (2 * math.pi), p / (2 * math.pi)), 0, 2 * math.pi * N)
    assert _length(s.centreline()) == pytest.approx(ref, rel=2e-3)  # chords of 96 per turn: < 0.1 % short
    pin, feed = s.feed_points()
    assert pin == pytest.approx((0.0, -R))
    assert math.hypot(*feed) == pytest.approx(R - p * (1e-3 / R) / (2 * math.pi), rel=1e-9)


@pytest.mark.parametrize("make,match", [
    (lambda: InvertedF(10e-3, 8e-3, (9e-3, 10e-3), SUB, 2e-3), "does not fit on the board"),
    (lambda: InvertedF(10e-3, 8e-3, (12e-3, 10e-3), SUB, 12e-3), "feed_distance_m"),
    (lambda: InvertedF(10e-3, 8e-3, (12e-3, 10e-3), SUB, 2e-3, pin_position_m=9e-3), "pin_position_m"),
    (lambda: MeanderLine(5, 0.9e-3, 6e-3, 0.5e-3, (14e-3, 10e-3), SUB, 0.5e-3), "leg_pitch_m"),
    (lambda: Spiral("square", 4, 5e-3, 1.5e-3, 0.5e-3, (12e-3, 12e-3), SUB, 2e-3), "do not fit"),
    (lambda: Spiral("square", 1.1, 5e-3, 1.5e-3, 0.5e-3, (12e-3, 12e-3), SUB, 2e-3), "quarter steps"),
    (lambda: InvertedF(10e-3, 8e-3, (12e-3, 10e-3), {"eps_r": 3.0}, 2e-3), "substrate: missing key"),
    (lambda: InvertedF(10e-3, 8e-3, (12e-3, 10e-3), {**SUB, "colour": 1}, 2e-3), "unknown key"),
    (lambda: InvertedF(10e-3, 8e-3, (12e-3, 10e-3), {"thickness_m": 1e-3, "eps_r": 0.5}, 2e-3), "eps_r must be >= 1"),
])
def test_bad_boards_are_refused_with_the_key_named(make, match):
    with pytest.raises(ValueError, match=match):
        make()


def _scene(implant: dict) -> dict:
    return {"phantom": {"type": "layered_slab", "size_x_mm": 60, "size_y_mm": 60,
                        "layers": [{"tissue": "skin_dry", "thickness_mm": 2}, {"tissue": "fat_not_infiltrated",
                                                                               "thickness_mm": 4},
                                   {"tissue": "muscle", "thickness_mm": 30}]},
            "external": {"type": "dipole", "length_mm": 60, "feed_gap_mm": 2, "axis": "x", "standoff_mm": 10},
            "implant": {"depth_mm": 15, "board_size_mm": [14, 12], "feed_distance_mm": 1,
                        "substrate": {"thickness_mm": 1.0, "eps_r": 10.2, "loss_tangent": 0.0035},
                        "superstrate": {"thickness_mm": 0.5, "eps_r": 10.2, "loss_tangent": 0.0035},
                        "capsule": {"shape": "box", "size_mm": [16, 14, 4], "eps_r": 2.9, "loss_tangent": 0.005},
                        **implant}}


PLANARS = {
    "inverted_f": {"type": "inverted_f", "patch_length_mm": 10, "patch_width_mm": 8, "pin_position_mm": 2},
    "meander": {"type": "meander", "legs": 5, "leg_pitch_mm": 2, "meander_height_mm": 6, "trace_width_mm": 0.5},
    "spiral": {"type": "spiral", "shape": "square", "turns": 2, "outer_half_size_mm": 5, "turn_pitch_mm": 1.5,
               "trace_width_mm": 0.5},
}


@pytest.mark.parametrize("kind", sorted(PLANARS))
def test_round_trip_and_scene_build(kind):
    sc = Scene.from_edge_dict(_scene(PLANARS[kind]))
    again = Scene.from_dict(sc.to_dict())
    assert again.canonical_json() == sc.canonical_json()
    model = sc.build(403e6)
    names = {m.name for m in model.materials}
    assert {"implant_substrate", "implant_superstrate", "implant_capsule"} <= names
    assert isinstance(sc.implant, ImplantAntenna)
    port2 = [p for p in model.ports if p.number == 2][0]
    assert port2.axis == "z" and port2.stop[2] - port2.start[2] == pytest.approx(1e-3)  # across the substrate


def test_slab_to_dict_round_trip():
    s = Slab(**SUB)
    assert Slab(**s.to_dict()) == s
