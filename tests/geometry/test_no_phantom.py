"""Phantom ``none``: antennas (the implant antenna too) in air, for free-space validation cases."""
import json

import jsonschema
import numpy as np
import pytest

from bodysweep.geometry import scene_schema
from bodysweep.geometry.phantoms import NoPhantom, phantom_from_dict
from bodysweep.geometry.raster import material_at
from bodysweep.geometry.scene import Scene

SCHEMA = json.loads(scene_schema.SCHEMA_PATH.read_text(encoding="utf-8"))

TWO_DIPOLES_IN_AIR = {
    "phantom": {"type": "none"},
    "external": {"type": "dipole", "length_mm": 150, "feed_gap_mm": 3, "axis": "x", "standoff_mm": 300},
    "implant": {"type": "dipole", "length_mm": 150, "feed_gap_mm": 3, "axis": "x", "depth_mm": 300},
}


def test_schema_accepts_none_and_refuses_extra_keys():
    v = jsonschema.Draft202012Validator(SCHEMA)  # jsonschema reference implementation
    v.validate(TWO_DIPOLES_IN_AIR)
    bad = json.loads(json.dumps(TWO_DIPOLES_IN_AIR))
    bad["phantom"]["size_x_mm"] = 40
    assert not v.is_valid(bad)


def test_round_trip_and_unknown_key():
    assert phantom_from_dict({"type": "none"}) == NoPhantom()
    assert NoPhantom().to_dict() == {"type": "none"}
    with pytest.raises(ValueError, match="phantom none: unknown key"):
        phantom_from_dict({"type": "none", "layers": []})
    s = Scene.from_edge_dict(TWO_DIPOLES_IN_AIR)
    assert Scene.from_dict(json.loads(json.dumps(s.to_dict()))) == s


def test_two_dipoles_in_air_are_where_the_placements_say():
    s = Scene.from_edge_dict(TWO_DIPOLES_IN_AIR)
    m = s.build(1e9)
    assert [p.number for p in m.ports] == [1, 2]
    assert all(not mat.is_tissue for mat in m.materials) and {mat.name for mat in m.materials} == {"pec"}
    # hand calculation: a thin horizontal external dipole's lowest point is its axis, so its centre is at
    # z = standoff = +0.3 m; the implant centre is at z = -depth = -0.3 m: 0.6 m apart, both in air
    assert m.port(1).centre == pytest.approx((0.0, 0.0, 0.3))
    assert m.port(2).centre == pytest.approx((0.0, 0.0, -0.3))
    assert material_at(m, [(0.0, 0.0, 0.0), (0.0, 0.0, -0.29), (0.05, 0.0, -0.3)]) == ["air", "air", "pec"]
    assert not NoPhantom().contains(np.zeros((4, 3))).any()
