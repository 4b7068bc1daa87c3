"""Remembered cost estimates: the same numbers as a fresh estimate, never reused after a code change."""
from __future__ import annotations

import copy

import yaml

from bodysweep.workflow import cli, cost_cache
from bodysweep.workflow.study import expand, load_study

from pathlib import Path

TINY = Path(__file__).parent / "data" / "tiny.yaml"


def _dicts(n_depths: int) -> list[dict]:
    d = yaml.safe_load(TINY.read_text())
    d["sweep"]["blocks"] = [{"grid": {"depth": [4.0 + 0.5 * i for i in range(n_depths)]}}]
    return [c.to_dict() for c in expand(load_study(d))]


def test_parallel_and_remembered_estimates_equal_a_fresh_one(tmp_path, monkeypatch):
    # the estimate is a pure function of the case (common practice for memoisation): computing it in
    # worker processes, or reading it back from the store, must give exactly the serial numbers
    dicts = _dicts(6)
    serial = {d["case_id"]: cli.case_cost(d) for d in dicts}
    monkeypatch.setattr(cost_cache, "PARALLEL_FROM", 2)
    parallel = cost_cache.estimates(dicts, {}, cli.case_cost, workers=2)
    assert parallel == serial
    cost_cache.save(tmp_path, parallel)
    known = cost_cache.load(tmp_path)
    assert set(known) == set(serial)
    calls = []
    again = cost_cache.estimates(dicts, known, lambda d: calls.append(d) or cli.case_cost(d))
    assert calls == [] and again == serial


def test_store_written_only_into_an_existing_folder(tmp_path):
    cost_cache.save(tmp_path / "absent", {"abc": {"cells": 1.0}})
    assert not (tmp_path / "absent").exists()


def test_code_change_invalidates_the_store(tmp_path, monkeypatch):
    cost_cache.save(tmp_path, {"abc": {"cells": 1.0, "cpu_s": float("nan")}})
    assert cost_cache.load(tmp_path) == {"abc": {"cells": 1.0, "cpu_s": None}}
    monkeypatch.setattr(cost_cache, "code_signature", lambda: "another")
    assert cost_cache.load(tmp_path) == {}


def test_refused_case_is_reported_not_raised():
    dicts = _dicts(1)
    bad = copy.deepcopy(dicts[0])
    bad["case_id"] = "refused00000"
    bad["solver"] = {**bad["solver"], "cells_per_wavelength": "not a number"}
    out = cost_cache.estimates([dicts[0], bad], {}, cli.case_cost)
    assert isinstance(out["refused00000"], Exception) and isinstance(out[dicts[0]["case_id"]], dict)
