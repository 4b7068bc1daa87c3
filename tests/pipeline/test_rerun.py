"""Rerun only what changed, on a real tiny study (two coarse cases, each solve a few seconds).

The job counts come from a Snakemake dry run of the real Snakefile (``scheduled_jobs``), so they
are Snakemake's own decision, not a count of ours.
"""
import copy
from pathlib import Path

import pytest
import yaml

from bodysweep.workflow import cli
from bodysweep.workflow.layout import StudyLayout
from bodysweep.workflow.pipeline import scheduled_jobs

pytestmark = [pytest.mark.pipeline, pytest.mark.timeout(900)]

TINY = Path(__file__).parent / "data" / "tiny.yaml"
CASE_RULES = ("scene", "solve", "finish")


def _write(path: Path, data: dict) -> Path:
    path.write_text(yaml.safe_dump(data, sort_keys=False))
    return path


def _case_jobs(counts: dict) -> dict:
    return {r: counts.get(r, 0) for r in CASE_RULES}


@pytest.fixture(scope="module")
def ran(tmp_path_factory):
    """The tiny study run once end to end in a scratch folder; yields (work dir, study file, base dict)."""
    work = tmp_path_factory.mktemp("rerun")
    base = yaml.safe_load(TINY.read_text())
    study = _write(work / "study.yaml", base)
    import os

    old = os.getcwd()
    os.chdir(work)
    try:
        rc = cli.main(["run", str(study), "--cores", "2"])
    finally:
        os.chdir(old)
    assert rc in (0, 3), f"bodysweep run exit {rc}"
    yield work, study, base


def _dry(work, study_dict, name="edited.yaml"):
    p = _write(work / name, study_dict)
    return scheduled_jobs(p, workdir=work)


def test_unchanged_rerun_schedules_nothing(ran):
    work, study, base = ran
    assert scheduled_jobs(study, workdir=work) == {}
    # a second preparation left every case.json untouched: still nothing to do
    assert scheduled_jobs(study, workdir=work) == {}


def test_text_only_change_redoes_only_the_tables_and_report(ran):
    """The description is printed in the report (workflow/report.py), so a new description redoes the report
    and the tables it is built from, and nothing per case (common practice: outputs follow their inputs)."""
    work, _, base = ran
    d = copy.deepcopy(base)
    d["description"] = "the same cases, described differently"
    counts = _dry(work, d)
    assert not any(_case_jobs(counts).values()), counts
    assert set(counts) <= {"collect", "report", "all", "everything"}


def test_added_sweep_point_runs_only_the_new_case(ran):
    work, _, base = ran
    d = copy.deepcopy(base)
    d["sweep"]["blocks"][0]["grid"]["depth"] = [6, 9, 12]
    counts = _dry(work, d)
    assert _case_jobs(counts) == {"scene": 1, "solve": 1, "finish": 1}
    assert counts.get("collect") == 1 and counts.get("report") == 1


def test_changed_parameter_reruns_only_that_case(ran):
    work, _, base = ran
    d = copy.deepcopy(base)
    d["sweep"]["blocks"][0]["grid"]["depth"] = [6, 10]  # 9 mm -> 10 mm, the 6 mm case is untouched
    assert _case_jobs(_dry(work, d)) == {"scene": 1, "solve": 1, "finish": 1}


def test_changed_solver_setting_reruns_the_cases_it_affects(ran, capsys):
    work, _, base = ran
    d = copy.deepcopy(base)
    d["solver"]["end_criterion_dB"] = -28  # a mesh/run setting of every case
    assert _case_jobs(_dry(work, d, "solver_all.yaml")) == {"scene": 2, "solve": 2, "finish": 2}
    # a setting swept per case: only the case whose value differs from the first run reruns
    d = copy.deepcopy(base)
    d["sweep"]["parameters"]["steps"] = "solver.max_timesteps"
    d["sweep"]["blocks"][0] = {"zip": {"depth": [6, 9], "steps": [200000, 300000]}}
    assert _case_jobs(_dry(work, d, "solver_one.yaml")) == {"scene": 1, "solve": 1, "finish": 1}


def test_plan_reports_changed_cases(ran, capsys):
    work, study, base = ran
    import os

    d = copy.deepcopy(base)
    d["solver"]["max_timesteps"] = 250000
    # restore the original plan first (earlier dry runs rewrote plan.json), then plan the edit
    assert scheduled_jobs(study, workdir=work) == {}
    p = _write(work / "plan_edit.yaml", d)
    old = os.getcwd()
    os.chdir(work)
    try:
        capsys.readouterr()
        assert cli.main(["plan", str(p)]) == 0
        out = capsys.readouterr().out
        assert cli.main(["plan", str(study)]) == 0
        out_same = capsys.readouterr().out
    finally:
        os.chdir(old)
    rows = [ln for ln in out.splitlines() if "f=915MHz" in ln]
    assert len(rows) == 2 and all(" to solve " in r and "changed (was " in r for r in rows)
    assert "2 changed" in out
    rows = [ln for ln in out_same.splitlines() if "f=915MHz" in ln]
    assert len(rows) == 2 and not any("changed" in r or " to solve " in r or " to finish " in r for r in rows)
