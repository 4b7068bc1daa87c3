"""Loading the good example studies and expanding them into cases."""
from __future__ import annotations

import itertools
import math
from pathlib import Path

import pytest

from bodysweep.workflow.study import StudyError, expand, load_study

GOOD = Path(__file__).parent / "good"


def test_minimal_gives_one_case_per_frequency():
    study = load_study(GOOD / "minimal.yaml")
    cases = expand(study)
    assert study.name == "minimal"
    assert study.frequencies_Hz == (403e6,)  # 403 MHz = 403e6 Hz (SI definition of the prefix)
    assert len(cases) == 1
    c = cases[0].to_dict()
    assert c["frequency_Hz"] == 403e6
    # 10 mm = 0.01 m (SI prefix, analytic)
    assert math.isclose(c["scene"]["implant"]["depth_m"], 0.010, rel_tol=1e-15)
    assert c["parameters"] == {"frequency_MHz": 403.0}
    assert len(c["case_id"]) == 12 and int(c["case_id"], 16) >= 0


def test_every_sweep_kind_count_is_the_product_of_block_sizes():
    study = load_study(GOOD / "every_sweep_kind.yaml")
    cases = expand(study)
    # 2 frequencies x grid 2*2 x zip 2 x list 2 x random 2 x LHS 3 (combinatorics, analytic)
    assert len(cases) == 2 * (2 * 2) * 2 * 2 * 2 * 3
    assert len({c.case_id for c in cases}) == len(cases)
    assert [c.frequency_Hz for c in cases[:1]] == [403e6]
    assert cases[-1].frequency_Hz == 433e6


def test_mapping_and_file_give_the_same_cases():
    import yaml

    data = yaml.safe_load((GOOD / "every_sweep_kind.yaml").read_text())
    a = [c.case_id for c in expand(load_study(GOOD / "every_sweep_kind.yaml"))]
    b = [c.case_id for c in expand(load_study(data))]
    assert a == b
