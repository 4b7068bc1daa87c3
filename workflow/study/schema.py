"""The study file's JSON Schema (draft 2020-12) and its errors as one-line :class:`StudyError`.

``workflow/schema/study.schema.json`` references ``scene.schema.json`` (shipped by
:mod:`bodysweep.geometry` in ``geometry/data/``) and ``solver.schema.json`` (``workflow/schema/``).
All three are package data; a missing one is an installation error, never replaced by a looser schema.
"""
from __future__ import annotations

import functools
import json
from importlib import resources
from typing import Any

import jsonschema
import referencing
from jsonschema.exceptions import ValidationError, best_match
from referencing.jsonschema import DRAFT202012

from .errors import StudyError, join_path, value2text
from .paths import get_path, has_path, path2parts

STUDY_SCHEMA_URI = "bodysweep/study.schema.json"
SCENE_SCHEMA_URI = "bodysweep/scene.schema.json"
SOLVER_SCHEMA_URI = "bodysweep/solver.schema.json"


def _read_json(package: str, *parts: str) -> dict:
    """A JSON file shipped as package data (``RuntimeError`` naming it when the installation lacks it)."""
    node = resources.files(package)
    for p in parts:
        node = node / p
    if not node.is_file():
        raise RuntimeError(f"{package}/{'/'.join(parts)} is missing from the installation of bodysweep; "
                           "reinstall the package")
    return json.loads(node.read_text(encoding="utf-8"))


def study_schema() -> dict:
    """The study schema as a dict (a fresh copy)."""
    return _read_json("bodysweep.workflow", "schema", "study.schema.json")


def _resources() -> list[tuple[str, referencing.Resource]]:
    out = []
    for uri, package, parts in ((SCENE_SCHEMA_URI, "bodysweep.geometry", ("data", "scene.schema.json")),
                                (SOLVER_SCHEMA_URI, "bodysweep.workflow", ("schema", "solver.schema.json"))):
        contents = _read_json(package, *parts)
        res = referencing.Resource.from_contents(contents, default_specification=DRAFT202012)
        out.append((uri, res))
        own = res.id()
        if own and own != uri:  # the referenced schema's own $id, for its internal references
            out.append((own, res))
    return out


@functools.lru_cache(maxsize=1)
def study_validator() -> jsonschema.Draft202012Validator:
    """A cached validator for the study schema with its referenced schemas registered."""
    schema = study_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    registry = referencing.Registry().with_resources(_resources())
    registry = registry.with_resource(STUDY_SCHEMA_URI, DRAFT202012.create_resource(schema))
    return jsonschema.Draft202012Validator(schema, registry=registry)


def _allowed(err: ValidationError) -> str:
    v, val = err.validator, err.validator_value
    sch = err.schema if isinstance(err.schema, dict) else {}
    if v == "type":
        return " or ".join(val) if isinstance(val, list) else str(val)
    if v == "enum":
        return "one of " + ", ".join(json.dumps(x) for x in val)
    if v == "const":
        return json.dumps(val)
    if v in ("minimum", "exclusiveMinimum", "maximum", "exclusiveMaximum"):
        lo = sch.get("minimum", sch.get("exclusiveMinimum"))
        hi = sch.get("maximum", sch.get("exclusiveMaximum"))
        lo_op = ">=" if "minimum" in sch else ">"
        hi_op = "<=" if "maximum" in sch else "<"
        parts = ([f"{lo_op} {lo}"] if lo is not None else []) + ([f"{hi_op} {hi}"] if hi is not None else [])
        return "a number " + " and ".join(parts)
    if v == "pattern":
        return sch.get("description") or f"text matching {val}"
    if v in ("minItems", "maxItems"):
        return f"{'at least' if v == 'minItems' else 'at most'} {val} item(s)"
    if v in ("minProperties", "maxProperties"):
        return f"{'at least' if v == 'minProperties' else 'at most'} {val} key(s)"
    if v in ("minLength", "maxLength"):
        return f"{'at least' if v == 'minLength' else 'at most'} {val} character(s)"
    if v == "uniqueItems":
        return "each item once"
    if v in ("additionalProperties", "required", "unevaluatedProperties"):
        props = sorted(sch.get("properties", {}))
        return ", ".join(props) if props else "see the schema"
    return f"see the schema ({v})"


def _unknown_keys(err: ValidationError) -> list[str]:
    props = set((err.schema or {}).get("properties", {})) if isinstance(err.schema, dict) else set()
    if isinstance(err.instance, dict):
        return sorted(str(k) for k in err.instance if k not in props)
    return []


def sch_props(err: ValidationError) -> list[str]:
    """Property names the failing schema declares."""
    return list(err.schema.get("properties", {})) if isinstance(err.schema, dict) else []


def did_you_mean(name: str, choices) -> str:
    """`` (did you mean X?)`` for the nearest of ``choices`` (difflib), else ``""``."""
    import difflib

    near = difflib.get_close_matches(str(name), [str(c) for c in choices], n=1, cutoff=0.6)
    return f" (did you mean {near[0]}?)" if near else ""


def _looks_like_hz(err: ValidationError) -> str:
    """``"403000000 Hz = 403 MHz"`` when the value divided by 1e6 falls in the allowed range, else ``""``."""
    sch = err.schema if isinstance(err.schema, dict) else {}
    x = err.instance
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        return ""
    lo = sch.get("minimum", sch.get("exclusiveMinimum", 0))
    hi = sch.get("maximum", sch.get("exclusiveMaximum"))
    if hi is None or not (lo <= x / 1e6 <= hi):
        return ""
    return f"{x:.10g} Hz = {x / 1e6:.10g} MHz"


def error2study_error(err: ValidationError, prefix: str = "") -> StudyError:
    """Turn one schema error into a one-line :class:`StudyError` naming the key path."""
    path = join_path(prefix, *err.absolute_path)
    v = err.validator
    if v == "required":
        missing = [k for k in err.validator_value if not isinstance(err.instance, dict) or k not in err.instance]
        name = missing[0] if missing else "?"
        return StudyError(join_path(path, name), "required key is missing", None,
                          "required keys: " + ", ".join(err.validator_value), show_value=False)
    if v in ("additionalProperties", "unevaluatedProperties") and err.validator_value is False:
        unknown = _unknown_keys(err)
        name = unknown[0] if unknown else "?"
        return StudyError(join_path(path, name), "unknown key" + did_you_mean(name, sch_props(err)), name,
                          _allowed(err))
    if v == "propertyNames":
        bad = err.instance
        return StudyError(path, f"bad name {value2text(bad)}", bad, "names of letters, digits and _ (not starting with a digit)")
    if v == "maxProperties" and err.validator_value == 1 and isinstance(err.instance, dict):
        return StudyError(path, "give exactly one of the keys", sorted(err.instance),
                          "one of " + ", ".join(sorted(sch_props(err))))
    if v == "minProperties" and isinstance(err.instance, dict) and not err.instance:
        return StudyError(path, "must not be empty", err.instance, _allowed(err))
    if v == "minItems" and isinstance(err.instance, list) and not err.instance:
        return StudyError(path, "must not be empty", err.instance, _allowed(err))
    if v == "enum" and isinstance(err.instance, str):
        return StudyError(path, "not an allowed value" + did_you_mean(err.instance, [str(x) for x in err.validator_value]),
                          err.instance, _allowed(err))
    if v in ("maximum", "exclusiveMaximum") and "_MHz" in str(path):
        hz = _looks_like_hz(err)
        if hz:
            return StudyError(path, f"too large: this looks like Hz ({hz}); give the frequency in MHz", err.instance,
                              _allowed(err))
    problem = {
        "type": "wrong type",
        "enum": "not an allowed value",
        "pattern": "bad format",
        "minimum": "too small", "exclusiveMinimum": "too small",
        "maximum": "too large", "exclusiveMaximum": "too large",
        "uniqueItems": "repeated items",
        "maxItems": "too many items", "minItems": "too few items",
        "minLength": "too short", "maxLength": "too long",
    }.get(v, err.message.split("\n")[0])
    return StudyError(path or "(root)", problem, err.instance, _allowed(err))


def _relevance(err: ValidationError):
    # deepest error first; among equals, the first in document order
    return (-len(err.absolute_path),)


def validate_study_data(data: Any) -> None:
    """Validate plain study data against the schema.

    Raises
    ------
    StudyError
        For the most specific schema error (the deepest key path; ties broken in document order).
    """
    validator = study_validator()
    errors = list(validator.iter_errors(data))
    if not errors:
        return
    err = best_match(errors)
    raise error2study_error(err)


def solver_key_defaults() -> dict[str, Any]:
    """Top-level keys the solver section's schema declares, with their defaults (``None`` if none).

    A sweep may change such a key even when the study file leaves it out (it then has its preset value).
    """
    schema = _read_json("bodysweep.workflow", "schema", "solver.schema.json")
    return {k: v.get("default") for k, v in schema.get("properties", {}).items() if isinstance(v, dict)}


@functools.lru_cache(maxsize=1)
def scene_validator() -> jsonschema.Draft202012Validator:
    """A cached validator of the scene section alone (edge units), for each case after its sweep."""
    registry = referencing.Registry().with_resources(_resources())
    return jsonschema.Draft202012Validator({"$ref": SCENE_SCHEMA_URI}, registry=registry)


def validate_case_scene(scene: Any, context: str) -> None:
    """Validate one case's edge-unit scene; the error names the key under ``scene`` and the case.

    Raises
    ------
    StudyError
        Key path ``scene.<...>``, problem followed by ``context`` (e.g. ``in case f=403MHz depth=5mm``).
    """
    errors = list(scene_validator().iter_errors(scene))
    if errors:
        err = error2study_error(best_match(errors), prefix="scene")
        raise StudyError(err.key_path, f"{err.problem} {context}", err.value, err.allowed,
                         show_value=err.show_value)


#: top-level keywords under which validating the scene section by section equals validating it whole
_SECTIONWISE_KEYWORDS = frozenset({"$schema", "$id", "title", "description", "type", "additionalProperties",
                                   "required", "properties", "$defs", "default", "$comment"})


class CaseSceneChecker:
    """Validates many cases' edge-unit scenes, each distinct part only once.

    The first scene with a given set of top-level keys is validated whole; after that only the
    top-level parts (``phantom``, ``implant``, ...) not seen before are validated, each against its
    own sub-schema. This equals whole validation as long as the scene schema's top level only uses
    ``type``, ``required``, ``additionalProperties`` and ``properties`` (checked; otherwise every scene
    is validated whole).
    """

    def __init__(self):
        from .identity import canonical_json

        self._text = canonical_json
        contents = _read_json("bodysweep.geometry", "data", "scene.schema.json")
        self._sectionwise = set(contents) <= _SECTIONWISE_KEYWORDS
        self._properties = set(contents.get("properties", {}))
        self._shapes: set[tuple] = set()
        self._parts: set[tuple[str, str]] = set()
        self._seen: set[tuple[str, str]] = set()  # (key, repr) of parts known valid: no canonical text needed
        self._validators: dict[str, jsonschema.Draft202012Validator] = {}

    def _part_validator(self, key: str) -> jsonschema.Draft202012Validator:
        if key not in self._validators:
            registry = referencing.Registry().with_resources(_resources())
            self._validators[key] = jsonschema.Draft202012Validator(
                {"$ref": f"{SCENE_SCHEMA_URI}#/properties/{key}"}, registry=registry)
        return self._validators[key]

    def check(self, scene: Any, context: str) -> None:
        """Raise :class:`StudyError` (key path under ``scene``, problem + ``context``) for a bad scene."""
        if not isinstance(scene, dict) or not self._sectionwise:
            validate_case_scene(scene, context)
            return
        shape = tuple(sorted(scene))
        if shape not in self._shapes or any(k not in self._properties for k in scene):
            validate_case_scene(scene, context)
            self._shapes.add(shape)
            self._parts.update((k, self._text(v)) for k, v in scene.items())
            self._seen.update((k, repr(v)) for k, v in scene.items())
            return
        for k, v in scene.items():
            seen = (k, repr(v))
            if seen in self._seen:
                continue
            text = self._text(v)
            if (k, text) in self._parts:
                self._seen.add(seen)
                continue
            errors = list(self._part_validator(k).iter_errors(v))
            if errors:
                err = error2study_error(best_match(errors), prefix=f"scene.{k}")
                raise StudyError(err.key_path, f"{err.problem} {context}", err.value, err.allowed,
                                 show_value=err.show_value)
            self._parts.add((k, text))
            self._seen.add(seen)


# -- values a study leaves unwritten: the solver schema's defaults ----------------------------------------
def declared_solver_key(path: str) -> bool:
    """True for ``solver.<key>`` where ``<key>`` is declared by the solver schema (present or not)."""
    parts = path2parts(path)
    return len(parts) == 2 and parts[0] == "solver" and parts[1] in solver_key_defaults()


def base_value(base: dict, path: str) -> Any:
    """Value at ``path`` in the base, or the solver schema's default for an unwritten solver key."""
    if has_path(base, path):
        return get_path(base, path)
    if declared_solver_key(path):
        return solver_key_defaults().get(path2parts(path)[1])
    return None
