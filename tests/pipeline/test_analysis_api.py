"""The analysis-script API (``bodysweep.open_study``, ``load_tables``, ``load_sar_volume``) on a real
one-case run of the tiny study: it returns what the files hold, and the SAR volume obeys the definition
of SAR (IEC/IEEE 62704-1:2017, 3.x "specific absorption rate": power absorbed per unit mass, so
``sum(SAR * density * cell volume)`` over the tissue is the absorbed power, here per watt accepted)."""
import json
import os
import shutil
from pathlib import Path

import h5py
import numpy as np
import pandas as pd
import pytest
import yaml

import bodysweep
from bodysweep.workflow import cli

pytestmark = [pytest.mark.pipeline, pytest.mark.timeout(900)]

TINY = Path(__file__).parent / "data" / "tiny.yaml"


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    """``(study file, results folder)`` of a finished one-case run."""
    w = tmp_path_factory.mktemp("api")
    spec = yaml.safe_load(TINY.read_text())
    spec["study"] = "api_tiny"
    spec["sweep"]["blocks"] = [{"grid": {"depth": [6]}}]
    path = w / "api_tiny.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False))
    old = os.getcwd()
    os.chdir(w)
    try:
        rc = cli.main(["run", str(path), "--cores", "1", "--accept-cost"])
    finally:
        os.chdir(old)
    assert rc == 0
    return path, w / "results"


def test_tables_in_one_call_are_the_parquet_files(study):
    path, results = study
    tables = bodysweep.load_tables(path, results_dir=results)
    assert set(tables) == {"summary", "sparams", "sar", "uncertainty"}
    assert tables["uncertainty"].empty  # the study has no uncertainty section
    for name, df in tables.items():
        pd.testing.assert_frame_equal(df, pd.read_parquet(results / "api_tiny" / "tables" / f"{name}.parquet"))
    assert len(tables["summary"]) == 1 and tables["summary"]["status"].iloc[0] in ("ok", "warning")


def test_sar_volume_in_one_call_is_the_stored_volume_and_its_peak_is_the_tables(study):
    path, results = study
    vol = bodysweep.load_sar_volume(path, 0, mass_g=10, results_dir=results)
    cid = vol.case_id
    with h5py.File(results / "api_tiny" / "cases" / cid / "result.h5") as h5:
        np.testing.assert_array_equal(vol.values, h5["sar/avg_10g"][()])
        np.testing.assert_array_equal(vol.z_edges_m, h5["sar/z_edges_m"][()])
    assert vol.values.shape == (len(vol.x_edges_m) - 1, len(vol.y_edges_m) - 1, len(vol.z_edges_m) - 1)
    assert vol.status in ("ok", "warning") and vol.mass_g == 10.0
    sar = bodysweep.load_tables(path, results_dir=results)["sar"]
    row = sar[(sar["case_id"] == cid) & (sar["mass_g"] == 10)].iloc[0]
    peak, where = vol.peak()
    # the volume is stored as float32 (result.h5), the table from the float64 computation
    assert peak == pytest.approx(row["peak_W_per_kg_per_W"], rel=1e-6)
    assert where[2] < 0  # in tissue (project convention: tissue at z < 0)


def test_local_sar_integrates_to_the_absorbed_power(study):
    path, results = study
    st = bodysweep.open_study(results / "api_tiny")  # the results folder works as well as the study file
    vol = st.sar_volume(st.cases[0]["label"])  # by label; local SAR
    metrics = json.loads((st.root / "cases" / vol.case_id / "metrics.json").read_text())
    dx, dy, dz = (np.diff(e) for e in (vol.x_edges_m, vol.y_edges_m, vol.z_edges_m))
    cell_volume = dx[:, None, None] * dy[None, :, None] * dz[None, None, :]
    absorbed = float(np.nansum(vol.values * vol.density_kg_m3 * cell_volume))  # W per W accepted
    # (not checked here: absorbed <= 1; on this 6 cells-per-wavelength mesh the finish step reports 1.06)
    assert absorbed > 0 and absorbed == pytest.approx(metrics["absorbed_fraction_tissue"], rel=1e-3)


def test_errors_name_what_is_missing(study, tmp_path):
    path, results = study
    st = bodysweep.open_study(path, results_dir=results)
    with pytest.raises(KeyError, match="not in"):
        st.sar_volume("no such case")
    with pytest.raises(KeyError, match="avg_10g"):
        st.sar_volume(0, mass_g=3)  # not averaged in this study: the stored ones are listed
    with pytest.raises(FileNotFoundError, match="neither a study file"):
        bodysweep.open_study(tmp_path / "absent")
    # a failed case has no volume; the error carries its reason
    copy = tmp_path / "copy"
    shutil.copytree(results / "api_tiny", copy)
    case = copy / "cases" / st.cases[0]["case_id"]
    (case / "result.h5").unlink()
    (case / "metrics.json").write_text(json.dumps({"status": "failed", "reason": "solve: energy did not decay"}))
    with pytest.raises(FileNotFoundError, match="energy did not decay"):
        bodysweep.load_sar_volume(copy, 0)
    shutil.rmtree(copy / "tables")
    with pytest.raises(FileNotFoundError, match="bodysweep collect"):
        bodysweep.load_tables(copy)
