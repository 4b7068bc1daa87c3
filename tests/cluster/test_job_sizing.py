"""Scheduler requests from a cost estimate (no scheduler needed)."""
from __future__ import annotations

import math

import pytest

from bodysweep.workflow.cluster import MIB, JobSizing, cells2threads, cost2resources, resources_for_case
from bodysweep.workflow.meshing.cost import CostEstimate


def test_mib_is_1024_based():
    # SLURM sbatch man page: --mem units M = megabytes with 1024-based multiples
    assert MIB == 1024 * 1024


def test_request_by_hand():
    cost = CostEstimate(cells=50_000, memory_bytes=200 * MIB, cpu_seconds=300.0)
    sizing = JobSizing(memory_factor=1.5, memory_base_mb=512, runtime_factor=2.0, runtime_base_s=60.0,
                       parallel_efficiency=0.5, retry_growth=2.0, min_runtime_min=1)
    r = cost2resources(cost, threads=3, attempt=1, sizing=sizing)
    # analytic: 200 MiB * 1.5 + 512 = 812 MiB; speed-up 1 + 2 * 0.5 = 2 -> 150 s * 2 + 60 s = 360 s = 6 min
    assert r == {"mem_mb": 812, "runtime": 6, "threads": 3}
    r2 = cost2resources(cost, threads=3, attempt=2, sizing=sizing)
    # analytic: second attempt doubles both: 1624 MiB, 12 min
    assert r2 == {"mem_mb": 1624, "runtime": 12, "threads": 3}


def test_runtime_rounds_up_to_whole_minutes_and_has_a_floor():
    cost = CostEstimate(cells=1000, memory_bytes=1.0, cpu_seconds=61.0)
    s = JobSizing(runtime_factor=1.0, runtime_base_s=0.0, min_runtime_min=1)
    # analytic: 61 s is more than one minute -> 2 min (SLURM time limits are whole minutes, sbatch man page)
    assert cost2resources(cost, 1, 1, s)["runtime"] == 2
    tiny = CostEstimate(cells=1000, memory_bytes=1.0, cpu_seconds=1.0)
    assert cost2resources(tiny, 1, 1, JobSizing(min_runtime_min=5))["runtime"] == 5


def test_more_memory_never_less_request():
    # analytic: the request is monotonic in the estimate
    s = JobSizing()
    reqs = [cost2resources(CostEstimate(10, m * MIB, 10.0), 1, 1, s)["mem_mb"] for m in (1, 10, 100, 1000)]
    assert reqs == sorted(reqs) and len(set(reqs)) == 4
    assert reqs[-1] >= math.ceil(1000 * s.memory_factor)


def test_threads_grow_with_cells_and_respect_caps():
    assert [cells2threads(c) for c in (10_000, 500_000, 2_000_000, 50_000_000)] == [1, 2, 4, 8]
    assert cells2threads(50_000_000, max_threads=3) == 3
    assert cells2threads(10_000, requested=6, max_threads=4) == 4
    assert cells2threads(10_000, requested=2) == 2


def test_resources_from_mapping():
    r = resources_for_case({"cells": 1_000_000, "memory_bytes": 1e9, "cpu_seconds": 3600.0})
    assert r["threads"] == 4
    # analytic with the defaults: 1e9 B / 2**20 * 1.5 + 512 = 1942.5 -> 1943 MiB
    assert r["mem_mb"] == 1943
    # analytic: 3600 s / (1 + 3 * 0.7) * 2 + 60 s = 2382.6 s -> 40 min
    assert r["runtime"] == 40


@pytest.mark.parametrize("bad, word", [
    (dict(cells=0, memory_bytes=1.0, cpu_seconds=1.0), "cells"),
    (dict(cells=10, memory_bytes=-1.0, cpu_seconds=1.0), "memory_bytes"),
    (dict(cells=10, memory_bytes=1.0, cpu_seconds=float("nan")), "cpu_seconds"),
    (dict(cells=10, memory_bytes=1.0, cpu_seconds=1.0, n_excitations=0), "n_excitations"),
    (dict(cells=10, memory_bytes=1.0, cpu_seconds=1.0, disk_bytes=-1.0), "disk_bytes"),
])
def test_bad_cost_names_the_field(bad, word):
    with pytest.raises(ValueError, match=word):
        CostEstimate(**bad)


def test_estimate_missing_keys_named():
    with pytest.raises(ValueError, match="cpu_seconds"):
        CostEstimate.from_dict({"cells": 10, "memory_bytes": 5})


def test_one_job_runs_one_excitation():
    # analytic: a two-port case of 600 CPU s runs as two jobs of 300 s each; with the sizing of
    # test_request_by_hand that is 6 min per job, as for a one-port case of 300 s
    sizing = JobSizing(memory_factor=1.5, memory_base_mb=512, runtime_factor=2.0, runtime_base_s=60.0,
                       parallel_efficiency=0.5, retry_growth=2.0, min_runtime_min=1)
    two = CostEstimate(cells=50_000, memory_bytes=200 * MIB, cpu_seconds=600.0, n_excitations=2)
    assert cost2resources(two, threads=3, attempt=1, sizing=sizing) == {"mem_mb": 812, "runtime": 6, "threads": 3}


@pytest.mark.parametrize("field, value", [("memory_factor", 0.5), ("max_threads", 0), ("retry_growth", 9.0),
                                          ("min_runtime_min", 0), ("parallel_efficiency", 2.0)])
def test_bad_sizing_names_the_field(field, value):
    with pytest.raises(ValueError, match=field):
        JobSizing(**{field: value})


def test_bad_attempt_and_threads():
    c = CostEstimate(10, 1.0, 1.0)
    with pytest.raises(ValueError, match="attempt"):
        cost2resources(c, 1, 0)
    with pytest.raises(ValueError, match="threads"):
        cost2resources(c, 0, 1)


def test_case_folder_without_case_json(tmp_path):
    with pytest.raises(FileNotFoundError, match="case.json"):
        resources_for_case(tmp_path)
