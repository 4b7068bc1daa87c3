"""The shipped example studies that bring one's own parts run end to end (issue: CAD and anatomy examples in CI).

Each study of ``studies/`` named below is run through ``bodysweep run`` trimmed to its first case (the first
block's first entry), with its part files resolved from ``studies/``: an STL external antenna, a segmented label
volume body, and a printed planar implant antenna. Checked: the run succeeds, the case finishes (ok or with
warnings, never failed), its S-parameters are finite and passive (|S11|, |S21| <= 1: energy conservation of a
passive two-port, common practice) and its peak SAR is positive, and `verify` finds the folders consistent.
"""
import copy
import math
from pathlib import Path

import pandas as pd
import pytest
import yaml

from bodysweep.workflow import cli

pytestmark = [pytest.mark.pipeline, pytest.mark.solver, pytest.mark.timeout(1200)]

STUDIES = Path(__file__).resolve().parents[2] / "studies"


def _absolute_files(node):
    if isinstance(node, dict):
        return {k: (str((STUDIES / v).resolve()) if k == "file" and isinstance(v, str) else _absolute_files(v))
                for k, v in node.items()}
    if isinstance(node, list):
        return [_absolute_files(v) for v in node]
    return node


def _first_case_only(spec: dict) -> dict:
    spec = copy.deepcopy(spec)
    block = spec["sweep"]["blocks"][0]
    if "list" in block:
        block = {"list": block["list"][:1]}
    elif "grid" in block:
        block = {"grid": {k: v[:1] for k, v in block["grid"].items()}}
    spec["sweep"]["blocks"] = [block]
    spec["frequencies_MHz"] = spec["frequencies_MHz"][:1]
    spec.pop("uncertainty", None)
    return _absolute_files(spec)


@pytest.mark.parametrize("name", ["external_stl_dipole", "segmented_forearm", "implant_planar_boards"])
def test_example_study_runs(name, tmp_path, monkeypatch):
    spec = _first_case_only(yaml.safe_load((STUDIES / f"{name}.yaml").read_text()))
    study = tmp_path / f"{name}.yaml"
    study.write_text(yaml.safe_dump(spec, sort_keys=False))
    monkeypatch.chdir(tmp_path)
    assert cli.main(["run", str(study), "--cores", "2", "--accept-cost"]) == 0
    summary = pd.read_parquet(tmp_path / "results" / spec["study"] / "tables" / "summary.parquet")
    assert len(summary) == 1
    row = summary.iloc[0]
    assert row["status"] in ("ok", "warning"), (row["status"], row["reason"])
    for col in ("S11_dB", "S21_dB"):
        assert math.isfinite(row[col]) and row[col] <= 1e-6, (col, row[col])
    sar = [c for c in summary.columns if c.startswith("peak_SAR_") and c.endswith("_W_per_kg_per_W")]
    assert sar and all(row[c] > 0 for c in sar), {c: row[c] for c in sar}
    assert cli.main(["verify", str(study)]) == 0
