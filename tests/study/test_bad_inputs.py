"""The bad-input corpus: every malformed or hostile study file gives a one-line StudyError naming the key."""
from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from bodysweep.workflow.study import StudyError, expand, load_study

HERE = Path(__file__).parent / "bad_inputs"
EXPECTED: dict[str, str] = yaml.safe_load((HERE / "expected.yaml").read_text(encoding="utf-8"))


def test_corpus_is_complete():
    files = sorted(p.name for p in HERE.glob("*.yaml") if p.name != "expected.yaml")
    assert sorted(EXPECTED) == files
    assert len(files) >= 40  # the reliability issue asks for at least 40 (project requirement)


@pytest.mark.parametrize("name", sorted(EXPECTED))
def test_bad_input_is_refused_with_one_line_naming_the_key(name):
    with pytest.raises(StudyError) as info:
        expand(load_study(HERE / name), check_scene=False)
    err = info.value
    text = str(err)
    assert "\n" not in text and "\r" not in text
    assert EXPECTED[name] in err.key_path, text
    # the documented message form "<key path>: <problem> (got <value>; allowed: <...>)"
    assert text.startswith(err.key_path + ": ")
    assert "(got " in text and "; allowed: " in text and text.endswith(")")
    assert len(text) < 600


@pytest.mark.parametrize("name", sorted(EXPECTED))
def test_bad_input_refused_with_scene_builder_too(name):
    # with the scene builder enabled the study layer must still refuse, naming the same key
    with pytest.raises(StudyError) as info:
        expand(load_study(HERE / name))
    assert EXPECTED[name] in info.value.key_path or info.value.key_path == "scene", str(info.value)
