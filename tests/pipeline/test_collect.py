"""The collector's tables: columns, units and conversions, Touchstone reading, failed cases."""
import json
import math

import numpy as np
import pandas as pd
import pytest

from bodysweep.workflow.atomic import json_text, write_if_changed
from bodysweep.workflow.collect import (TABLE_NAMES, collect_frames, complex2db, touchstone2arrays, watt2dbm,
                                        write_frames)
from bodysweep.workflow.layout import StudyLayout, write_plan
from bodysweep.workflow.post.sparams import write_touchstone

SUMMARY_REQUIRED = {"case_id", "status", "reason", "frequency_MHz", "S11_dB", "S21_dB", "S22_dB",
                    "Zin1_re_ohm", "Zin1_im_ohm", "Zin2_re_ohm", "Zin2_im_ohm", "mismatch_loss_port1_dB",
                    "rollett_K", "port2_reason", "sar_limited_accepted_W", "sar_limited_accepted_dBm",
                    "deciding_limit", "implant_power_unmatched_dBm", "implant_power_tx_matched_W",
                    "implant_power_both_matched_dBm", "figure_of_merit", "figure_of_merit_value",
                    "max_available_gain_dB", "warnings", "runtime_s", "cells"}
SPARAMS_REQUIRED = ["case_id", "frequency_MHz", "i", "j", "re", "im", "mag_dB", "phase_deg"]
SAR_REQUIRED = ["case_id", "frequency_MHz", "mass_g", "peak_W_per_kg_per_W", "peak_from",
                "cube_x_mm", "cube_y_mm", "cube_z_mm", "cube_side_mm", "voxel_x_mm", "voxel_y_mm", "voxel_z_mm",
                "grid_peak_W_per_kg_per_W", "flush_peak_W_per_kg_per_W", "flush_face", "flush_search_converged"]


def test_decibel_conversions():
    # analytic: 20 log10 |0.1| = -20 dB; dBm = 10 log10(P / 1 mW), so 1 W = 30 dBm, 1 mW = 0 dBm
    assert complex2db(0.06 + 0.08j) == pytest.approx(-20.0)
    assert watt2dbm(1.0) == pytest.approx(30.0)
    assert watt2dbm(1e-3) == pytest.approx(0.0)
    assert math.isnan(watt2dbm(0.0)) and math.isnan(watt2dbm(None))


@pytest.mark.parametrize("form", ["ri", "ma", "db"])
def test_touchstone_reader_matches_scikit_rf(tmp_path, form):
    import skrf

    rng = np.random.default_rng(3)
    f = np.linspace(350e6, 450e6, 11)
    S = (rng.normal(size=(11, 2, 2)) + 1j * rng.normal(size=(11, 2, 2))) * 0.3
    path = write_touchstone(tmp_path / "x.s2p", f, S, form=form)
    f_mine, S_mine = touchstone2arrays(path)
    ref = skrf.Network(str(path))  # reference: scikit-rf's Touchstone reader
    np.testing.assert_allclose(f_mine, ref.f, rtol=1e-12)
    np.testing.assert_allclose(S_mine, ref.s, rtol=1e-6, atol=1e-9)
    np.testing.assert_allclose(S_mine, S, rtol=1e-6, atol=1e-9)


def _study(tmp_path, cases):
    layout = StudyLayout.of("t", tmp_path)
    entries = []
    for cid, params, metrics in cases:
        d = layout.case_dir(cid)
        d.mkdir(parents=True)
        (d / "metrics.json").write_text(json_text(metrics))
        entries.append({"case_id": cid, "label": f"label {cid}", "parameters": params, "ports": [1]})
    write_plan(layout, "t", entries)
    return layout


def _ok_metrics(f_Hz, s21):
    return {"status": "ok", "reason": "", "frequency_Hz": f_Hz,
            "S11": [0.3, -0.4], "S21": [s21.real, s21.imag], "S12": [s21.real, s21.imag], "S22": [0.0, 0.5],
            "sar": [{"mass_kg": 0.001, "peak_W_per_kg_per_W": 12.5, "peak_from": "flush",
                     "cube_centre_m": [0.001, -0.002, -0.005], "cube_side_m": 0.01,
                     "voxel_centre_m": [0.0012, -0.0021, -0.0005], "grid_peak_W_per_kg_per_W": 12.1,
                     "flush_peak_W_per_kg_per_W": 12.5, "flush_face": "+z", "flush_search_converged": False},
                    {"mass_kg": 0.01, "peak_W_per_kg_per_W": 5.0, "peak_from": "grid",
                     "cube_centre_m": [0.0, 0.0, -0.011], "cube_side_m": 0.0215,
                     "voxel_centre_m": [0.0, 0.0, -0.005], "grid_peak_W_per_kg_per_W": 5.0,
                     "flush_peak_W_per_kg_per_W": None, "flush_face": None}],
            "limits": [{"mass_kg": 0.001, "limit_W_per_kg": 1.6, "source": "limit one",
                        "sar_limited_accepted_W": 1.6 / 12.5,
                        "implant_power_W": {"unmatched": 1.6 / 12.5 * 0.7e-3, "tx_matched": 1.6 / 12.5 * 1e-3,
                                            "both_matched": 1.6 / 12.5 * 2e-3}},
                       {"mass_kg": 0.01, "limit_W_per_kg": 2.0, "source": "limit two",
                        "sar_limited_accepted_W": 2.0 / 5.0,
                        "implant_power_W": {"unmatched": 2.0 / 5.0 * 0.7e-3, "tx_matched": 2.0 / 5.0 * 1e-3,
                                            "both_matched": 2.0 / 5.0 * 2e-3}}],
            "ports": {"Zin1_ohm": [20.0, -30.0], "Zin2_ohm": [5.0, 60.0], "mismatch_loss_port1_dB": 1.25,
                      "mismatch_loss_port2_dB": 2.5, "rollett_K": 40.0, "port2_reason": None},
            "warnings": ["something to know"],
            "max_available_gain": 1e-3, "runtime_s": 4.0, "cells": 20000, "timesteps": 3000,
            "decay_reached": True}


def test_tables_columns_units_and_values(tmp_path):
    s21 = 0.01 * np.exp(1j * 0.3)
    layout = _study(tmp_path, [
        ("aaa", {"frequency_MHz": 403.0, "scene.implant.depth_mm": 5.0, "scene.external": "loop"}, _ok_metrics(403e6, s21)),
        ("bbb", {"frequency_MHz": 915.0, "scene.implant.depth_mm": 10.0, "scene.external": "dipole"},
         {"status": "failed", "reason": "solve port 1: something broke"}),
    ])
    # a band in a Touchstone file for the first case
    f = np.linspace(380e6, 420e6, 5)
    S = np.tile(np.array([[0.3 - 0.4j, s21], [s21, 0.5j]]), (5, 1, 1))
    write_touchstone(layout.case_dir("aaa") / "sparams.s2p", f, S)
    fr = collect_frames(layout)
    sm, sp, sar = fr["summary"], fr["sparams"], fr["sar"]

    assert SUMMARY_REQUIRED <= set(sm.columns)
    assert {"scene.implant.depth_mm", "scene.external"} <= set(sm.columns)  # every swept parameter
    assert {"peak_SAR_1g_W_per_kg_per_W", "peak_SAR_10g_W_per_kg_per_W"} <= set(sm.columns)
    assert {"sar_limited_accepted_W_1g_1.6W_per_kg", "sar_limited_accepted_dBm_10g_2W_per_kg",
            "limit_source_1g_1.6W_per_kg"} <= set(sm.columns)
    assert not any(c.startswith(("allowed_input", "delivered_", "matched_link")) for c in sm.columns)  # old names gone
    ok = sm.set_index("case_id").loc["aaa"]
    assert ok["S21_dB"] == pytest.approx(20 * np.log10(0.01))  # analytic: 20 log10 |S21|
    assert ok["S11_dB"] == pytest.approx(20 * np.log10(0.5))
    # the most restrictive limit decides (analytic: min over limits of limit / peak SAR)
    assert ok["sar_limited_accepted_W"] == pytest.approx(min(1.6 / 12.5, 2.0 / 5.0))
    assert ok["sar_limited_accepted_dBm"] == pytest.approx(10 * np.log10(1.6 / 12.5 / 1e-3))
    assert ok["deciding_limit"] == "1g_1.6W_per_kg"
    # implant powers of the deciding limit, in dBm = 10 log10(P / 1 mW) (common practice)
    assert ok["implant_power_tx_matched_dBm"] == pytest.approx(10 * np.log10(1.6 / 12.5 * 1e-3 / 1e-3))
    assert ok["implant_power_both_matched_W"] == pytest.approx(1.6 / 12.5 * 2e-3)
    # default figure of merit: both ends matched when available
    assert ok["figure_of_merit"] == "implant_power_both_matched_dBm"
    assert ok["figure_of_merit_value"] == pytest.approx(ok["implant_power_both_matched_dBm"])
    assert (ok["Zin1_re_ohm"], ok["Zin1_im_ohm"], ok["rollett_K"]) == (20.0, -30.0, 40.0)
    assert ok["max_available_gain_dB"] == pytest.approx(-30.0)
    assert ok["warnings"] == "something to know" and ok["port2_reason"] == ""
    bad = sm.set_index("case_id").loc["bbb"]
    assert bad["status"] == "failed" and "something broke" in bad["reason"]
    assert math.isnan(bad["S21_dB"])

    assert list(sp.columns[:1]) == ["case_id"] and set(SPARAMS_REQUIRED) <= set(sp.columns)
    assert {"scene.implant.depth_mm", "scene.external", "case_frequency_MHz"} <= set(sp.columns)
    a = sp[sp.case_id == "aaa"]
    assert len(a) == 5 * 4  # band points x S-matrix entries
    assert np.allclose(a["frequency_MHz"].unique(), f * 1e-6)
    row = a[(a.i == 2) & (a.j == 1)].iloc[0]
    assert complex(row.re, row.im) == pytest.approx(s21)
    assert row.mag_dB == pytest.approx(20 * np.log10(np.hypot(row.re, row.im)))   # analytic
    assert row.phase_deg == pytest.approx(np.degrees(np.arctan2(row.im, row.re)))  # analytic
    assert sp[sp.case_id == "bbb"].empty  # a failed case has no S-parameters

    assert list(sar.columns) == SAR_REQUIRED
    r = sar[(sar.case_id == "aaa") & np.isclose(sar.mass_g, 1.0)].iloc[0]
    assert (r.cube_x_mm, r.cube_y_mm, r.cube_z_mm, r.cube_side_mm) == pytest.approx((1.0, -2.0, -5.0, 10.0))
    assert (r.voxel_x_mm, r.voxel_y_mm, r.voxel_z_mm) == pytest.approx((1.2, -2.1, -0.5))
    assert (r.peak_from, r.flush_face) == ("flush", "+z")
    assert not r.flush_search_converged  # a search cut short is flagged in the table
    assert (r.grid_peak_W_per_kg_per_W, r.flush_peak_W_per_kg_per_W) == pytest.approx((12.1, 12.5))
    r10 = sar[(sar.case_id == "aaa") & np.isclose(sar.mass_g, 10.0)].iloc[0]
    assert r10.peak_from == "grid" and math.isnan(r10.flush_peak_W_per_kg_per_W)  # no flush cube: empty
    assert r.frequency_MHz == pytest.approx(403.0)


def test_written_tables_round_trip(tmp_path):
    layout = _study(tmp_path, [("aaa", {"frequency_MHz": 403.0, "x": "loop"}, _ok_metrics(403e6, 0.01 + 0j)),
                               ("bbb", {"frequency_MHz": 403.0, "x": 3.0}, _ok_metrics(403e6, 0.02 + 0j))])
    paths = write_frames(layout, collect_frames(layout))
    assert set(paths) == {f"{n}.{e}" for n in TABLE_NAMES for e in ("parquet", "csv")}
    pq = pd.read_parquet(paths["summary.parquet"])
    csv = pd.read_csv(paths["summary.csv"])
    assert list(pq.case_id) == ["aaa", "bbb"] == list(csv.case_id)
    assert pq["x"].tolist() == ["loop", "3.0"]  # mixed option/number parameter stored as text
    np.testing.assert_allclose(pq["S21_dB"], csv["S21_dB"], rtol=1e-9)


def test_write_if_changed_keeps_mtime(tmp_path):
    p = tmp_path / "a.json"
    assert write_if_changed(p, json_text({"a": 1}))
    t = p.stat().st_mtime_ns
    assert not write_if_changed(p, json_text({"a": 1}))
    assert p.stat().st_mtime_ns == t
    assert write_if_changed(p, json_text({"a": 2}))
    assert json.loads(p.read_text()) == {"a": 2}


def test_figure_of_merit_falls_back_to_port1_matched_without_port2(tmp_path):
    m = _ok_metrics(403e6, 0.01 + 0j)
    for lim in m["limits"]:
        lim["implant_power_W"]["both_matched"] = None
    m["ports"]["port2_reason"] = "port 2 not excited"
    layout = _study(tmp_path, [("aaa", {"frequency_MHz": 403.0}, m), ("bbb", {"frequency_MHz": 915.0},
                                                                         _ok_metrics(915e6, 0.02 + 0j))])
    # one case without the both-ends figure puts the whole study on the port-1-matched basis
    sm = collect_frames(layout)["summary"]
    assert (sm["figure_of_merit"] == "implant_power_tx_matched_dBm").all()
    np.testing.assert_allclose(sm["figure_of_merit_value"], sm["implant_power_tx_matched_dBm"])
    row = sm.iloc[0]
    assert "not excited" in row["port2_reason"]
    assert math.isnan(row["implant_power_both_matched_dBm"])
    row = collect_frames(layout, merit="S21")["summary"].iloc[0]
    assert row["figure_of_merit"] == "S21_dB" and row["figure_of_merit_value"] == pytest.approx(-40.0)


def test_metrics_of_the_earlier_format_still_collect(tmp_path):
    # a finished case whose metrics.json predates the port figures: same quantities under the old keys
    m = _ok_metrics(403e6, 0.01 + 0j)
    for lim in m["limits"]:
        p = lim.pop("sar_limited_accepted_W")
        lim.pop("implant_power_W")
        lim.update(max_input_power_W=p, delivered_power_W=p * 1e-3)
    m.pop("ports"), m.pop("max_available_gain"), m.pop("warnings")
    m["matched_link_efficiency"] = 2e-3
    layout = _study(tmp_path, [("aaa", {"frequency_MHz": 403.0}, m)])
    row = collect_frames(layout)["summary"].iloc[0]
    p = 1.6 / 12.5
    assert row["sar_limited_accepted_W"] == pytest.approx(p)
    assert row["implant_power_tx_matched_W"] == pytest.approx(p * 1e-3)
    assert row["implant_power_both_matched_W"] == pytest.approx(p * 2e-3)
    assert row["implant_power_unmatched_W"] == pytest.approx(p * 1e-4)  # |S21|^2 = 1e-4 (arithmetic)
    assert "metrics.json written before port figures" in row["warnings"] and math.isnan(row["Zin1_re_ohm"])
