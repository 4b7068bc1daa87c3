"""Remembered cost estimates: the same numbers as a fresh estimate, never reused after a code change."""
from __future__ import annotations

import copy

import yaml

from bodysweep.workflow import cost_cache
from bodysweep.workflow.estimate import case_estimate
from bodysweep.workflow.meshing.cost import CostEstimate
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
    serial = {d["case_id"]: case_estimate(d) for d in dicts}
    monkeypatch.setattr(cost_cache, "PARALLEL_FROM", 2)
    parallel = cost_cache.estimates(dicts, {}, case_estimate, workers=2)
    assert parallel == serial
    cost_cache.save(tmp_path, parallel)
    known = cost_cache.load(tmp_path)
    assert set(known) == set(serial)
    calls = []
    again = cost_cache.estimates(dicts, known, lambda d: calls.append(d) or case_estimate(d))
    assert calls == [] and again == serial


ONE = CostEstimate(cells=1, memory_bytes=1.0, cpu_seconds=1.0)


def test_store_written_only_into_an_existing_folder(tmp_path):
    cost_cache.save(tmp_path / "absent", {"abc": ONE})
    assert not (tmp_path / "absent").exists()


def test_code_change_invalidates_the_store(tmp_path, monkeypatch):
    cost_cache.save(tmp_path, {"abc": ONE})
    stored = cost_cache.load(tmp_path)
    assert stored["abc"]["timesteps"] is None  # unknown (NaN) is written as JSON null
    assert CostEstimate.from_dict(stored["abc"]).to_dict() == ONE.to_dict()
    monkeypatch.setattr(cost_cache, "code_signature", lambda: "another")
    assert cost_cache.load(tmp_path) == {}


def test_new_estimates_are_added_to_the_kept_ones(tmp_path):
    two = CostEstimate(cells=2, memory_bytes=2.0, cpu_seconds=2.0, n_excitations=2)
    cost_cache.save(tmp_path, {"abc": ONE})
    cost_cache.remember(tmp_path, {"def": two})
    assert {k: CostEstimate.from_dict(v) for k, v in cost_cache.load(tmp_path).items()} == {"abc": ONE, "def": two}
    cost_cache.remember(tmp_path / "absent", {"def": two})
    assert not (tmp_path / "absent").exists()


def test_unreadable_entry_is_estimated_again():
    dicts = _dicts(1)
    fresh = case_estimate(dicts[0])
    out = cost_cache.estimates(dicts, {dicts[0]["case_id"]: {"cells": 1.0}}, case_estimate)
    assert out[dicts[0]["case_id"]] == fresh


def test_refused_case_is_reported_not_raised():
    dicts = _dicts(1)
    bad = copy.deepcopy(dicts[0])
    bad["case_id"] = "refused00000"
    bad["solver"] = {**bad["solver"], "cells_per_wavelength": "not a number"}
    out = cost_cache.estimates([dicts[0], bad], {}, case_estimate)
    assert isinstance(out["refused00000"], Exception) and isinstance(out[dicts[0]["case_id"]], CostEstimate)
