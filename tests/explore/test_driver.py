"""The search driver on an analytic figure of merit: rounds, budget, stop rule, refusals, kill and resume,
reproducibility. The objective is a closed-form function (analytic), so each check has an exact answer."""
from __future__ import annotations

import json
from pathlib import Path

import pytest
import yaml

from bodysweep.workflow.explore.driver import Outcome, SearchDriver, SearchStopped, feasible_value, round_seed
from bodysweep.workflow.study import load_study
from bodysweep.workflow.study.exploration import parse_search

GOOD = Path(__file__).parent.parent / "study" / "good"
ROD = {"type": "rod_pair", "anchor": "implant", "offset_mm": [0, 0, 4.5], "azimuth_deg": 0, "rod_length_mm": 8,
       "gap_mm": 2, "radius_mm": 0.4, "conductor": "pec"}


def _spec(**explore):
    d = yaml.safe_load((GOOD / "minimal.yaml").read_text())
    d["explore"] = {"parameters": {"rods": {"path": "scene.concentrators", "options": {"none": [], "pair": [ROD]}},
                                   "rod_len": {"path": "scene.concentrators.0.rod_length_mm", "range": [4, 20]},
                                   "depth": {"path": "scene.implant.depth_mm", "range": [5, 20]}},
                    "budget_cases": 12, "batch": 3, "seed": 5, **explore}
    s = load_study(d)
    return parse_search(s.raw, s.parameters, set(), set(), 1, 1)


def merit(p: dict) -> float:
    """Analytic test function: best at rods=pair, rod_len=12, depth=9 (value 3)."""
    v = -(p["depth"] - 9) ** 2
    return v + (3 - (p["rod_len"] - 12) ** 2 / 4 if p["rods"] == "pair" else 0)


class Analytic:
    def __init__(self, stop_in_round: int | None = None):
        self.calls, self.stop_in_round = [], stop_in_round

    def refuse(self, p):
        return "deeper than 19 mm" if p["depth"] > 19 else None

    def evaluate(self, points, all_points):
        self.calls.append([dict(p) for p in points])
        if self.stop_in_round is not None and len(self.calls) == self.stop_in_round:
            raise SearchStopped("killed", 1)
        return [Outcome(merit(p), case_ids=[f"c{len(self.calls)}_{i}"]) for i, p in enumerate(points)]


def proposals(driver: SearchDriver) -> list:
    by = {t.number: t for t in driver.trials()}
    return [[by[n].user_attrs["point"] for n in r] for r in driver.rounds()]


def test_rounds_spend_the_budget_and_conditional_parameter_follows_its_option(tmp_path):
    spec = _spec()
    d = SearchDriver(spec, tmp_path / "a", echo=lambda s: None)
    ev = Analytic()
    assert d.run(ev).startswith("budget spent")
    by = {t.number: t for t in d.trials()}
    assert d.n_run_points() == 12
    assert all(sum(not by[n].user_attrs.get("refused") and "repeat_of" not in by[n].user_attrs for n in r) <= 3
               for r in d.rounds())
    # repeats of a point already run are told at once, never evaluated again
    run_points = [json.dumps(p, sort_keys=True) for call in ev.calls for p in call]
    assert len(run_points) == len(set(run_points)) == 12
    for t in d.trials():
        if "repeat_of" in t.user_attrs and t.state.name == "COMPLETE":
            assert t.value == by[t.user_attrs["repeat_of"]].value
    for r in proposals(d):
        for p in r:
            assert ("rod_len" in p) == (p["rods"] == "pair")  # define-by-run: only with rods
            assert 5 <= p["depth"] <= 20
    refused = [t for t in d.trials() if t.user_attrs.get("refused")]
    assert all(t.state.name == "FAIL" and t.user_attrs["point"]["depth"] > 19 for t in refused)
    told = [feasible_value(t) for t in d.trials() if not t.user_attrs.get("refused")]
    assert all(v is not None for v in told)


def test_same_seed_same_proposals_and_other_seed_differs(tmp_path):
    a = SearchDriver(_spec(), tmp_path / "a", echo=lambda s: None)
    a.run(Analytic())
    b = SearchDriver(_spec(), tmp_path / "b", echo=lambda s: None)
    b.run(Analytic())
    c = SearchDriver(_spec(seed=6), tmp_path / "c", echo=lambda s: None)
    c.run(Analytic())
    assert proposals(a) == proposals(b)
    assert proposals(a) != proposals(c)
    assert round_seed(5, 1) != round_seed(6, 0)  # numpy SeedSequence streams, not seed + round


def test_killed_search_resumes_with_the_same_proposals_and_reevaluates_only_the_unfinished_round(tmp_path):
    ref = SearchDriver(_spec(), tmp_path / "ref", echo=lambda s: None)
    ref.run(Analytic())
    folder = tmp_path / "k"
    d = SearchDriver(_spec(), folder, echo=lambda s: None)
    with pytest.raises(SearchStopped):
        d.run(Analytic(stop_in_round=2))
    # also a round interrupted while it was being asked: an unlisted running trial
    d2 = SearchDriver(_spec(), folder, echo=lambda s: None)
    d2.study.ask()
    ev = Analytic()
    d3 = SearchDriver(_spec(), folder, echo=lambda s: None)
    d3.run(ev)
    assert proposals(d3) == proposals(ref)
    # the first call on resume is round 2 (round 1 was told before the kill): nothing told is evaluated again
    assert ev.calls[0] == proposals(ref)[1] or ev.calls[0] == [p for p in proposals(ref)[1] if p["depth"] <= 19]
    stub = [t for t in d3.trials() if t.user_attrs.get("reason") == "interrupted proposal"]
    assert len(stub) == 1 and stub[0].state.name == "FAIL"


def test_patience_stops_when_the_best_does_not_improve(tmp_path):
    spec = _spec(patience_rounds=1, budget_cases=60)

    class Flat(Analytic):
        def evaluate(self, points, all_points):
            return [Outcome(1.0) for _ in points]

    d = SearchDriver(spec, tmp_path / "p", echo=lambda s: None)
    assert d.run(Flat()) == "no improvement over the last 1 rounds"
    assert len(d.rounds()) == 2  # round 1 sets the best, round 2 does not improve it


def test_constraints_exclude_points_from_the_best(tmp_path):
    spec = _spec()

    class Constrained(Analytic):
        def evaluate(self, points, all_points):
            # constraint: depth at least 12 (excess = 12 - depth)
            return [Outcome(merit(p), excess=[12 - p["depth"]]) for p in points]

    spec = _spec(constraints=[{"column": "S11_dB", "at_most": -6}])
    d = SearchDriver(spec, tmp_path / "c", echo=lambda s: None)
    d.run(Constrained())
    best = d.best_by_round()[-1]
    feas = [t for t in d.trials() if feasible_value(t) is not None]
    assert all(t.user_attrs["point"]["depth"] >= 12 for t in feas)
    assert best == max(feasible_value(t) for t in feas)
    assert best <= -(12 - 9) ** 2 + 3  # analytic: the constrained optimum is at depth 12


@pytest.mark.parametrize("repeats", ["pruned", "value"])
def test_a_choice_only_search_runs_each_option_once_and_tells_repeats(tmp_path, repeats):
    d = yaml.safe_load((GOOD / "minimal.yaml").read_text())
    opts = {"none": [], "near": [dict(ROD, offset_mm=[0, 0, 4])], "far": [dict(ROD, offset_mm=[0, 0, 7])]}
    d["explore"] = {"parameters": {"rods": {"path": "scene.concentrators", "options": opts}},
                    "budget_cases": 3, "batch": 1, "seed": 2}
    s = load_study(d)
    spec = parse_search(s.raw, s.parameters, set(), set(), 1, 1)
    values = {"none": 0.0, "near": 2.0, "far": 1.0}  # analytic stand-in

    class Table(Analytic):
        def refuse(self, p):
            return None

        def evaluate(self, points, all_points):
            self.calls.append(points)
            return [Outcome(values[p["rods"]]) for p in points]

    ev = Table()
    drv = SearchDriver(spec, tmp_path / "s", echo=lambda m: None, repeats=repeats)
    assert drv.run(ev).startswith("budget spent")
    assert sorted(p["rods"] for call in ev.calls for p in call) == ["far", "near", "none"]
    assert drv.best_by_round()[-1] == 2.0
    by = {t.number: t for t in drv.trials()}
    reps = [t for t in drv.trials() if "repeat_of" in t.user_attrs and by[t.user_attrs["repeat_of"]].state.name == "COMPLETE"]
    assert reps  # 3 options, 3 points: the sampler proposes some again
    for t in reps:
        if repeats == "pruned":
            assert t.state.name == "PRUNED" and t.value is None
        else:
            assert t.state.name == "COMPLETE" and t.value == by[t.user_attrs["repeat_of"]].value


def test_baseline_point_is_the_first_proposal_once(tmp_path):
    spec = _spec(baseline={"rods": "none", "depth": 9})
    d = SearchDriver(spec, tmp_path / "b", echo=lambda s: None)
    ev = Analytic()
    d.run(ev)
    assert ev.calls[0][0] == {"rods": "none", "depth": 9.0}
    assert sum(p == {"rods": "none", "depth": 9.0} for call in ev.calls for p in call) == 1
