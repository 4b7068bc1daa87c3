"""The scene spec: round trips, canonical JSON, build, placement under a depth sweep, every check."""
import copy
import json

import numpy as np
import pytest

from bodysweep.geometry import examples
from bodysweep.geometry.model import SceneModel
from bodysweep.geometry.raster import material_at
from bodysweep.geometry.scene import Scene, normalise_floats
from bodysweep.geometry.tissues import tissue_properties
from bodysweep.geometry.units import from_edge_units

EXAMPLES = [examples.forearm_capsule_scene, examples.slab_dipole_scene, examples.liquid_box_scene]


@pytest.mark.parametrize("make", EXAMPLES)
def test_examples_round_trip_exactly(make):
    s = Scene.from_edge_dict(make())
    d = s.to_dict()
    assert Scene.from_dict(d) == s
    assert Scene.from_dict(json.loads(json.dumps(d))).to_dict() == d
    assert Scene.from_dict(d).canonical_json() == s.canonical_json()


@pytest.mark.parametrize("make", EXAMPLES)
def test_build_gives_a_model_that_round_trips(make):
    s = Scene.from_edge_dict(make())
    m = s.build(433e6)
    assert SceneModel.from_dict(json.loads(json.dumps(m.to_dict()))) == m
    assert [p.number for p in m.ports] == [1, 2]
    assert set(m.anchors) == {"surface", "implant", "external_feed"}
    assert m.anchors["external_feed"] == pytest.approx(m.port(1).centre)
    names = {p.material for p in m.primitives}
    assert names == {x.name for x in m.materials}
    assert len({p.name for p in m.primitives}) == len(m.primitives)


def test_materials_evaluated_at_the_build_frequency():
    s = Scene.from_edge_dict(examples.forearm_capsule_scene())
    for f in (403e6, 2.45e9):
        m = s.build(f)
        eps, sig = tissue_properties("muscle", f)
        assert m.material("muscle").eps_r == pytest.approx(eps) and m.material("muscle").sigma_S_per_m == \
            pytest.approx(sig)
        assert m.material("copper").kind == "conductor" and m.material("copper").sigma_S_per_m == 5.8e7
        # analytic: casing sigma = w eps0 eps_r tan(delta)
        assert m.material("external_casing").sigma_S_per_m == pytest.approx(2 * np.pi * f * 8.8541878128e-12 * 3 * 0.01)
    liquid = Scene.from_edge_dict(examples.liquid_box_scene()).build(650e6).material("muscle_like_liquid")
    # linear interpolation half-way between 400 and 900 MHz (analytic)
    assert liquid.eps_r == pytest.approx(56.0) and liquid.sigma_S_per_m == pytest.approx(0.875)


def test_implant_in_muscle_at_the_requested_depth():
    for depth in (5.0, 10.0, 15.0):
        m = Scene.from_edge_dict(examples.slab_dipole_scene(depth)).build(915e6)
        assert m.anchors["implant"] == pytest.approx((0.0, 0.0, -depth * 1e-3))
        # just outside the capsule, below it: tissue of the layer at that depth (slab: muscle below 6 mm)
        below = material_at(m, [(0.0, 0.0, -depth * 1e-3 - 0.0025)])[0]
        assert below == "muscle"


def test_depth_sweep_moves_implant_anchored_concentrators_only():
    base = examples.forearm_capsule_scene(8.0)
    base["concentrators"].append({"type": "ring", "anchor": "surface", "offset_mm": [0.0, 0.0, -2.0],
                                  "radius_mm": 10.0, "trace_width_mm": 1.0})
    zs = {}
    for depth in (8.0, 12.0):
        d = copy.deepcopy(base)
        d["implant"]["depth_mm"] = depth
        m = Scene.from_edge_dict(d).build(403e6)
        rod = [p for p in m.primitives if p.name.startswith("conc0")][0]
        ring = [p for p in m.primitives if p.name.startswith("conc1")][0]
        zs[depth] = (rod.start[2], ring.elevation)
    # the rod pair is anchored to the implant: it moves down by the 4 mm the implant moves; the ring stays
    assert zs[12.0][0] - zs[8.0][0] == pytest.approx(-0.004)
    assert zs[12.0][1] == zs[8.0][1] == pytest.approx(-0.002)


def test_canonical_json_is_stable_and_normalises_floats():
    a = Scene.from_edge_dict(examples.slab_dipole_scene())
    d = a.to_dict()
    d["phantom"]["layers"][0]["thickness_m"] = 0.002 + 1e-18  # 0.002 with round-off: 0.002000000000000001
    b = Scene.from_dict(d)
    assert b.to_dict() != a.to_dict()
    assert b.canonical_json() == a.canonical_json()
    assert json.loads(a.canonical_json()) == normalise_floats(a.to_dict())
    c = Scene.from_edge_dict(examples.slab_dipole_scene(11.0))
    assert c.canonical_json() != a.canonical_json()
    assert normalise_floats({"x": -0.0, "n": 3, "b": True}) == {"x": 0.0, "n": 3, "b": True}
    assert ", " not in a.canonical_json() and list(json.loads(a.canonical_json())) == sorted(json.loads(a.canonical_json()))


def test_implant_without_capsule_and_scene_without_implant():
    d = from_edge_units(examples.slab_dipole_scene())
    del d["implant"]["capsule"]
    s = Scene.from_dict(d)
    assert "capsule" not in s.to_dict()["implant"]
    d2 = from_edge_units(examples.slab_dipole_scene())
    del d2["implant"]
    m = Scene.from_dict(d2).build(433e6)
    assert [p.number for p in m.ports] == [1] and "implant" not in m.anchors


def _edge(make=examples.forearm_capsule_scene, **kw):
    return copy.deepcopy(make(**kw))


def _err(d, msg):
    with pytest.raises(ValueError, match=msg):
        Scene.from_edge_dict(d)


def test_error_implant_outside_phantom():
    _err(_edge(depth_mm=2.0), "implant outside the phantom: its capsule reaches .* at depth_m = 0.002 m")
    d = _edge(examples.slab_dipole_scene, depth_mm=35.0)
    _err(d, "implant outside the phantom")
    d = _edge(examples.liquid_box_scene, depth_mm=3.0)
    _err(d, "keep it inside the liquid")
    d = _edge()
    d["implant"]["position_mm"] = [30.0, 0.0]
    _err(d, "implant outside the phantom")


def test_error_concentrator_too_close_to_implant():
    d = _edge()
    d["concentrators"][0]["offset_mm"] = [4.6, 0.0, 0.0]  # capsule radius 4 mm + rod radius 0.5 mm: 0.1 mm gap
    _err(d, r"concentrator 0 \(rod_pair\) is 0.1 mm from the implant; the minimum clearance is 0.5 mm")
    d["min_clearance_mm"] = 0.05
    Scene.from_edge_dict(d)  # allowed with a smaller clearance


def test_error_external_antenna_overlaps_body():
    d = _edge()
    d["external"]["standoff_mm"] = -0.5
    _err(d, "external antenna overlaps the body: its lowest point is at z = -0.0005 m")


def test_error_layer_thickness_and_port_gap():
    d = _edge()
    d["phantom"]["layers"][1]["thickness_mm"] = 0.0
    _err(d, "layer 'fat_not_infiltrated': thickness_m must be > 0 m, got 0.0")
    d = _edge()
    d["implant"]["feed_gap_mm"] = 0.0
    _err(d, "loop: feed_gap_m must be > 0 m, got 0.0")


def test_error_materials():
    d = _edge()
    d["external"]["conductor"] = "silver"
    _err(d, "external antenna conductor: material 'silver' is neither declared")
    d = _edge()
    d["materials"].append({"type": "conductor", "name": "copper"})
    _err(d, "'copper' is declared twice")
    d = _edge()
    d["materials"].append({"type": "conductor", "name": "muscle"})
    _err(d, "'muscle' is a built-in or reserved name")
    d = _edge()
    d["materials"].append({"type": "dielectric", "name": "implant_capsule", "eps_r": 2.0})
    _err(d, "'implant_capsule' is a built-in or reserved name")


def test_error_unknown_and_missing_keys_and_frequency():
    d = _edge()
    d["colour"] = "blue"
    _err(d, r"scene: unknown key\(s\) \['colour'\]")
    d = _edge()
    del d["external"]
    _err(d, "scene: missing key 'external'")
    d = _edge()
    d["implant"]["wobble_mm"] = 1.0
    _err(d, r"implant antenna loop: unknown key\(s\) \['wobble_m'\]")
    with pytest.raises(ValueError, match="frequency_Hz must be > 0"):
        Scene.from_edge_dict(_edge()).build(0.0)
    with pytest.raises(ValueError, match="liquid 'muscle_like_liquid': no data at 3e\\+09 Hz"):
        Scene.from_edge_dict(_edge(examples.liquid_box_scene)).build(3e9)
