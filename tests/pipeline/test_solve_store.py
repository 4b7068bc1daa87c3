"""The shared store of solves on a real tiny study (two coarse cases, each solve a few seconds).

Solver jobs are counted from Snakemake's own ``Job stats`` table in the log of each ``bodysweep run``
(what Snakemake ran), and from its dry run (what it would run), never from a count of ours.
"""
import copy
import json
import os
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

from bodysweep.workflow import cli
from bodysweep.workflow.pipeline import parse_job_stats, prepare, scheduled_jobs

pytestmark = [pytest.mark.pipeline, pytest.mark.solver, pytest.mark.timeout(900)]

TINY = Path(__file__).parent / "data" / "tiny.yaml"


def _write(path: Path, data: dict) -> Path:
    path.write_text(yaml.safe_dump(data, sort_keys=False))
    return path


def _run(work: Path, study: Path, *extra: str) -> dict:
    """``bodysweep run`` in ``work``; returns Snakemake's job counts from the log it wrote."""
    old = os.getcwd()
    os.chdir(work)
    try:
        rc = cli.main(["run", str(study), "--cores", "2", *extra])
    finally:
        os.chdir(old)
    assert rc == 0, f"bodysweep run exit {rc}"
    name = yaml.safe_load(study.read_text())["study"]
    logs = sorted((work / "results" / name / "logs").glob("snakemake_*.log"))
    return parse_job_stats(logs[-1].read_text())


def _summary(work: Path, name: str) -> pd.DataFrame:
    return pd.read_parquet(work / "results" / name / "tables" / "summary.parquet").sort_values("label")


@pytest.fixture(scope="module")
def ran(tmp_path_factory):
    work = tmp_path_factory.mktemp("store")
    base = yaml.safe_load(TINY.read_text())
    study = _write(work / "tiny.yaml", base)
    counts = _run(work, study)
    assert counts.get("solve") == 2 and counts.get("finish") == 2, counts
    return work, study, base


def test_sar_limit_change_solves_nothing_and_finishes_every_case(ran):
    work, study, base = ran
    d = copy.deepcopy(base)
    d["sar"] = {"masses_g": [1, 10], "limits": [{"mass_g": 1, "limit_W_per_kg": 1.6, "source": "edited text"},
                                                {"mass_g": 10, "limit_W_per_kg": 4.0, "source": "edited too"}]}
    edited = _write(work / "limits.yaml", d)
    dry = scheduled_jobs(edited, workdir=work)
    assert (dry.get("scene", 0), dry.get("solve", 0), dry.get("finish", 0)) == (0, 0, 2), dry
    counts = _run(work, edited)
    assert counts.get("solve", 0) == 0 and counts.get("scene", 0) == 0 and counts.get("finish") == 2, counts
    s = _summary(work, "tiny")
    assert set(s["limit_source_10g_4W_per_kg"]) == {"edited too"}
    # the fields are the stored ones: peak SAR per watt is the same number, the allowed power follows the
    # new limit exactly (allowed input = limit / peak SAR per W, IEC/IEEE 62704-1 normalisation)
    np.testing.assert_allclose(s["sar_limited_accepted_W_10g_4W_per_kg"], 4.0 / s["peak_SAR_10g_W_per_kg_per_W"],
                               rtol=1e-12)
    _run(work, study)  # back to the original limits: the earlier case folders are still done
    assert scheduled_jobs(study, workdir=work) == {}


def test_copied_study_solves_nothing(ran, capsys):
    work, study, base = ran
    d = copy.deepcopy(base)
    d["study"] = "tiny_copy"
    other = _write(work / "copy.yaml", d)
    old = os.getcwd()
    os.chdir(work)
    try:
        capsys.readouterr()
        assert cli.main(["plan", str(other)]) == 0
        out = capsys.readouterr().out
    finally:
        os.chdir(old)
    assert "2 to finish" in out and "0 to solve" in out, out
    counts = _run(work, other)
    assert counts.get("solve", 0) == 0 and counts.get("scene", 0) == 0 and counts.get("finish") == 2, counts
    a, b = _summary(work, "tiny"), _summary(work, "tiny_copy")
    assert list(a["case_id"]) == list(b["case_id"])
    # the same stored fields give the same numbers, bit for bit (no second FDTD run)
    for col in ("S11_dB", "S21_dB", "peak_SAR_1g_W_per_kg_per_W", "peak_SAR_10g_W_per_kg_per_W"):
        assert list(a[col]) == list(b[col]), col
    os.chdir(work)
    try:
        assert cli.main(["verify", str(other)]) == 0
    finally:
        os.chdir(old)


def test_band_points_are_taken_from_the_stored_signals(ran):
    """n_band_points 11 -> 21 finishes again without a solve; the 21-point band holds the 11 points unchanged
    (linspace(lo, hi, 21)[::2] == linspace(lo, hi, 11)); read back with scikit-rf."""
    import skrf

    work, study, base = ran
    d = copy.deepcopy(base)
    d["study"] = "tiny_band"
    d["solver"]["n_band_points"] = 21
    other = _write(work / "band.yaml", d)
    counts = _run(work, other)
    assert counts.get("solve", 0) == 0 and counts.get("finish") == 2, counts
    for cid_a, cid_b in zip(_summary(work, "tiny")["case_id"], _summary(work, "tiny_band")["case_id"]):
        a = skrf.Network(str(work / "results" / "tiny" / "cases" / cid_a / "sparams.s1p"))  # only port 1 excited
        b = skrf.Network(str(work / "results" / "tiny_band" / "cases" / cid_b / "sparams.s1p"))  # only port 1 excited
        assert len(a.f) == 11 and len(b.f) == 21
        np.testing.assert_allclose(b.f[::2], a.f, rtol=1e-12)
        np.testing.assert_allclose(b.s[::2], a.s, rtol=1e-9, atol=1e-12)
        # S21 over the band (result.h5, read with h5py) likewise
        import h5py

        with h5py.File(work / "results" / "tiny" / "cases" / cid_a / "result.h5", "r") as ha, \
                h5py.File(work / "results" / "tiny_band" / "cases" / cid_b / "result.h5", "r") as hb:
            sa, sb = ha["sparams/S"][()], hb["sparams/S"][()]
        np.testing.assert_allclose(sb[::2, 1, 0], sa[:, 1, 0], rtol=1e-9, atol=1e-15)


def test_solve_step_takes_a_finished_solve_instead_of_solving_again(ran):
    """Snakemake removes a job's output before it reruns the job; the solve step then takes the kept outcome."""
    from bodysweep.workflow import steps

    work, study, base = ran
    solve = next((work / "results" / "_solves").glob("[0-9a-f]" * 12))
    exc = solve / "excite_1"
    before = {p.name: p.stat().st_mtime_ns for p in exc.iterdir()}
    (exc / "status.json").unlink()
    st = steps.solve(solve, 1, 1)
    assert st["status"] == "ok"
    assert not (exc / ".engine_run").exists()
    after = {p.name: p.stat().st_mtime_ns for p in exc.iterdir()}
    assert {k: after[k] for k in ("signals.h5", "fields_raw.h5", "solver.log")} == \
           {k: before[k] for k in ("signals.h5", "fields_raw.h5", "solver.log")}


def test_listing_and_removing_unused_solves(ran, capsys):
    work, study, base = ran
    from bodysweep.workflow.store import solve_lock

    store = work / "results" / "_solves"
    used = sorted(p.name for p in store.iterdir() if p.name != "_refs" and not p.name.startswith("."))
    d = copy.deepcopy(base)
    d["study"] = "tiny_gone"
    d["sweep"]["blocks"][0]["grid"]["depth"] = [7, 8]
    gone = _write(work / "gone.yaml", d)
    old = os.getcwd()
    os.chdir(work)
    try:
        prep = prepare(gone, "results")  # two new solves recorded in the store (not solved)
        new = sorted({e["solve_id"] for e in prep.entries})
        assert len(new) == 2 and not set(new) & set(used)
        shutil.rmtree(work / "results" / "tiny_gone")  # the study is deleted: its solves are unused
        capsys.readouterr()
        assert cli.main(["solves"]) == 0
        out = capsys.readouterr().out
        assert all(f"{i}" in out for i in used + new) and "2 used by no study" in out, out
        with solve_lock(store / new[0]):  # a job holds one of them: it is kept
            assert cli.main(["solves", "--remove-unused"]) == 0
        out = capsys.readouterr().out
        assert "removed 1 unused solves; 1 kept because a job holds them" in out, out
        assert not (store / new[1]).exists() and (store / new[0]).exists()
        assert all((store / i / "excite_1" / "signals.h5").exists() for i in used)
        assert cli.main(["solves", "--remove-unused"]) == 0
        assert not (store / new[0]).exists()
        assert cli.main(["verify", str(study)]) == 0
    finally:
        os.chdir(old)


def test_store_elsewhere_by_environment(ran, monkeypatch, tmp_path):
    """BODYSWEEP_SOLVE_STORE puts the store outside the results folder; the dry run then wants every solve."""
    work, study, base = ran
    monkeypatch.setenv("BODYSWEEP_SOLVE_STORE", str(tmp_path / "shared"))
    d = copy.deepcopy(base)
    d["study"] = "tiny_elsewhere"
    other = _write(work / "elsewhere.yaml", d)
    counts = scheduled_jobs(other, workdir=work)
    assert (counts.get("scene"), counts.get("solve"), counts.get("finish")) == (2, 2, 2), counts
    assert len(list((tmp_path / "shared").glob("*/solve.json"))) == 2
