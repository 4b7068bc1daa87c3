"""The edge-unit JSON Schema of the scene section: valid draft 2020-12, in sync, agrees with the specs."""
import copy
import dataclasses
import json

import jsonschema
import pytest

from bodysweep.geometry import antennas, concentrators, examples, phantoms, planar, scene_schema
from bodysweep.geometry.scene import Scene
from bodysweep.geometry.units import from_edge_units

SCHEMA = json.loads(scene_schema.SCHEMA_PATH.read_text(encoding="utf-8"))
VALIDATOR = jsonschema.Draft202012Validator(SCHEMA)
EXAMPLES = [examples.forearm_capsule_scene, examples.slab_dipole_scene, examples.liquid_box_scene]


def test_schema_file_is_generated_from_the_module_and_is_valid_2020_12():
    assert SCHEMA == scene_schema.scene_schema(), "run: python -m bodysweep.geometry.scene_schema"
    jsonschema.Draft202012Validator.check_schema(SCHEMA)  # jsonschema reference implementation
    assert SCHEMA["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    assert SCHEMA["type"] == "object" and SCHEMA["additionalProperties"] is False


@pytest.mark.parametrize("make", EXAMPLES)
def test_sample_scene_validates_and_loads(make):
    d = make()
    VALIDATOR.validate(d)
    s = Scene.from_dict(from_edge_units(d))
    assert s.build(433e6).ports


DIMENSIONLESS = {"eps_r", "loss_tangent", "turns", "segments_per_turn", "count", "segments", "legs", "label"}  # label: an integer in a label volume
UNIT_SUFFIXES = ("_mm", "_MHz", "_deg", "_ohm", "_S_per_m", "_kg_m3")


def _walk(node, path="#"):
    if isinstance(node, dict):
        yield path, node
        for k, v in node.items():
            yield from _walk(v, f"{path}/{k}")
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _walk(v, f"{path}/{i}")


def test_every_key_has_description_type_and_unit_in_its_name():
    n = 0
    for path, node in _walk(SCHEMA):
        if "properties" not in node or path.endswith("/if"):
            continue
        if "allOf" not in node:  # dispatchers delegate to variants that forbid other keys
            assert node.get("additionalProperties") is False, path
        for key, prop in node["properties"].items():
            n += 1
            assert prop.get("description"), f"{path}/{key} has no description"
            assert "type" in prop or "const" in prop or "$ref" in prop, f"{path}/{key} has no type"
            numeric = prop.get("type") in ("number", "integer") or prop.get("items", {}).get("type") == "number"
            if numeric and key not in DIMENSIONLESS:
                assert key.endswith(UNIT_SUFFIXES), f"{path}/{key}: unit missing from the name"
    assert n > 100


# $defs variant -> spec class whose SI field defaults the schema's defaults must match
VARIANTS = {
    "external_dipole": antennas.Dipole, "external_loop": antennas.Loop, "implant_loop": antennas.Loop,
    "layered_cylinder": phantoms.LayeredCylinder, "concentrator_rod_pair": concentrators.RodPair,
    "concentrator_crossed_pairs": concentrators.CrossedPairs, "concentrator_rod_array": concentrators.RodArray,
    "concentrator_ring": concentrators.Ring, "concentrator_rod": concentrators.Rod,
    "implant_inverted_f": planar.InvertedF, "implant_meander": planar.MeanderLine, "implant_spiral": planar.Spiral,
}


@pytest.mark.parametrize("name,cls", sorted(VARIANTS.items()))
def test_schema_defaults_match_spec_defaults(name, cls):
    fields = {f.name: f.default for f in dataclasses.fields(cls) if f.default is not dataclasses.MISSING}
    checked = 0
    for key, prop in SCHEMA["$defs"][name]["properties"].items():
        if "default" not in prop:
            continue
        (si_key, si_value), = from_edge_units({key: prop["default"]}).items()
        if si_key in fields:
            want = fields[si_key]
            want = list(want) if isinstance(want, tuple) else want
            assert si_value == pytest.approx(want) if isinstance(want, (int, float)) else si_value == want, key
            checked += 1
    assert checked >= 1


@pytest.mark.parametrize("mutate,where", [
    (lambda d: d["phantom"]["layers"][0].update(thickness_mm=0.0), "thickness_mm"),
    (lambda d: d["implant"].update(wobble_mm=1.0), "wobble_mm"),
    (lambda d: d["external"].update(axis="z", type="dipole", length_mm=50.0), "axis"),
    (lambda d: d["concentrators"][0].update(type="helix"), "helix"),
    (lambda d: d["external"]["casing"].update(sigma_S_per_m=0.01), "casing"),
    (lambda d: d.update(phantom={"type": "layered_slab", "layers": []}), "layers"),
])
def test_bad_samples_fail_both_the_schema_and_the_spec(mutate, where):
    d = copy.deepcopy(examples.forearm_capsule_scene())
    mutate(d)
    errors = list(VALIDATOR.iter_errors(d))
    assert errors, where
    with pytest.raises(ValueError):
        Scene.from_edge_dict(d)
