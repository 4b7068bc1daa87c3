"""The shipped study schema: a valid draft 2020-12 schema, every key documented, defaults valid."""
from __future__ import annotations

from pathlib import Path

import jsonschema
import pytest

from bodysweep.workflow.study import StudyError, expand, load_study
from bodysweep.workflow.study.schema import study_schema, study_validator

ROOT = Path(__file__).resolve().parents[2]


def _walk_properties(schema, path=""):
    """Yield (key path, sub-schema) for every declared property, through $defs too."""
    if not isinstance(schema, dict):
        return
    for name, sub in schema.get("properties", {}).items():
        yield f"{path}.{name}".lstrip("."), sub
        yield from _walk_properties(sub, f"{path}.{name}")
    for key in ("items", "additionalProperties", "then", "else"):
        if isinstance(schema.get(key), dict):
            yield from _walk_properties(schema[key], f"{path}.{key}")
    for name, sub in schema.get("$defs", {}).items():
        yield from _walk_properties(sub, f"$defs.{name}")


def test_schema_is_valid_draft_2020_12():
    # reference: the JSON Schema 2020-12 meta-schema shipped with the jsonschema library
    schema = study_schema()
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    jsonschema.Draft202012Validator.check_schema(schema)


def test_every_key_has_a_description_and_a_type_or_reference():
    missing = [p for p, sub in _walk_properties(study_schema())
               if not sub.get("description") or not ("type" in sub or "$ref" in sub)]
    assert missing == []


def test_every_default_is_valid_for_its_own_key():
    for p, sub in _walk_properties(study_schema()):
        if "default" in sub and "$ref" not in sub:
            jsonschema.Draft202012Validator(sub).validate(sub["default"])


def test_unit_keys_name_their_unit():
    # numeric keys holding a physical quantity carry the unit in their name (DEVELOPERS.md, units)
    dimensionless = {"max_air_fraction", "max_cases", "seed", "count", "decimals",
                     # explore: counts and factors; range/step/at_most/at_least take the unit of their path or column
                     "budget_cases", "batch", "patience_rounds", "best", "density_factor", "range", "step",
                     "at_most", "at_least", "uncertainty_best"}
    for p, sub in _walk_properties(study_schema()):
        name = p.rsplit(".", 1)[-1]
        types = sub.get("type", [])
        item_types = (sub.get("items") or {}).get("type", [])
        numeric = any(t in ("number", "integer") for t in ([types] if isinstance(types, str) else types))
        numeric |= any(t in ("number", "integer") for t in ([item_types] if isinstance(item_types, str) else item_types))
        if numeric and name not in dimensionless and name not in ("excite", "ranges", "additionalProperties"):
            assert name.endswith(("_MHz", "_g", "_W_per_kg", "_GB", "_hours", "_wavelengths", "_dB", "_factor",
                                  "_fraction")), p


def test_sections_reference_the_scene_and_solver_schemas():
    schema = study_schema()
    assert schema["properties"]["scene"]["$ref"] == "scene.schema.json"
    assert schema["properties"]["solver"]["$ref"] == "solver.schema.json"
    # the solver schema is really used: one of its limits (pml_cells >= 4, solver.schema.json) is enforced
    errors = list(study_validator().iter_errors({"study": "a", "frequencies_MHz": [403], "scene": {},
                                                 "solver": {"pml_cells": 2}}))
    assert any(list(e.absolute_path) == ["solver", "pml_cells"] for e in errors)


@pytest.mark.parametrize("path", sorted((ROOT / "studies").glob("*.yaml")), ids=lambda p: p.name)
def test_shipped_example_studies_load_and_expand(path):
    cases = expand(load_study(path))
    assert cases and len({c.case_id for c in cases}) == len(cases)


def test_study_error_pickles_and_keeps_its_parts():
    import pickle

    err = StudyError("sweep.blocks.0", "bad", [1, 2], "something")
    back = pickle.loads(pickle.dumps(err))
    assert (back.key_path, back.problem, back.value, back.allowed) == ("sweep.blocks.0", "bad", [1, 2], "something")
    assert str(back) == "sweep.blocks.0: bad (got [1, 2]; allowed: something)"


def test_study_error_from_one_message():
    err = StudyError("scene.implant.depth_mm: must be positive")
    assert err.key_path == "scene.implant.depth_mm" and err.problem == "must be positive"
    assert "\n" not in str(err) and str(err).startswith("scene.implant.depth_mm: must be positive")
    assert isinstance(err, ValueError)
