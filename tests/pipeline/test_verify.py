"""`bodysweep verify` on a tampered results folder: each kind of damage is named, exit code 3.

The tiny study (one case) runs once; every test works on its own copy of the results folder. The
tampering uses outside tools only (json, h5py, pandas, plain text edits) so that the check is not
the project reading back what the project wrote."""
import json
import shutil
from pathlib import Path

import h5py
import pandas as pd
import pytest

from bodysweep.workflow import cli

from helpers_reliability import plan_ids, run, tiny_study

pytestmark = [pytest.mark.pipeline, pytest.mark.solver, pytest.mark.timeout(600)]


@pytest.fixture(scope="module")
def finished(tmp_path_factory):
    """(work dir, study file) of the tiny study (one depth) run to the end."""
    work = tmp_path_factory.mktemp("verify")
    study = tiny_study(work / "study.yaml", "tiny_verify", depths=(6,))
    r = run(["run", str(study), "--cores", "2"], work)
    assert r.returncode == 0, r.stdout + r.stderr
    return work, study


@pytest.fixture
def copy(finished, tmp_path, monkeypatch, capsys):
    """A fresh copy of the finished results; returns (verify() -> (exit code, output), study root, case dir)."""
    work, study = finished
    shutil.copytree(work / "results", tmp_path / "results", symlinks=True)  # case/solve links stay links
    monkeypatch.chdir(tmp_path)
    root = tmp_path / "results" / "tiny_verify"
    (cid,) = plan_ids(root)

    def verify():
        capsys.readouterr()
        rc = cli.main(["verify", str(study)])
        return rc, capsys.readouterr().out

    rc, out = verify()
    assert rc == 0, out  # the untouched copy is consistent
    return verify, root, root / "cases" / cid


def _edit_json(path: Path, edit) -> None:
    d = json.loads(path.read_text())
    edit(d)
    path.write_text(json.dumps(d, indent=1))


@pytest.mark.parametrize("name", ["result.h5", "sparams.s1p", "metrics.json"])
def test_deleted_case_file(copy, name):
    verify, root, case = copy
    (case / name).unlink()
    rc, out = verify()
    assert rc == 3 and f"{case.name}: " in out and f"{Path(name).name} missing" in out, out


@pytest.mark.parametrize("name", ["scene.json", "excite_1/status.json", "excite_1/signals.h5", "solve.json"])
def test_deleted_solve_file(copy, name):
    """A file missing in the case's solve folder of the shared store is named with the solve id."""
    verify, root, case = copy
    solve = (case / "solve").resolve()
    (solve / name).unlink()
    rc, out = verify()
    assert rc == 3 and f"solve {solve.name}: " in out and f"{Path(name).name} missing" in out, out


def test_edited_solve_record_is_caught(copy):
    """solve.json edited behind the store's back no longer hashes to its folder name (sha256, FIPS 180-4)."""
    verify, root, case = copy
    p = (case / "solve").resolve() / "solve.json"
    _edit_json(p, lambda d: d["solver"].update(end_criterion_dB=-33.0))
    rc, out = verify()
    assert rc == 3 and "solve.json hashes to" in out, out


@pytest.mark.parametrize("name", ["summary.csv", "sar.parquet"])
def test_deleted_table(copy, name):
    verify, root, case = copy
    (root / "tables" / name).unlink()
    rc, out = verify()
    assert rc == 3 and f"{name} missing" in out, out


def test_edited_metrics_value_is_caught_even_after_collect(copy):
    """An edited S11 in metrics.json disagrees with the tables; after `collect` the tables agree with it, but
    the Touchstone file (scikit-rf reads the original value) and verify still name metrics.json."""
    import numpy as np
    import skrf

    verify, root, case = copy

    def edit(d):
        d["S11"][0] *= 0.9

    _edit_json(case / "metrics.json", edit)
    rc, out = verify()
    assert rc == 3 and "metrics.json S11" in out and "sparams.s1p" in out, out
    assert "summary.S11_dB differs" in out  # the stored table no longer matches the case files
    from bodysweep.workflow.collect import collect_study
    from bodysweep.workflow.layout import StudyLayout

    collect_study(StudyLayout(root))
    rc, out = verify()
    assert rc == 3 and "metrics.json S11" in out and "summary" not in out, out
    net = skrf.Network(str(case / "sparams.s1p"))  # only port 1 excited: one-port file
    m = json.loads((case / "metrics.json").read_text())
    k = int(np.argmin(abs(net.f - m["frequency_Hz"])))
    assert abs(net.s[k, 0, 0].real * 0.9 - m["S11"][0]) < 1e-12  # the reference really holds the old value


@pytest.mark.parametrize("key, message", [("grid_peak_W_per_kg_per_W", "result.h5 sar/avg_1g"),
                                          ("peak_W_per_kg_per_W", "is not the larger of its grid")])
def test_edited_peak_sar(copy, key, message):
    verify, root, case = copy

    def edit(d):
        d["sar"][0][key] *= 1.01

    _edit_json(case / "metrics.json", edit)
    rc, out = verify()
    assert rc == 3 and "peak SAR 1 g" in out and message in out, out


def test_result_h5_of_another_case(copy):
    verify, root, case = copy
    with h5py.File(case / "result.h5", "a") as h5:
        h5.attrs["case_id"] = "ffffffffffff"
    rc, out = verify()
    assert rc == 3 and "result.h5 belongs to case 'ffffffffffff'" in out, out


def test_case_json_no_longer_hashes_to_its_folder(copy):
    verify, root, case = copy

    def edit(d):
        d["scene"]["implant"]["depth_m"] = d["scene"]["implant"]["depth_m"] + 1e-3

    _edit_json(case / "case.json", edit)
    rc, out = verify()
    assert rc == 3 and "case.json content hashes to" in out and case.name in out, out


def test_edited_csv_row(copy):
    """The CSV copy of a table is checked as well as the Parquet one (pandas reads both)."""
    verify, root, case = copy
    p = root / "tables" / "summary.csv"
    s = pd.read_csv(p)
    s.loc[0, "peak_SAR_10g_W_per_kg_per_W"] = s.loc[0, "peak_SAR_10g_W_per_kg_per_W"] * 1.001
    s.to_csv(p, index=False)
    rc, out = verify()
    assert rc == 3 and "summary.csv column peak_SAR_10g_W_per_kg_per_W differs" in out and "rows [0]" in out, out


def test_edited_parquet_row(copy):
    verify, root, case = copy
    p = root / "tables" / "sparams.parquet"
    s = pd.read_parquet(p)
    s.loc[3, "mag_dB"] = s.loc[3, "mag_dB"] + 0.5
    s.to_parquet(p, index=False)
    rc, out = verify()
    assert rc == 3 and "sparams.mag_dB differs" in out, out


def test_table_row_removed(copy):
    verify, root, case = copy
    p = root / "tables" / "sar.csv"
    lines = p.read_text().splitlines()
    p.write_text("\n".join(lines[:-1]) + "\n")
    rc, out = verify()
    assert rc == 3 and f"sar.csv has {len(lines) - 2} rows, the case files give {len(lines) - 1}" in out, out
