"""The budget in the tables from hand-made case folders: own, study-level, failed runs, the mesh warning."""
import math

import pandas as pd
import pytest

from bodysweep.workflow.atomic import json_text
from bodysweep.workflow.collect import collect_frames
from bodysweep.workflow.layout import StudyLayout, write_plan

CFG = {"cases": "sample", "count": 1, "seed": 1, "rank_by": "figure_of_merit", "mesh_warning_fraction": 0.1,
       "components": ["mesh", "boundary", "power_balance"]}


def _m(peak, balance=0.9, status="ok"):
    return {"status": status, "reason": "", "frequency_Hz": 915e6, "S11": [0.5, 0.0], "S21": [0.01, 0.0],
            "sar": [{"mass_kg": 0.001, "peak_W_per_kg_per_W": peak, "cube_centre_m": [0, 0, -0.001],
                     "cube_side_m": 0.01}],
            "limits": [{"mass_kg": 0.001, "limit_W_per_kg": 1.6, "source": "x", "sar_limited_accepted_W": 1.6 / peak,
                        "implant_power_W": {"unmatched": 1e-5, "tx_matched": 2e-5, "both_matched": None}}],
            "energy_balance": balance, "warnings": []}


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
    write_plan(layout, "t", entries, {"uncertainty": CFG})
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
    assert s.loc["a", "sar_limited_accepted_W_conservative"] == pytest.approx(
        0.16 / (1 + s.loc["a", "peak_SAR_1g_U_rel"]))
    # hand calculation: the runs' implant powers equal the case's, so only the power balance (0.06) counts
    assert s.loc["a", "implant_power_tx_matched_U_rel"] == pytest.approx(2 * 0.06 / math.sqrt(3))
    # SAR-limited power 1.6 / peak: -1/6 (mesh run), +1/9 (boundary run), 0.06 (balance)
    assert s.loc["a", "sar_limited_accepted_U_rel"] == pytest.approx(
        2 * math.sqrt(((1 / 6) ** 2 + (1 / 9) ** 2 + 0.06 ** 2) / 3))
    assert "implant_power_both_matched_U_rel" not in s  # no value, no budget
    assert "mesh_component: mesh component of peak_SAR_1g is 20 %" in s.loc["a", "warnings"]
    assert "study-level" in s.loc["b", "warnings"]
    assert (s["status"] == "warning").all()  # a warning makes the status "warning", as every other warning does
    cols = list(f["summary"].columns)
    assert cols.index("peak_SAR_1g_U_rel") == cols.index("peak_SAR_1g_W_per_kg_per_W") + 1
    assert cols.index("sar_limited_accepted_U_rel") == cols.index("sar_limited_accepted_dBm") + 1
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
