"""Concentrator builders: rod positions against hand calculations, anchors, rings, errors."""
import math

import numpy as np
import pytest

from bodysweep.geometry.concentrators import (CrossedPairs, Ring, Rod, RodArray, RodPair, concentrator_from_dict)
from bodysweep.geometry.primitives import Box, Cylinder, Wire
from bodysweep.geometry.raster import inside

ANCHORS = {"implant": (0.001, 0.0, -0.01), "surface": (0.0, 0.0, 0.0), "external_feed": (0.0, -0.012, 0.004)}


def _axis_of(p):
    return np.asarray(p.stop) - np.asarray(p.start)


def test_rod_pair_gap_centred_on_anchor_plus_offset():
    c = RodPair(0.008, 0.002, anchor="implant", offset_m=(0.0, 0.0, 0.004), radius_m=0.0004)
    a, b = c.build(ANCHORS, "c")
    assert isinstance(a, Cylinder) and a.radius == 0.0004
    # hand calculation: centre (1, 0, -6) mm; rods from x = -9 to 0 mm... i.e. centre -/+ (1 + 8) and 1 mm
    assert a.start == pytest.approx((0.001 - 0.009, 0.0, -0.006)) and a.stop == pytest.approx((0.0, 0.0, -0.006))
    assert b.start == pytest.approx((0.002, 0.0, -0.006)) and b.stop == pytest.approx((0.010, 0.0, -0.006))
    assert np.linalg.norm(np.subtract(b.start, a.stop)) == pytest.approx(0.002)


def test_square_rod_pair_along_y_is_boxes():
    a, b = RodPair(0.005, 0.001, anchor="surface", offset_m=(0, 0, -0.003), azimuth_deg=90, side_m=0.0006) \
        .build(ANCHORS, "s")
    assert isinstance(a, Box)
    lo, hi = b.bounds()
    assert np.allclose(lo, (-0.0003, 0.0005, -0.0033)) and np.allclose(hi, (0.0003, 0.0055, -0.0027))


def test_crossed_pairs_angle():
    c = CrossedPairs(0.006, 0.001, anchor="implant", azimuth_deg=30.0, angle_deg=60.0, radius_m=0.0002)
    rods = c.build(ANCHORS, "x")
    assert len(rods) == 4
    d1, d2 = _axis_of(rods[0]), _axis_of(rods[2])
    ang = math.degrees(math.acos(d1 @ d2 / np.linalg.norm(d1) / np.linalg.norm(d2)))
    assert ang == pytest.approx(60.0)
    assert math.degrees(math.atan2(d1[1], d1[0])) == pytest.approx(30.0)


def test_parallel_array_spacing_and_thin_wires():
    arr = RodArray(4, 0.003, 0.01, anchor="external_feed", offset_m=(0, 0, -0.01))
    rods = arr.build(ANCHORS, "a")
    assert all(isinstance(r, Wire) for r in rods)
    ys = sorted(r.points[0][1] for r in rods)
    # hand calculation: 4 rods 3 mm apart centred on y = -12 mm -> -16.5, -13.5, -10.5, -7.5 mm
    assert ys == pytest.approx([-0.0165, -0.0135, -0.0105, -0.0075])
    assert all(r.points[0][2] == pytest.approx(-0.006) for r in rods)
    gapped = RodArray(2, 0.003, 0.004, gap_m=0.001, radius_m=0.0002).build(ANCHORS, "g")
    assert len(gapped) == 4


def test_single_rod_relative_to_anchor():
    (r,) = Rod((0, 0, 0.002), (0.01, 0.0, 0.002), anchor="implant", side_m=0.0005).build(ANCHORS, "r")
    lo, hi = r.bounds()
    assert np.allclose(lo, (0.001, -0.00025, -0.00825)) and np.allclose(hi, (0.011, 0.00025, -0.00775))


def test_closed_and_split_ring():
    R, w = 0.005, 0.001
    closed = Ring(R, w, anchor="surface", offset_m=(0, 0, -0.004)).build(ANCHORS, "r")[0]
    ang = np.radians(np.arange(0.5, 360, 3.0))
    pts = np.stack([R * np.cos(ang), R * np.sin(ang), np.full_like(ang, -0.004)], 1)
    assert inside(closed, pts, 1e-6).all()
    assert not inside(closed, [(0, 0, -0.004), (R + 0.6 * w, 0, -0.004)], 1e-6).any()
    split = Ring(R, w, anchor="surface", split_gap_m=0.001, split_angle_deg=0.0).build(ANCHORS, "s")[0]
    assert not inside(split, [(R, 0, 0)], 1e-6)[0]
    assert inside(split, [(R, 0.0006, 0), (-R, 0, 0)], 1e-6).all()
    thick = Ring(R, w, normal="x", thickness_m=0.0002).build(ANCHORS, "t")[0]
    assert thick.normal == "x" and thick.elevation == pytest.approx(0.001 - 0.0001)


@pytest.mark.parametrize("c", [
    RodPair(0.008, 0.002, radius_m=0.0004, offset_m=(0.006, 0, 0), azimuth_deg=90),
    CrossedPairs(0.006, 0.001, side_m=0.0003, angle_deg=90),
    RodArray(3, 0.003, 0.01, gap_m=0.001, radius_m=0.0002),
    Rod((0, 0, 0), (0.01, 0.01, 0), radius_m=1e-4),
    Ring(0.005, 0.001, split_gap_m=0.0005, normal="y"),
])
def test_round_trip(c):
    assert concentrator_from_dict(c.to_dict()) == c


@pytest.mark.parametrize("make,msg", [
    (lambda: RodPair(0.008, 0.002, radius_m=1e-4, side_m=1e-4), "give radius_m or side_m, not both"),
    (lambda: RodPair(0.008, 0.0, radius_m=1e-4), "rod pair: gap_m must be > 0 m, got 0.0"),
    (lambda: RodPair(0.008, 0.002, anchor="knee"), "anchor must be one of"),
    (lambda: CrossedPairs(0.008, 0.002, angle_deg=180.0), "angle_deg must not be a multiple of 180"),
    (lambda: RodArray(0, 0.003, 0.01), "count must be an integer >= 1"),
    (lambda: RodArray(3, 0.0005, 0.01, radius_m=0.0003), "spacing_m \\(0.0005 m\\) must exceed the rod thickness"),
    (lambda: Rod((0, 0, 0), (0, 0, 0)), "start_m and stop_m coincide"),
    (lambda: Ring(0.001, 0.003), "trace_width_m \\(0.003 m\\) must be less than twice the radius"),
    (lambda: Ring(0.005, 0.001, split_gap_m=0.01), "split_gap_m \\(0.01 m\\) must be smaller than the inner"),
    (lambda: RodPair(0.008, 0.002, side_m=1e-4, azimuth_deg=45).build(ANCHORS, "c"), "square rod must run along"),
    (lambda: RodPair(0.008, 0.002).build({"surface": (0, 0, 0)}, "c"), "anchor 'implant' is not available"),
    (lambda: concentrator_from_dict({"type": "helix"}), "concentrator: type must be one of"),
    (lambda: concentrator_from_dict({"type": "ring", "radius_m": 0.01}), "missing key\\(s\\) \\['trace_width_m'\\]"),
])
def test_errors(make, msg):
    with pytest.raises(ValueError, match=msg):
        make()


def test_insulated_rod_pair_sleeves_and_material():
    from bodysweep.geometry.concentrators import Insulation

    ins = Insulation(thickness_m=0.0005, eps_r=2.3, loss_tangent=0.001)
    c = RodPair(0.008, 0.002, offset_m=(0.0, 0.0, 0.004), radius_m=0.0004, insulation=ins)
    a, b, sa, sb = c.build(ANCHORS, "c")
    assert (a.material, sa.material) == ("pec", "c_insulation") and sa.priority < a.priority  # metal wins
    # hand calculation: sleeve radius 0.4 + 0.5 mm; rod a from x = -8 to 0 mm about the centre x = 1 mm,
    # its sleeve 0.5 mm beyond each end
    assert sa.radius == pytest.approx(0.0009)
    assert sa.start == pytest.approx((0.001 - 0.009 - 0.0005, 0.0, -0.006))
    assert sa.stop == pytest.approx((0.0 + 0.0005, 0.0, -0.006))
    assert sb.start == pytest.approx((0.002 - 0.0005, 0.0, -0.006))
    # sigma = 2 pi f eps0 eps_r tan(delta) (definition of the loss tangent), at 433 MHz
    m = c.materials("c")[0].to_material(433e6)
    assert m.sigma_S_per_m == pytest.approx(2 * math.pi * 433e6 * 8.8541878128e-12 * 2.3 * 0.001, rel=1e-9)
    assert m.eps_r == 2.3 and not m.is_tissue  # a plastic: no SAR
    assert "insulation" not in RodPair(0.008, 0.002, radius_m=0.0004).to_dict()  # bare rods: dict (identity) as before


def test_insulated_rod_pair_round_trip_and_errors():
    d = {"type": "rod_pair", "rod_length_m": 0.008, "gap_m": 0.002, "radius_m": 0.0004,
         "insulation": {"thickness_m": 0.0005, "eps_r": 2.3}}
    c = concentrator_from_dict(d)
    assert concentrator_from_dict(c.to_dict()) == c and c.insulation.loss_tangent == 0.0
    with pytest.raises(ValueError, match="insulation needs round rods"):
        concentrator_from_dict({**d, "radius_m": 0.0, "side_m": 0.0004})
    with pytest.raises(ValueError, match="must exceed twice the insulation thickness"):
        concentrator_from_dict({**d, "gap_m": 0.001})
    with pytest.raises(ValueError, match="eps_r must be >= 1"):
        concentrator_from_dict({**d, "insulation": {"thickness_m": 0.0005, "eps_r": 0.5}})
    with pytest.raises(ValueError, match="thickness_m must be > 0"):
        concentrator_from_dict({**d, "insulation": {"thickness_m": 0.0, "eps_r": 2.3}})
