"""The remembered per-part work of the study expansion gives what the straightforward path gives.

References outside the project: ``copy.deepcopy`` of the Python standard library (the plain-data copy
must equal it, shared containers included), and the case id definition of the identity module
(sha256 of the canonical JSON of the whole identity content, recomputed here with ``hashlib``
on each case's own content, without any remembered part). Exact equality: nothing is approximate.
"""
import copy
import hashlib
from pathlib import Path

import pytest
import yaml

from bodysweep.workflow.study import expand, load_study
from bodysweep.workflow.study.cases import plain_copy
from bodysweep.workflow.study.identity import CASE_ID_LENGTH, canonical_json

ROOT = Path(__file__).resolve().parents[2]
STUDIES = sorted((ROOT / "tests" / "study" / "good").glob("*.yaml")) + [
    ROOT / "tests" / "pipeline" / "data" / "tiny.yaml", ROOT / "studies" / "demo_forearm_capsule.yaml"]


@pytest.mark.parametrize("path", STUDIES, ids=lambda p: p.name)
def test_case_ids_are_the_hash_of_each_whole_content(path):
    cases = expand(load_study(path))
    assert cases
    for c in cases:
        text = canonical_json(c.identity_content())
        assert c.case_id == hashlib.sha256(text.encode("utf-8")).hexdigest()[:CASE_ID_LENGTH]
    # the cases do not share mutable parts (each case.json is its own data)
    if len(cases) > 1:
        assert cases[0].scene is not cases[1].scene and cases[0].solver is not cases[1].solver


@pytest.mark.parametrize("path", STUDIES, ids=lambda p: p.name)
def test_plain_copy_equals_deepcopy(path):
    raw = yaml.safe_load(path.read_text())
    a, b = plain_copy(raw), copy.deepcopy(raw)
    assert a == b and repr(a) == repr(b)  # repr also tells 1 from 1.0 and True, and key order


def test_plain_copy_keeps_shared_containers_shared_like_deepcopy():
    raw = yaml.safe_load("a: &x {r_mm: 1.0, l: [1, 2]}\nb: *x\nc: [*x, 3]\n")
    assert raw["a"] is raw["b"]  # YAML anchors give one object
    for out in (plain_copy(raw), copy.deepcopy(raw)):
        assert out == raw and out["a"] is out["b"] is out["c"][0] and out["a"] is not raw["a"]
