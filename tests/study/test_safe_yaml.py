"""Safe reading of study files: plain data only, bombs refused before they are built."""
from __future__ import annotations

import time

import pytest
import yaml

from bodysweep.workflow.study import StudyError
from bodysweep.workflow.study import safe_yaml
from bodysweep.workflow.study.safe_yaml import bytes2text, load_yaml_file, text2data


def test_scalars_follow_the_yaml_1_2_core_rules():
    # YAML 1.2.2 spec, 10.3 core schema: 1e1 is a float; yes/no are strings; no octal 010 / sexagesimal
    data = text2data("a: 1e1\nb: 010\nc: yes\nd: 2026-12-02\ne: 1:30\nf: 10\ng: -3.5\nh: ~\ni: true\nj: 0x1A\nk: .5\n")
    assert data == {"a": 10.0, "b": "010", "c": "yes", "d": "2026-12-02", "e": "1:30", "f": 10, "g": -3.5,
                    "h": None, "i": True, "j": "0x1A", "k": 0.5}
    assert type(data["f"]) is int and type(data["a"]) is float


def test_same_plain_data_as_pyyaml_safe_load_for_ordinary_files():
    # reference: PyYAML safe_load on a file without the ambiguous YAML 1.1 forms
    text = "study: x\nlist: [1, 2.5, -3, text, null, true]\nnested: {a: {b: [ {c: 1} ]}}\n"
    assert text2data(text) == yaml.safe_load(text)


@pytest.mark.parametrize("text, key", [
    ("a: !!python/object/apply:os.system ['echo hi']\n", "a"),
    ("a:\n  b: !!python/object/new:list [[1]]\n", "a.b"),
    ("a: [1, !!python/name:os.system ]\n", "a.1"),
    ("a: !!python/tuple [1, 2]\n", "a"),
    ("a: !custom 3\n", "a"),
    ("a: !!timestamp 2026-12-02\n", "a"),
    ("a: !!omap [{x: 1}]\n", "a"),
])
def test_constructing_tags_are_refused_with_their_key(text, key, monkeypatch):
    import os
    called = []
    monkeypatch.setattr(os, "system", lambda *a: called.append(a) or 0)
    with pytest.raises(StudyError) as info:
        text2data(text)
    assert info.value.key_path == key
    assert "not allowed" in str(info.value)
    assert called == []


def test_alias_bomb_is_refused_quickly():
    text = "a: &a [x, x, x, x, x, x, x, x, x, x]\n"
    for i in range(1, 10):  # 10**10 strings once expanded
        p, c = f"l{i - 1}" if i > 1 else "a", f"l{i}"
        text += f"{c}: &{c} [" + ", ".join([f"*{p}"] * 10) + "]\n"
    t0 = time.perf_counter()
    with pytest.raises(StudyError, match="alias"):
        text2data(text)
    assert time.perf_counter() - t0 < 2.0


def test_moderate_alias_use_is_fine():
    assert text2data("base: &b {x: 1}\nu: *b\nv: *b\n") == {"base": {"x": 1}, "u": {"x": 1}, "v": {"x": 1}}


def test_merge_key_is_allowed_and_duplicate_keys_are_not():
    assert text2data("b: &b {x: 1}\nc:\n  <<: *b\n  y: 2\n")["c"] == {"x": 1, "y": 2}
    with pytest.raises(StudyError) as info:
        text2data("a:\n  x: 1\n  x: 2\n")
    assert info.value.key_path == "a.x"


def test_non_utf8_and_size_limits(tmp_path, monkeypatch):
    with pytest.raises(StudyError) as info:
        bytes2text(b"study: caf\xe9\n")
    assert info.value.key_path == "file" and "offset 10" in str(info.value)
    assert bytes2text("\ufeffstudy: x".encode("utf-8")) == "study: x"  # a UTF-8 byte-order mark is accepted
    monkeypatch.setattr(safe_yaml, "MAX_FILE_BYTES", 100)
    p = tmp_path / "big.yaml"
    p.write_text("a: " + "x" * 200 + "\n")
    with pytest.raises(StudyError, match="too large"):
        load_yaml_file(p)


def test_missing_file_is_a_study_error(tmp_path):
    with pytest.raises(StudyError) as info:
        load_yaml_file(tmp_path / "nope.yaml")
    assert info.value.key_path == "file"


def test_deep_nesting_is_refused():
    with pytest.raises(StudyError) as info:
        text2data("a: " + "[" * 5000 + "]" * 5000 + "\n")
    assert info.value.key_path == "file"
