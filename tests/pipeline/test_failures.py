"""A failing case does not stop the others: recorded with status and reason, kept, retried on request."""
import shutil
from pathlib import Path

import pandas as pd
import pytest
import yaml

from bodysweep.workflow import cli
from bodysweep.workflow.layout import StudyLayout
from bodysweep.workflow.pipeline import prepare, reset_failed, scheduled_jobs

pytestmark = [pytest.mark.pipeline, pytest.mark.timeout(900)]

TINY = Path(__file__).parent / "data" / "tiny.yaml"
CASE_RULES = ("scene", "solve", "finish")


def _case_jobs(counts: dict) -> dict:
    return {r: counts.get(r, 0) for r in CASE_RULES}


def test_failed_case_is_recorded_and_retried(tmp_path, monkeypatch, capsys):
    """One case cannot reach the energy decay in 1000 timesteps: it fails, the other finishes."""
    d = yaml.safe_load(TINY.read_text())
    d["study"] = "tiny_fail"
    d["sweep"]["parameters"]["steps"] = "solver.max_timesteps"
    d["sweep"]["blocks"] = [{"list": [{"depth": 6, "steps": 1000}, {"depth": 9, "steps": 200000}]}]
    study = tmp_path / "fail.yaml"
    study.write_text(yaml.safe_dump(d, sort_keys=False))
    monkeypatch.chdir(tmp_path)
    rc = cli.main(["run", str(study), "--cores", "2"])
    out = capsys.readouterr().out
    assert rc == 3  # some cases failed
    layout = StudyLayout.of("tiny_fail", "results")
    s = pd.read_parquet(layout.tables_dir / "summary.parquet")
    assert len(s) == 2
    bad = s[s["scene.implant.depth_mm"] == 6].iloc[0]
    assert bad["status"] == "failed" and "timesteps" in bad["reason"]
    assert bad["case_id"] in out and "failed" in out
    # the other case was not stopped: its excitation ran to the end and it has a result or its own reason
    other = s[s["scene.implant.depth_mm"] == 9].iloc[0]
    import json

    st = json.loads((layout.case_dir(other["case_id"]) / "solve" / "excite_1" / "status.json").read_text())
    assert st["timesteps"] and st["timesteps"] > 1000
    assert other["status"] in ("ok", "warning") or (other["reason"] and "timesteps" not in other["reason"])
    n_failed = int((s["status"] == "failed").sum())
    # failures are kept by default: nothing is scheduled again
    assert _case_jobs(scheduled_jobs(study, workdir=tmp_path)) == {"scene": 0, "solve": 0, "finish": 0}
    # --retry-failed resets exactly the failed cases (and their failed excitations in the store; the
    # scene built fine and is kept), and Snakemake then reruns exactly those
    prep = prepare(study, "results")
    assert len(reset_failed(prep.layout, prep.entries)) == n_failed
    assert _case_jobs(scheduled_jobs(study, workdir=tmp_path)) == {"scene": 0, "solve": n_failed,
                                                                   "finish": n_failed}
    shutil.rmtree(tmp_path / "results")


def test_crashed_job_gets_a_failure_record(tmp_path):
    """A case whose job died (a log, no metrics.json) is recorded as failed; a case never started is not."""
    import json

    from bodysweep.workflow.pipeline import mark_unfinished

    layout = StudyLayout.of("t", tmp_path)
    started, untouched = {"case_id": "aaaaaaaaaaaa"}, {"case_id": "bbbbbbbbbbbb"}
    (layout.case_dir("aaaaaaaaaaaa") / "logs").mkdir(parents=True)
    (layout.case_dir("aaaaaaaaaaaa") / "logs" / "solve_1.log").write_text("Segmentation fault\n")
    layout.case_dir("bbbbbbbbbbbb").mkdir(parents=True)
    assert mark_unfinished(layout, [started, untouched]) == ["aaaaaaaaaaaa"]
    m = json.loads((layout.case_dir("aaaaaaaaaaaa") / "metrics.json").read_text())
    assert m["status"] == "failed" and "logs/solve_1.log" in m["reason"]
    assert not (layout.case_dir("bbbbbbbbbbbb") / "metrics.json").exists()
