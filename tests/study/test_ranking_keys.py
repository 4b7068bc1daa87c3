"""The study keys that shape tables and report only (figure_of_merit, baseline): checked, never in a case id."""
from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from bodysweep.workflow.study import StudyError, expand, load_study

GOOD = Path(__file__).parent / "good"


def _study(**extra) -> dict:
    d = yaml.safe_load((GOOD / "every_sweep_kind.yaml").read_text())
    d.update(extra)
    return d


def test_ranking_keys_do_not_enter_the_case_identity():
    # engineer-agnostic identity (common practice): a key that changes no result changes no case id
    plain = [c.case_id for c in expand(load_study(_study()), check_scene=False)]
    keyed = [c.case_id for c in expand(load_study(_study(figure_of_merit="S21", baseline={"rods": "none"})),
                                       check_scene=False)]
    assert plain == keyed
    by_id = [c.case_id for c in expand(load_study(_study(baseline=plain[0])), check_scene=False)]
    assert by_id == plain


@pytest.mark.parametrize("extra, key, text", [
    ({"figure_of_merit": "best"}, "figure_of_merit", "implant_power"),
    ({"baseline": {"rod": "none"}}, "baseline.rod", "did you mean rods?"),
    ({"baseline": {"rods": "triple"}}, "baseline.rods", "none, pair"),
    ({"baseline": "xyz"}, "baseline", "allowed"),
])
def test_bad_ranking_keys_are_refused_in_the_users_words(extra, key, text):
    with pytest.raises(StudyError) as info:
        load_study(_study(**extra))
    assert info.value.key_path == key and text in str(info.value), str(info.value)
    assert "\n" not in str(info.value)
