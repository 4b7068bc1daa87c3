"""Solver settings: presets, overrides, exact dict round trip, errors, and the study-file JSON Schema."""
import json
from importlib.resources import files

import jsonschema
import pytest

from bodysweep.geometry.units import from_edge_units
from bodysweep.workflow.meshing.settings import (PRESETS, SETTING_KEYS, SolverSettings, preset,
                                                settings_from_dict)


def _schema() -> dict:
    return json.loads(files("bodysweep.workflow").joinpath("schema/solver.schema.json").read_text())


def test_standard_preset_is_the_default():
    assert settings_from_dict(None) == SolverSettings() == preset("standard")
    assert settings_from_dict({}) == SolverSettings()


@pytest.mark.parametrize("name", sorted(PRESETS))
def test_to_dict_round_trips_exactly_through_json(name):
    s = preset(name)
    d = json.loads(json.dumps(s.to_dict()))
    assert settings_from_dict(d) == s
    assert settings_from_dict(d).to_dict() == s.to_dict()


def test_overrides_merge_onto_the_preset():
    s = settings_from_dict({"preset": "draft", "cells_per_wavelength": 15, "excite_ports": [1, 2]})
    assert s.cells_per_wavelength == 15.0 and s.excite_ports == (1, 2)
    assert s.boundary == PRESETS["draft"].boundary  # untouched keys come from the preset


def test_band_is_centred_on_the_case_frequency():
    s = SolverSettings(band_fraction=0.3, n_band_points=201)
    lo, hi = s.band_Hz(403.5e6)
    assert lo == pytest.approx(403.5e6 * 0.85) and hi == pytest.approx(403.5e6 * 1.15)  # analytic
    f = s.band_frequencies_Hz(403.5e6)
    assert f.shape == (201,) and f[100] == pytest.approx(403.5e6)
    assert SolverSettings(end_criterion_dB=-50).end_criterion_linear == pytest.approx(1e-5)  # analytic, 10^(-50/10)


@pytest.mark.parametrize("key, value, words", [
    ("cells_per_wavelength", 3, "6 to 200"),
    ("max_growth_ratio", 2.5, "1.05 to 2"),
    ("min_cell_m", 0.5, "1e-2"),
    ("port_cells", 0, "1 to 20"),
    ("port_cells", 2.5, "integer"),
    ("boundary", "abc", "pml"),
    ("pml_cells", 2, "4 to 20"),
    ("end_criterion_dB", 10, "-120 to -10"),
    ("excite_ports", [], "non-empty"),
    ("excite_ports", [1, 1], "distinct"),
    ("band_fraction", 0.0, "0.01 to 1.5"),
    ("threads", -1, "0 (auto)"),
])
def test_bad_values_are_refused_with_key_value_and_range(key, value, words):
    with pytest.raises(ValueError) as e:
        settings_from_dict({key: value})
    msg = str(e.value)
    assert key in msg and repr(value if not isinstance(value, list) else tuple(value)) in msg and words in msg


def test_unknown_keys_and_unconverted_mm_are_refused():
    with pytest.raises(ValueError, match="unknown key.*from_edge_units"):
        settings_from_dict({"min_cell_mm": 0.1})
    with pytest.raises(ValueError, match="unknown"):
        settings_from_dict({"cells_per_lambda": 10})
    with pytest.raises(ValueError, match="preset 'ultra' is unknown"):
        settings_from_dict({"preset": "ultra"})


def test_schema_is_a_valid_draft_2020_schema_covering_every_setting():
    schema = _schema()
    jsonschema.Draft202012Validator.check_schema(schema)  # jsonschema library
    assert schema["additionalProperties"] is False
    props = schema["properties"]
    edge_names = {k[:-2] + "_mm" if k.endswith("_m") else k for k in SETTING_KEYS}
    assert set(props) == edge_names | {"preset"}
    for key, p in props.items():
        assert p["description"] and "type" in p and "default" in p, key


def test_schema_defaults_are_the_standard_preset_after_edge_unit_conversion():
    props = _schema()["properties"]
    study_section = {k: p["default"] for k, p in props.items()}
    jsonschema.validate(study_section, _schema())
    assert settings_from_dict(from_edge_units(study_section)) == PRESETS["standard"]


def test_study_section_with_mm_converts_and_validates():
    section = {"preset": "fine", "min_cell_mm": 0.05, "excite_ports": [1, 2]}
    jsonschema.validate(section, _schema())
    s = settings_from_dict(from_edge_units(section))
    assert s.min_cell_m == pytest.approx(5e-5)
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate({"min_cell_m": 5e-5}, _schema())  # SI key is not a study-file key
