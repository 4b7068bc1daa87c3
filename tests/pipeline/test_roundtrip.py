"""Command-line round trip on the tiny study: check -> plan -> run -> collect -> report -> verify,
and verify catching a tampered case folder and a stale table."""
import json
import os
from pathlib import Path

import pandas as pd
import pytest

from bodysweep.workflow import cli
from bodysweep.workflow.layout import StudyLayout

pytestmark = [pytest.mark.pipeline, pytest.mark.timeout(900)]

TINY = Path(__file__).parent / "data" / "tiny.yaml"


@pytest.fixture(scope="module")
def work(tmp_path_factory):
    w = tmp_path_factory.mktemp("roundtrip")
    old = os.getcwd()
    os.chdir(w)
    try:
        yield w
    finally:
        os.chdir(old)


def test_round_trip(work, capsys):
    study = str(TINY)
    assert cli.main(["check", study]) == 0
    assert "2 cases" in capsys.readouterr().out
    assert not (work / "results").exists()  # check writes nothing

    assert cli.main(["plan", study, "--accept-cost"]) == 0
    out = capsys.readouterr().out
    assert out.count(" to solve ") == 2 and "total: 2 cases" in out

    rc = cli.main(["run", study, "--cores", "2", "--accept-cost"])
    out = capsys.readouterr().out
    assert rc in (0, 3)  # 3: some cases failed; each is then listed with its reason
    layout = StudyLayout.of("tiny", "results")
    assert str(layout.report_file) in out and str(layout.tables_dir) in out
    summary = pd.read_parquet(layout.tables_dir / "summary.parquet")
    assert len(summary) == 2 and summary["case_id"].is_unique
    assert (rc == 0) == bool(summary["status"].isin(("ok", "warning")).all())
    for _, r in summary.iterrows():
        assert r["status"] in ("ok", "warning") or r["reason"]  # a failure always carries its reason

    # every case's Touchstone file reads in scikit-rf with no warning and holds no NaN (only what was
    # computed: the tiny study excites port 1 only, so a one-port file)
    import warnings

    import numpy as np
    import skrf

    for cid in summary.loc[summary["status"].isin(["ok", "warning"]), "case_id"]:
        files = sorted(layout.case_dir(cid).glob("sparams.s*p"))
        assert [f.name for f in files] == ["sparams.s1p"], files
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            ntw = skrf.Network(str(files[0]))
        assert np.all(np.isfinite(ntw.s)) and "nan" not in files[0].read_text().lower()
        assert "only port 1 was excited" in ntw.comments
        # S21 over the band still reaches the long table (from result.h5)
        sp = pd.read_parquet(layout.tables_dir / "sparams.parquet")
        assert ((sp.case_id == cid) & (sp.i == 2) & (sp.j == 1)).sum() == 11  # n_band_points of the tiny study

    assert cli.main(["plan", study]) == 0
    out = capsys.readouterr().out
    assert " to solve " not in out and " to finish " not in out  # everything is done or failed now

    assert cli.main(["collect", study]) == 0
    assert cli.main(["report", study]) == 0
    report = layout.report_file.read_text()
    assert "simulation estimates" in report and "licensed practice" in report
    for name in summary["case_id"]:
        assert name in report
    capsys.readouterr()
    assert cli.main(["verify", study]) == 0, capsys.readouterr().out

    cid = summary["case_id"].iloc[0]
    assert cli.main(["preview", study, cid]) == 0
    assert Path(capsys.readouterr().out.strip().splitlines()[-1]).is_file()


def test_verify_catches_tampering(work, capsys):
    study = str(TINY)
    layout = StudyLayout.of("tiny", "results")
    cid = json.loads(layout.plan_file.read_text())["cases"][0]["case_id"]
    case_file = layout.case_dir(cid) / "case.json"
    original = case_file.read_text()
    try:
        d = json.loads(original)
        d["frequency_Hz"] = d["frequency_Hz"] * 1.01  # content no longer hashes to the folder name
        case_file.write_text(json.dumps(d))
        capsys.readouterr()
        assert cli.main(["verify", study]) == 3
        assert "hashes to" in capsys.readouterr().out
    finally:
        case_file.write_text(original)
    # a stale table: one summary value changed behind the collector's back
    pq = layout.tables_dir / "summary.parquet"
    s = pd.read_parquet(pq)
    s.loc[0, "reason"] = "edited by hand"
    s.to_parquet(pq, index=False)
    assert cli.main(["verify", study]) == 3
    assert "summary.reason differs" in capsys.readouterr().out
    assert cli.main(["collect", study]) == 0
    assert cli.main(["verify", study]) == 0


def test_snakemake_directly_with_configfile(work):
    """The Snakefile also runs on its own: ``snakemake --configfile <study>``; after the run nothing is left to do."""
    import subprocess
    import sys

    from bodysweep.workflow.pipeline import SNAKEFILE

    p = subprocess.run([sys.executable, "-m", "snakemake", "--snakefile", str(SNAKEFILE), "--configfile", str(TINY),
                        "--cores", "1", "--rerun-triggers", "mtime", "--dry-run"], cwd=work, capture_output=True,
                       text=True)
    assert p.returncode == 0, p.stderr[-2000:]
    assert "Nothing to be done" in p.stdout + p.stderr
