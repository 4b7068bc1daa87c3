"""The explore section: parsing, conditional search parameters, and points turned into ordinary cases."""
from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from bodysweep.workflow.study import StudyError, expand, load_study
from bodysweep.workflow.study.exploration import parse_search, points_study

GOOD = Path(__file__).parent / "good"
ROD = {"type": "rod_pair", "anchor": "implant", "offset_mm": [0, 0, 4.5], "azimuth_deg": 0, "rod_length_mm": 8,
       "gap_mm": 2, "radius_mm": 0.4, "conductor": "pec"}


def _study(explore: dict, **extra) -> dict:
    d = yaml.safe_load((GOOD / "minimal.yaml").read_text())
    d["explore"] = explore
    d.update(extra)
    return d


def _spec(d: dict):
    s = load_study(d)
    return parse_search(s.raw, s.parameters, set(s.swept_names()), set(), len(s.frequencies_Hz), 1)


EXPLORE = {"parameters": {"rods": {"path": "scene.concentrators", "options": {"none": [], "pair": [ROD]}},
                          "rod_len": {"path": "scene.concentrators.0.rod_length_mm", "range": [4, 20]},
                          "depth": {"path": "scene.implant.depth_mm", "range": [8, 14], "step": 2}},
           "budget_cases": 6, "batch": 2, "seed": 3}


def test_list_item_path_inside_an_option_is_searched():
    ex = dict(EXPLORE, parameters=dict(EXPLORE["parameters"],
                                       height={"path": "scene.concentrators.0.offset_mm.2", "range": [3, 9]}))
    spec = _spec(_study(ex))
    assert spec.by_name("height").parent == "rods"


def test_section_is_parsed_with_defaults_and_conditional_parent():
    spec = _spec(_study(EXPLORE))
    assert [p.name for p in spec.parameters] == ["rods", "rod_len", "depth"]  # choices first
    rod_len = spec.by_name("rod_len")
    assert rod_len.parent == "rods" and rod_len.parent_options == ("pair",)
    assert spec.by_name("depth").parent is None and spec.by_name("depth").step == 2
    assert spec.merit_column == "figure_of_merit_value" and spec.maximise  # documented default
    assert spec.max_points == 6 and spec.mesh_best == 3
    assert [p.name for p in spec.active({"rods": "none", "depth": 8})] == ["rods", "depth"]


def test_study_without_section_has_no_search():
    s = load_study(yaml.safe_load((GOOD / "minimal.yaml").read_text()))
    assert parse_search(s.raw, s.parameters, set(), set(), 1, 1) is None


def test_points_become_ordinary_cases_with_repeats_and_inactive_values_removed():
    d = _study(EXPLORE, frequencies_MHz=[403, 433])
    spec = _spec(d)
    assert spec.cases_per_point == 2
    points = [{"rods": "none", "depth": 8.0}, {"rods": "pair", "rod_len": 10.0, "depth": 8.0},
              {"rods": "none", "depth": 8.0}, {"rods": "pair", "rod_len": 12.5, "depth": 12.0}]
    raw = points_study(load_study(d).raw, spec, points)
    assert "explore" not in raw
    assert len(raw["sweep"]["blocks"][-1]["list"]) == 3  # the repeated point once
    cases = expand(load_study(raw))
    # hand count: 3 distinct points x 2 frequencies
    assert len(cases) == 6
    labels = [c.label for c in cases]
    assert "f=403MHz rods=none depth=8mm" in labels and "f=433MHz rods=pair rod_len=12.5mm depth=12mm" in labels
    with_rods = [c for c in cases if c.parameters["scene.concentrators"] == "pair"]
    assert sorted(c.scene["concentrators"][0]["rod_length_m"] for c in with_rods) == pytest.approx([10e-3, 10e-3, 12.5e-3, 12.5e-3])


def test_conditional_parameter_active_in_no_point_is_left_out():
    d = _study(EXPLORE)
    raw = points_study(load_study(d).raw, _spec(d), [{"rods": "none", "depth": 10.0}])
    assert "rod_len" not in raw["sweep"]["parameters"]
    assert len(expand(load_study(raw))) == 1


@pytest.mark.parametrize("change, key", [
    ({"parameters": {"rods": {"path": "scene.concentrators", "options": {"none": []}}}}, "explore.parameters.rods.options"),
    ({"parameters": {"d": {"path": "scene.implant.depth_mm", "range": [5, 20], "options": {"a": 1, "b": 2}}}},
     "explore.parameters.d.range"),
    ({"parameters": {"n": {"path": "scene.implant.depth_mm", "range": [5.2, 5.9], "integer": True}}},
     "explore.parameters.n.range"),
    ({"parameters": {"d": {"path": "scene.implant.depth_mm", "range": [5, 20], "step": 30}}}, "explore.parameters.d.step"),
    ({"merit": {"column": "S22_dB"}}, "explore.merit.column"),  # needs excite [1, 2]
    ({"constraints": [{"column": "S11_dB"}]}, "explore.constraints.0"),
    ({"constraints": [{"column": "S11_dB", "at_most": -10, "at_least": -5}]}, "explore.constraints.0"),
    ({"parameters": {"max": {"path": "scene.implant.depth_mm", "range": [5, 20]}}}, "explore.parameters.max"),
])
def test_bad_sections_name_their_key(change, key):
    ex = {"parameters": {"depth": {"path": "scene.implant.depth_mm", "range": [5, 20]}}, "budget_cases": 4}
    ex.update(change)
    with pytest.raises(StudyError) as info:
        load_study(_study(ex))
    assert key in info.value.key_path, str(info.value)
    assert "\n" not in str(info.value)


def test_baseline_point_and_uncertainty_best_are_parsed():
    spec = _spec(_study(dict(EXPLORE, baseline={"rods": "none", "depth": 10}, uncertainty_best=2)))
    assert spec.baseline == {"rods": "none", "depth": 10.0} and spec.uncertainty_best == 2
    assert _spec(_study(EXPLORE)).uncertainty_best == 1 and _spec(_study(EXPLORE)).baseline is None  # defaults


@pytest.mark.parametrize("baseline, problem", [
    ({"rods": "none", "depth": 10, "colour": 1}, "not a searched parameter"),
    ({"rods": "some", "depth": 10}, "not an option"),
    ({"rods": "none", "depth": 30}, "outside the searched range"),
    ({"rods": "none", "depth": 10, "rod_len": 8}, "exists only with rods"),
    ({"rods": "pair", "depth": 10}, "every parameter it has"),  # rod_len missing
])
def test_bad_baseline_is_one_line_naming_the_key(baseline, problem):
    with pytest.raises(StudyError) as info:
        load_study(_study(dict(EXPLORE, baseline=baseline)))
    assert "explore.baseline" in info.value.key_path and problem in str(info.value)
    assert "\n" not in str(info.value)


def test_points_study_leaves_the_uncertainty_section_to_the_budget_study():
    d = _study(EXPLORE, uncertainty={"components": ["mesh", "power_balance"]})
    spec = _spec(d)
    raw = points_study(load_study(d).raw, spec, [{"rods": "none", "depth": 10.0}])
    assert "uncertainty" not in raw  # the rounds run no component runs
    raw = points_study(load_study(d).raw, spec, [{"rods": "none", "depth": 10.0}], uncertainty={"cases": "all"})
    assert raw["uncertainty"] == {"cases": "all"}
