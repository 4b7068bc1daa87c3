"""`bodysweep run` expands the study once and hands its plan.json to Snakemake: the Snakefile started that
way reads the plan (it schedules the prepared cases even after the study file changed, and it refuses a
plan.json changed since), and it does not get the study file as Snakemake config. Dry runs only."""
import subprocess
from pathlib import Path

import pytest

from bodysweep.workflow.pipeline import parse_job_stats, prepare, snakemake_args, snakemake_cmd

pytestmark = [pytest.mark.pipeline, pytest.mark.timeout(600)]

TINY = Path(__file__).parent / "data" / "tiny.yaml"


def dry(args, cwd):
    p = subprocess.run(snakemake_cmd(*args), cwd=cwd, capture_output=True, text=True)
    return p.returncode, p.stdout + p.stderr


def test_snakefile_reads_the_handed_plan(tmp_path):
    study = tmp_path / "tiny.yaml"
    study.write_text(TINY.read_text())
    prep = prepare(study, tmp_path / "results")
    args = snakemake_args(study, results_dir=str(tmp_path / "results"), workdir=tmp_path, cores=1,
                          profile="local", dry_run=True, prepared=prep)
    assert "--configfile" not in args and f"plan_digest={prep.digest}" in args
    # a third depth in the study file: a Snakefile expanding the study itself would schedule 3 cases
    study.write_text(TINY.read_text().replace("grid: {depth: [6, 9]}", "grid: {depth: [6, 9, 12]}"))
    rc, out = dry(args, tmp_path)
    assert rc == 0, out[-3000:]
    assert parse_job_stats(out)["finish"] == 2
    # started by hand it prepares the study as it is now (3 cases)
    by_hand = snakemake_args(study, results_dir=str(tmp_path / "results"), workdir=tmp_path, cores=1,
                             profile="local", dry_run=True)
    rc, out = dry(by_hand, tmp_path)
    assert rc == 0, out[-3000:]
    assert parse_job_stats(out)["finish"] == 3


def test_a_plan_changed_after_the_handover_is_refused(tmp_path):
    prep = prepare(TINY, tmp_path / "results")
    args = snakemake_args(TINY, results_dir=str(tmp_path / "results"), workdir=tmp_path, cores=1,
                          profile="local", dry_run=True, prepared=prep)
    plan = prep.layout.plan_file
    plan.write_text(plan.read_text().replace('"label"', '"label" ', 1))
    rc, out = dry(args, tmp_path)
    assert rc != 0 and "changed after `bodysweep run` prepared it" in out
