"""The budget in the tables from hand-made case folders: own, study-level, failed runs, the mesh warning."""
import math

import pandas as pd
import pytest

from bodysweep.workflow.atomic import json_text
from bodysweep.workflow.collect import collect_frames
from bodysweep.workflow.layout import StudyLayout, write_plan

CFG = {"cases": "sample", "count": 1, "seed": 1, "rank_by": "delivered_dBm", "mesh_warning_fraction": 0.1,
       "components": ["mesh", "boundary", "power_balance"]}


def _m(peak, balance=0.9, status="ok"):
    return {"status": status, "reason": "", "frequency_Hz": 915e6, "S11": [0.5, 0.0], "S21": [0.01, 0.0],
            "sar": [{"mass_kg": 0.001, "peak_W_per_kg_per_W": peak, "location_m": [0, 0, -0.001]}],
            "limits": [{"mass_kg": 0.001, "limit_W_per_kg": 1.6, "source": "x", "max_input_power_W": 1.6 / peak,
                        "delivered_power_W": 1e-5}], "energy_balance": balance, "warnings": []}


def _layout(tmp_path, folders, runs):
    layout = StudyLayout.of("t", tmp_path)
    entries = []
    for cid, metrics in folders.items():
        d = layout.case_dir(cid)
        d.mkdir(parents=True)
        (d / "metrics.json").write_text(json_text(metrics))
        e = {"case_id": cid, "label": cid, "parameters": {}, "ports": [1]}
        if cid in runs:
            e["budget"] = [{"of": runs[cid][0], "component": runs[cid][1]}]
            e["parameters"] = {"uncertainty_run": runs[cid][1]}
        entries.append(e)
    write_plan(layout, "t", entries, CFG)
    return layout


def test_own_study_level_and_warning(tmp_path):
    # case a has runs: mesh +20 % peak SAR, boundary -10 %; case b has none and takes a's (largest) deviations
    layout = _layout(tmp_path, {"a": _m(10.0, balance=1.06), "b": _m(20.0), "am": _m(12.0), "ab": _m(9.0)},
                     {"am": ("a", "mesh"), "ab": ("a", "boundary")})
    f = collect_frames(layout)
    s, u = f["summary"].set_index("case_id"), f["uncertainty"]
    assert list(s.index) == ["a", "b"]  # runs are not rows of the summary
    # hand calculation (JCGM 100:2008): u = 0.2/sqrt3, 0.1/sqrt3, 0.06/sqrt3 -> U = 2 sqrt(0.04+0.01+0.0036)/sqrt3
    assert s.loc["a", "peak_SAR_1g_U_rel"] == pytest.approx(2 * math.sqrt(0.0536 / 3))
    assert s.loc["b", "peak_SAR_1g_U_rel"] == pytest.approx(2 * math.sqrt(0.05 / 3))  # b's own balance 0.9: 0
    assert s.loc["b", "uncertainty_source"] == "study-level (largest of 1 cases)"
    assert s.loc["a", "allowed_input_W_conservative"] == pytest.approx(0.16 / (1 + s.loc["a", "peak_SAR_1g_U_rel"]))
    assert "mesh component of peak_SAR_1g is 20 %" in s.loc["a", "warnings"]
    assert "study-level" in s.loc["b", "warnings"]
    assert set(u[u.case_id == "a"].run_case_id) >= {"am", "ab"}


def test_failed_run_leaves_the_uncertainty_empty_and_says_why(tmp_path):
    layout = _layout(tmp_path, {"a": _m(10.0), "am": _m(12.0, status="failed"), "ab": _m(9.0)},
                     {"am": ("a", "mesh"), "ab": ("a", "boundary")})
    s = collect_frames(layout)["summary"].set_index("case_id")
    assert math.isnan(s.loc["a", "peak_SAR_1g_U_rel"])
    assert s.loc["a", "uncertainty_source"] == "incomplete: mesh run failed or missing"


def test_no_section_no_columns(tmp_path):
    layout = StudyLayout.of("t", tmp_path)
    d = layout.case_dir("a")
    d.mkdir(parents=True)
    (d / "metrics.json").write_text(json_text(_m(10.0)))
    write_plan(layout, "t", [{"case_id": "a", "label": "a", "parameters": {}, "ports": [1]}])
    f = collect_frames(layout)
    assert "peak_SAR_1g_U_rel" not in f["summary"] and f["uncertainty"].empty
    assert isinstance(f["uncertainty"], pd.DataFrame)
