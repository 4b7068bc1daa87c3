"""Snakemake's SLURM executor on the local SLURM, without bodysweep's pipeline: the requests computed
by :func:`bodysweep.workflow.cluster.resources_for_case` reach sbatch, and a retry asks for more."""
from __future__ import annotations

import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from bodysweep.workflow.cluster import resources_for_case

from slurm_records import tres2dict, tres_mem2mib  # tests/cluster/ (pytest puts this folder on sys.path)

pytestmark = [pytest.mark.slurm, pytest.mark.timeout(600)]

COSTS = {
    "small": {"cells": 10_000, "memory_bytes": 100 * 2**20, "cpu_seconds": 30.0},
    "large": {"cells": 300_000, "memory_bytes": 2**30, "cpu_seconds": 600.0},
}

SNAKEFILE = textwrap.dedent('''
    from bodysweep.workflow.cluster import resources_for_case
    COSTS = {costs!r}
    localrules: all
    rule all:
        input: expand("out/{{c}}.txt", c=COSTS)
    rule solve:
        output: "out/{{c}}.txt"
        threads: lambda wc: resources_for_case(COSTS[wc.c])["threads"]
        resources:
            mem_mb=lambda wc, attempt: resources_for_case(COSTS[wc.c], attempt=attempt)["mem_mb"],
            runtime=lambda wc, attempt: resources_for_case(COSTS[wc.c], attempt=attempt)["runtime"],
        shell:
            # the large case fails on its first attempt (a marker file outside the outputs), then succeeds
            'if [ {{wildcards.c}} = large ] && [ ! -e out/large.tried ]; then touch out/large.tried; exit 1; fi; '
            'echo "$SLURM_JOB_ID" > {{output}}'
''')


def test_requests_reach_sbatch_and_grow_on_retry(slurm_cluster, slurm_env, tmp_path):
    (tmp_path / "Snakefile").write_text(SNAKEFILE.format(costs=COSTS))
    (tmp_path / "out").mkdir()
    snakemake = str(Path(sys.executable).with_name("snakemake"))
    proc = subprocess.run(
        [snakemake, "--executor", "slurm", "--jobs", "4", "--retries", "1",
         "--slurm-no-account", "--slurm-status-command", "squeue",
         "--slurm-init-seconds-before-status-checks", "1"],
        cwd=tmp_path, env=slurm_env, capture_output=True, text=True, timeout=540,
    )
    assert proc.returncode == 0, proc.stderr[-4000:]
    jobs = slurm_cluster.completed_jobs()
    for name, cost in COSTS.items():
        job_id = (tmp_path / "out" / f"{name}.txt").read_text().strip()
        rec = jobs[job_id]          # the job ran under SLURM (its id is in SLURM's completion log)
        assert rec["JobState"] == "COMPLETED"
        attempt = 2 if name == "large" else 1
        want = resources_for_case(cost, attempt=attempt)
        # SLURM jobcomp/filetxt: TimeLimit in minutes, Tres cpu=<n>,mem=<n>M (slurm.conf man page, JobCompType)
        assert rec["TimeLimit"] == str(want["runtime"])
        tres = tres2dict(rec["Tres"])
        assert tres_mem2mib(tres["mem"]) == want["mem_mb"]
        assert tres["cpu"] == str(want["threads"])
    # the failed first attempt of the large case asked for less than the retry
    failed = [r for r in jobs.values() if r["JobState"] == "FAILED" and r["WorkDir"] == str(tmp_path)]
    assert len(failed) == 1
    first = resources_for_case(COSTS["large"], attempt=1)
    assert tres_mem2mib(tres2dict(failed[0]["Tres"])["mem"]) == first["mem_mb"]
    assert first["mem_mb"] < resources_for_case(COSTS["large"], attempt=2)["mem_mb"]
