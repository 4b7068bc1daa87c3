"""Antenna builders: dimensions against hand calculations, ports, placement, casing, capsule, errors."""
import math

import numpy as np
import pytest

from bodysweep.geometry.antennas import Capsule, Dipole, ExternalAntenna, ImplantAntenna, Loop
from bodysweep.geometry.model import SceneModel
from bodysweep.geometry.primitives import Cylinder, Material, Polygon, Wire
from bodysweep.geometry.raster import inside, material_at
from bodysweep.geometry.tissues import Dielectric


def _metal(prims, points, tol=1e-6):
    return np.any([inside(p, points, tol) for p in prims], axis=0)


def test_thin_wire_dipole_arms_and_port():
    d = Dipole(0.06, 0.001, "x")
    b = d.build("ext")
    assert all(isinstance(p, Wire) for p in b.primitives)
    # hand calculation: arms from -30 to -0.5 mm and 0.5 to 30 mm
    assert b.primitives[0].points == ((-0.03, 0, 0), (-0.0005, 0, 0))
    assert b.primitives[1].points == ((0.0005, 0, 0), (0.03, 0, 0))
    assert (b.feed_start, b.feed_stop, b.feed_axis) == ((-0.0005, 0, 0), (0.0005, 0, 0), "x")


def test_round_and_strip_dipoles():
    r = Dipole(0.01, 0.0005, "z", wire_radius_m=0.0002).build("imp")
    assert all(isinstance(p, Cylinder) and p.radius == 0.0002 for p in r.primitives)
    s = Dipole(0.04, 0.002, "y", strip_width_m=0.002).build("ext")
    assert all(isinstance(p, Polygon) and p.normal == "z" for p in s.primitives)
    lo, hi = s.primitives[1].bounds()
    assert np.allclose([lo[0], hi[0], lo[1], hi[1]], [-0.001, 0.001, 0.001, 0.02])
    # the port spans the strip width across the gap
    assert s.feed_start == pytest.approx((-0.001, -0.001, 0.0)) and s.feed_stop == pytest.approx((0.001, 0.001, 0.0))


@pytest.mark.parametrize("kw,msg", [
    (dict(length_m=0.01, feed_gap_m=0.0), "dipole: feed_gap_m must be > 0 m, got 0.0"),
    (dict(length_m=0.01, feed_gap_m=0.02), "feed_gap_m \\(0.02 m\\) must be shorter than length_m"),
    (dict(length_m=0.01, feed_gap_m=0.001, wire_radius_m=1e-4, strip_width_m=1e-3), "not both"),
    (dict(length_m=0.01, feed_gap_m=0.001, axis="w"), "axis must be one of"),
    (dict(length_m=-0.01, feed_gap_m=0.001), "length_m must be > 0 m, got -0.01"),
])
def test_dipole_errors(kw, msg):
    with pytest.raises(ValueError, match=msg):
        Dipole(**kw)


def test_circular_loop_trace_gap_and_port():
    R, w, g = 0.012, 0.0015, 0.001
    b = Loop("circular", w, g, radius_m=R).build("ext")
    (trace,) = b.primitives
    # centre line is metal all around except in the gap; centre and outside are not (analytic circle)
    ang = np.radians(np.arange(0, 360, 5.0))
    ring = np.stack([R * np.cos(ang), R * np.sin(ang), 0 * ang], 1)
    ring = ring[(np.abs(ring[:, 0]) > g / 2) | (ring[:, 1] > 0)]  # leave out the feed gap
    assert len(ring) == 71
    assert _metal(b.primitives, ring).all()
    assert not _metal(b.primitives, [(0, 0, 0), (0, -R, 0), (0, R + 0.55 * w, 0), (0, R - 0.55 * w, 0)]).any()
    assert _metal(b.primitives, [(0, R + 0.45 * w, 0), (0, R - 0.45 * w, 0), (0.51 * g, -R, 0)]).all()
    assert b.feed_axis == "x"
    assert b.feed_stop[0] - b.feed_start[0] == pytest.approx(g)
    assert b.feed_start[1] == pytest.approx(-R - w / 2) and b.feed_stop[1] == pytest.approx(-R + w / 2)


def test_square_loop_outline():
    s, w, g = 0.02, 0.001, 0.001
    b = Loop("square", w, g, side_m=s).build("x")
    a = s / 2
    assert _metal(b.primitives, [(a, 0, 0), (-a, 0, 0), (0, a, 0), (a, a, 0), (0.002, -a, 0)]).all()
    assert not _metal(b.primitives, [(0, 0, 0), (0, -a, 0), (a + 0.6 * w, 0, 0)]).any()
    lo, hi = b.primitives[0].bounds()
    assert np.allclose([lo[0], hi[0], lo[1], hi[1]], [-a - w / 2, a + w / 2, -a - w / 2, a + w / 2])


@pytest.mark.parametrize("shape", ["circular", "square"])
def test_spiral_has_n_turns_and_a_raised_bridge(shape):
    N, p, w, g, h = 3, 0.002, 0.0008, 0.001, 0.001
    size = dict(radius_m=0.01) if shape == "circular" else dict(side_m=0.02)
    loop = Loop(shape, w, g, turns=N, pitch_m=p, bridge_height_m=h, **size)
    b = loop.build("ext")
    trace = [q for q in b.primitives if q.name.endswith("trace")][0]
    # walking outward along +y from the centre crosses the trace once per turn
    ys = np.linspace(0, 0.0115, 4000)
    hits = inside(trace, np.stack([0 * ys, ys, 0 * ys], 1), 1e-9).astype(int)
    assert np.count_nonzero(np.diff(hits) == 1) == N
    bridge = [q for q in b.primitives if q.name.endswith("bridge")][0]
    assert bridge.elevation == h
    vias = [q for q in b.primitives if isinstance(q, Wire)]
    assert len(vias) == 2 and all(abs(v.points[1][2] - v.points[0][2]) == h for v in vias)
    # the feed gap is exactly feed_gap_m wide along x
    assert b.feed_stop[0] - b.feed_start[0] == pytest.approx(g, rel=1e-9)


@pytest.mark.parametrize("kw,msg", [
    (dict(shape="circular", trace_width_m=0.001, feed_gap_m=0.001), "circular loop needs radius_m > 0"),
    (dict(shape="square", trace_width_m=0.001, feed_gap_m=0.001), "square loop needs side_m > 0"),
    (dict(shape="oval", trace_width_m=0.001, feed_gap_m=0.001, radius_m=0.01), "shape must be one of"),
    (dict(shape="circular", trace_width_m=0.001, feed_gap_m=0.0, radius_m=0.01), "feed_gap_m must be > 0 m"),
    (dict(shape="circular", trace_width_m=0.001, feed_gap_m=0.001, radius_m=0.01, side_m=0.02), "side_m"),
    (dict(shape="square", trace_width_m=0.001, feed_gap_m=0.001, radius_m=0.01, side_m=0.02), "radius_m"),
    (dict(shape="circular", trace_width_m=0.001, feed_gap_m=0.001, radius_m=0.01, turns=2, pitch_m=0.0008),
     "pitch_m \\(0.0008 m\\) must exceed trace_width_m"),
    (dict(shape="circular", trace_width_m=0.001, feed_gap_m=0.001, radius_m=0.01, turns=6, pitch_m=0.002),
     "innermost turn"),
    (dict(shape="circular", trace_width_m=0.001, feed_gap_m=0.001, radius_m=0.01, turns=0), "turns must be"),
    (dict(shape="circular", trace_width_m=0.001, feed_gap_m=0.001, radius_m=0.01, segments_per_turn=4),
     "segments_per_turn"),
])
def test_loop_errors(kw, msg):
    with pytest.raises(ValueError, match=msg):
        Loop(**kw)


def test_external_standoff_and_casing_positions():
    loop = Loop("circular", 0.0015, 0.001, radius_m=0.012)
    ant = ExternalAntenna(loop, (0.005, -0.002), 0.003, 0.001, Dielectric("external_casing", 3.0, loss_tangent=0.01))
    b = ant.build()
    lo, hi = b.bounds()
    # hand calculation: casing bottom at the standoff (3 mm), trace at 3 + 1 = 4 mm, casing top at 5 mm
    assert lo[2] == pytest.approx(0.003) and hi[2] == pytest.approx(0.005)
    assert b.centre == pytest.approx((0.005, -0.002, 0.004))
    assert b.port.number == 1 and b.port.impedance_ohm == 50.0
    assert b.port.centre == pytest.approx((0.005, -0.002 - 0.012, 0.004))
    casing = [p for p in b.primitives if p.material == "external_casing"][0]
    assert casing.priority < b.primitives[0].priority  # metal over dielectric
    assert ExternalAntenna.from_dict(ant.to_dict()) == ant


def test_vertical_external_loop_is_fed_at_its_bottom():
    ant = ExternalAntenna(Loop("square", 0.001, 0.001, side_m=0.02, normal="x"), (0.0, 0.0), 0.002)
    b = ant.build()
    lo, hi = b.bounds()
    # the loop stands in the y-z plane, lowest edge at the standoff
    assert lo[2] == pytest.approx(0.002) and hi[2] == pytest.approx(0.002 + 0.021)
    assert b.port.axis == "y" and b.port.centre[2] == pytest.approx(0.0025)


def test_external_dipole_must_be_horizontal_and_casing_needs_material():
    with pytest.raises(ValueError, match="axis must be 'x' or 'y' for an external dipole"):
        ExternalAntenna(Dipole(0.05, 0.001, "z"))
    with pytest.raises(ValueError, match="casing of thickness 0.001 m needs eps_r"):
        ExternalAntenna(Dipole(0.05, 0.001, "x"), casing_thickness_m=0.001)
    with pytest.raises(ValueError, match="casing: needs thickness_m"):
        ExternalAntenna.from_dict({"type": "dipole", "length_m": 0.05, "feed_gap_m": 0.001,
                                   "casing": {"eps_r": 3.0}})
    with pytest.raises(ValueError, match="type must be one of \\['cad', 'dipole', 'loop'\\]"):
        ExternalAntenna.from_dict({"type": "patch"})
    with pytest.raises(ValueError, match="impedance_ohm must be > 0"):
        ExternalAntenna(Dipole(0.05, 0.001, "x"), impedance_ohm=0.0)


def test_implant_centre_capsule_and_port_two():
    cap = Capsule("cylinder", Dielectric("implant_capsule", 2.9, loss_tangent=0.005), radius_m=0.004,
                  length_m=0.014, axis="y")
    imp = ImplantAntenna(Loop("circular", 0.0005, 0.0005, radius_m=0.0025), 0.01, (0.001, 0.002), cap)
    b = imp.build()
    assert b.centre == (0.001, 0.002, -0.01)
    assert b.port.number == 2
    c = [p for p in b.primitives if p.material == "implant_capsule"][0]
    assert c.start == pytest.approx((0.001, 0.002 - 0.007, -0.01)) and c.radius == 0.004
    mats = (Material("pec", "pec"), Material("implant_capsule", "dielectric", 2.9))
    m = SceneModel(1e9, mats, b.primitives, (b.port,))
    # the trace (metal) wins over the capsule around it
    assert material_at(m, [(0.001, 0.002 + 0.0025, -0.01), (0.001, 0.002, -0.01), (0.001, 0.002, -0.0139)],
                       tol=1e-6) == ["pec", "implant_capsule", "implant_capsule"]
    assert ImplantAntenna.from_dict(imp.to_dict()) == imp


def test_implant_must_fit_its_capsule():
    small = Capsule("box", Dielectric("implant_capsule", 2.9), size_m=(0.008, 0.004, 0.004))
    with pytest.raises(ValueError, match="does not fit in its box capsule"):
        ImplantAntenna(Dipole(0.01, 0.0005, "x"), 0.01, capsule=small)
    with pytest.raises(ValueError, match="implant capsule: size_m\\[2\\] \\(z\\) must be > 0"):
        Capsule("box", Dielectric("implant_capsule", 2.9), size_m=(0.008, 0.004, 0.0))
    with pytest.raises(ValueError, match="implant dipole: depth_m must be > 0 m, got 0.0"):
        ImplantAntenna(Dipole(0.01, 0.0005, "x"), 0.0)
    with pytest.raises(ValueError, match="implant capsule: needs shape"):
        Capsule.from_dict({"eps_r": 3.0})
    with pytest.raises(ValueError, match="implant antenna: missing key depth_m"):
        ImplantAntenna.from_dict({"type": "dipole", "length_m": 0.01, "feed_gap_m": 0.001})


def test_capsule_contains_is_the_analytic_cylinder():
    cap = Capsule("cylinder", Dielectric("implant_capsule", 2.9), radius_m=0.002, length_m=0.01, axis="z")
    r = 0.002 / math.sqrt(2)
    assert list(cap.contains([(r * 0.99, r * 0.99, 0.0049), (r * 1.01, r * 1.01, 0.0), (0, 0, 0.0051)],
                             (0, 0, 0))) == [True, False, False]
