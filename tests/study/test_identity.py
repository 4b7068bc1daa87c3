"""Case identity: stable, insensitive to spelling of equal numbers and key order, sensitive to content."""
from __future__ import annotations

import copy
import hashlib
import json
import os
import subprocess
import sys
from pathlib import Path

import yaml

from bodysweep.workflow.study import canonical_json, content2case_id, expand, load_study

GOOD = Path(__file__).parent / "good"


def _minimal() -> dict:
    return yaml.safe_load((GOOD / "minimal.yaml").read_text())


def _ids(study) -> list[str]:
    return [c.case_id for c in expand(study)]


def test_case_id_is_sha256_of_canonical_json():
    case = expand(load_study(GOOD / "minimal.yaml"))[0]
    content = case.identity_content()
    # reference: hashlib.sha256 (FIPS 180-4) over json.dumps with sorted keys and no whitespace (stdlib json)
    text = json.dumps(content, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    # the only differences allowed between stdlib json and our canonical form: integers written as
    # floats, and floats rounded to 15 significant digits (relative change below 5e-15)
    def close(a, b):
        if isinstance(a, dict):
            return isinstance(b, dict) and a.keys() == b.keys() and all(close(a[k], b[k]) for k in a)
        if isinstance(a, list):
            return isinstance(b, list) and len(a) == len(b) and all(close(x, y) for x, y in zip(a, b))
        if isinstance(a, (int, float)) and not isinstance(a, bool):
            return abs(a - b) <= 5e-15 * abs(a)
        return a == b
    assert close(json.loads(text), json.loads(canonical_json(content)))
    assert canonical_json(content) == json.dumps(json.loads(canonical_json(content)), sort_keys=True,
                                                 separators=(",", ":"), ensure_ascii=False)
    assert case.case_id == hashlib.sha256(canonical_json(content).encode()).hexdigest()[:12]
    assert case.case_id == content2case_id(content)


def test_canonical_json_spells_equal_numbers_alike():
    # analytic: 10 == 10.0 == 1e1 and -0.0 == 0.0 as real numbers
    assert canonical_json({"a": 10}) == canonical_json({"a": 10.0}) == canonical_json({"a": 1e1}) == '{"a":10.0}'
    assert canonical_json([-0.0]) == canonical_json([0]) == "[0.0]"
    assert canonical_json({"b": 1, "a": 2}) == canonical_json({"a": 2, "b": 1}) == '{"a":2.0,"b":1.0}'
    # rounding to 15 significant digits hides binary conversion noise (IEEE 754 double: ~15.95 digits)
    assert canonical_json([0.1 + 0.2]) == "[0.3]"
    assert canonical_json([0.1 * 1e-3]) == canonical_json([0.0001])
    # while a difference in the 12th digit is kept (repr gives the shortest round-tripping text)
    assert canonical_json([1.00000000001]) == "[1.00000000001]"
    # a difference in the 15th significant digit changes the text
    assert canonical_json([0.123456789012345]) != canonical_json([0.123456789012346])


def test_same_id_for_10_vs_10p0_vs_1e1_and_key_order(tmp_path):
    text = (GOOD / "minimal.yaml").read_text()
    variants = [text, text.replace("depth_mm: 10", "depth_mm: 10.0"), text.replace("depth_mm: 10", "depth_mm: 1e1"),
                text.replace("depth_mm: 10", "depth_mm: 1.0e+1")]
    ids = set()
    for i, t in enumerate(variants):
        p = tmp_path / f"v{i}.yaml"
        p.write_text(t)
        ids.add(tuple(_ids(load_study(p))))
    # reversed key order of every mapping (same data)
    def rev(obj):
        if isinstance(obj, dict):
            return {k: rev(obj[k]) for k in reversed(list(obj))}
        if isinstance(obj, list):
            return [rev(v) for v in obj]
        return obj
    ids.add(tuple(_ids(load_study(rev(_minimal())))))
    assert len(ids) == 1


def test_solver_defaults_written_out_give_the_same_id():
    # the resolved solver settings are hashed: spelling out a default of the standard preset changes nothing
    # (default from workflow/schema/solver.schema.json: cells_per_wavelength 20)
    a = _minimal()
    b = copy.deepcopy(a)
    b["solver"] = {"preset": "standard", "cells_per_wavelength": 20}
    assert _ids(load_study(a)) == _ids(load_study(b))


def test_id_changes_when_any_resolved_value_changes():
    base = _minimal()
    ref = _ids(load_study(base))[0]
    changes = [
        ("scene", lambda d: d["scene"]["implant"].__setitem__("depth_mm", 10.001)),
        ("layer", lambda d: d["scene"]["phantom"]["layers"][0].__setitem__("tissue", "skin_wet")),
        ("frequency", lambda d: d.__setitem__("frequencies_MHz", [403.5])),
        ("solver", lambda d: d.__setitem__("solver", {"pml_cells": 10})),
        ("sar limit", lambda d: d.__setitem__("sar", {"limits": [{"mass_g": 10, "limit_W_per_kg": 2.0, "source": "a"}]})),
        ("sar source", lambda d: d.__setitem__("sar", {"limits": [{"mass_g": 10, "limit_W_per_kg": 2.0, "source": "b"}]})),
        ("air fraction", lambda d: d.__setitem__("sar", {"max_air_fraction": 0.2})),
        ("excite", lambda d: d.__setitem__("excite", [1, 2])),
    ]
    seen = {ref}
    for what, change in changes:
        d = copy.deepcopy(base)
        change(d)
        new = _ids(load_study(d))[0]
        assert new not in seen, what
        seen.add(new)


def test_id_changes_with_code_versions(monkeypatch):
    import bodysweep.geometry as geometry

    ref = _ids(load_study(_minimal()))
    monkeypatch.setattr(geometry, "BUILDER_VERSION", "changed", raising=False)
    assert _ids(load_study(_minimal())) != ref


def test_study_name_and_label_are_not_part_of_the_id():
    a = _minimal()
    b = copy.deepcopy(a)
    b["study"] = "another_study"
    b["description"] = "something else"
    assert _ids(load_study(a)) == _ids(load_study(b))


def test_thread_count_is_not_part_of_the_id():
    # threads decide how the engine runs a case, not what it computes (openEMS splits the same update
    # equations over threads; common practice): a study rerun with other threads reuses its cases
    a = _minimal()
    b = copy.deepcopy(a)
    a["solver"] = {"threads": 1}
    b["solver"] = {"threads": 4}
    assert _ids(load_study(a)) == _ids(load_study(b))
    assert expand(load_study(b))[0].solver["threads"] == 4  # still recorded in case.json


def test_case_json_with_other_threads_keeps_its_mtime(tmp_path):
    # Snakemake reruns a job whose input is newer than its output (Snakemake docs, rerun triggers "mtime"):
    # a case.json whose only change is the thread count is rewritten but keeps its modification time
    from bodysweep.workflow.pipeline import write_case_json

    one = expand(load_study({**_minimal(), "solver": {"threads": 1}}))[0].to_dict()
    two = expand(load_study({**_minimal(), "solver": {"threads": 2}}))[0].to_dict()
    deeper = copy.deepcopy(one)
    deeper["scene"]["implant"]["depth_m"] = 0.02
    path = tmp_path / "case.json"
    assert write_case_json(path, one)
    os.utime(path, ns=(1_000_000_000, 1_000_000_000))
    assert write_case_json(path, two)
    assert json.loads(path.read_text())["solver"]["threads"] == 2
    assert path.stat().st_mtime_ns == 1_000_000_000
    assert write_case_json(path, deeper)  # a change that alters results moves the mtime
    assert path.stat().st_mtime_ns != 1_000_000_000


def test_adding_an_unrelated_case_keeps_the_other_ids():
    d = _minimal()
    d["sweep"] = {"parameters": {"depth": "scene.implant.depth_mm"}, "blocks": [{"grid": {"depth": [5, 10]}}]}
    first = {c.label: c.case_id for c in expand(load_study(d))}
    d["sweep"]["blocks"][0]["grid"]["depth"] = [5, 7.5, 10]
    d["frequencies_MHz"] = [403, 915]
    second = {c.label: c.case_id for c in expand(load_study(d))}
    assert len(second) == 6
    for label, cid in first.items():
        assert second[label] == cid
    # the unswept minimal study (depth 10 mm written in the scene) is the same case as depth=10 here
    assert first["f=403MHz depth=10mm"] == _ids(load_study(_minimal()))[0]


def test_ids_are_the_same_in_another_process():
    study_file = GOOD / "every_sweep_kind.yaml"
    here = _ids(load_study(study_file))
    code = ("import json, sys; from bodysweep.workflow.study import load_study, expand; "
            "print(json.dumps([c.case_id for c in expand(load_study(sys.argv[1]))]))")
    env = dict(os.environ, PYTHONHASHSEED="12345")
    out = subprocess.run([sys.executable, "-c", code, str(study_file)], capture_output=True, text=True, env=env,
                         check=True, timeout=120)
    assert json.loads(out.stdout) == here
    assert len(set(here)) == len(here) and all(len(i) == 12 for i in here)
