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
                    "allowed_input_W", "allowed_input_dBm", "delivered_W", "delivered_dBm",
                    "matched_link_efficiency_dB", "runtime_s", "cells"}
SPARAMS_REQUIRED = ["case_id", "frequency_MHz", "i", "j", "re", "im", "mag_dB", "phase_deg"]
SAR_REQUIRED = ["case_id", "frequency_MHz", "mass_g", "peak_W_per_kg_per_W", "x_mm", "y_mm", "z_mm"]


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
            "sar": [{"mass_kg": 0.001, "peak_W_per_kg_per_W": 12.5, "location_m": [0.001, -0.002, -0.004]},
                    {"mass_kg": 0.01, "peak_W_per_kg_per_W": 5.0, "location_m": [0.0, 0.0, -0.005]}],
            "limits": [{"mass_kg": 0.001, "limit_W_per_kg": 1.6, "source": "limit one",
                        "max_input_power_W": 1.6 / 12.5, "delivered_power_W": 1.6 / 12.5 * 1e-3},
                       {"mass_kg": 0.01, "limit_W_per_kg": 2.0, "source": "limit two",
                        "max_input_power_W": 2.0 / 5.0, "delivered_power_W": 2.0 / 5.0 * 1e-3}],
            "matched_link_efficiency": 1e-3, "runtime_s": 4.0, "cells": 20000, "timesteps": 3000,
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
    assert {"allowed_input_W_1g_1.6W_per_kg", "allowed_input_dBm_10g_2W_per_kg"} <= set(sm.columns)
    ok = sm.set_index("case_id").loc["aaa"]
    assert ok["S21_dB"] == pytest.approx(20 * np.log10(0.01))  # analytic: 20 log10 |S21|
    assert ok["S11_dB"] == pytest.approx(20 * np.log10(0.5))
    # the most restrictive limit decides (analytic: min over limits of limit / peak SAR)
    assert ok["allowed_input_W"] == pytest.approx(min(1.6 / 12.5, 2.0 / 5.0))
    assert ok["allowed_input_dBm"] == pytest.approx(10 * np.log10(1.6 / 12.5 / 1e-3))
    assert ok["matched_link_efficiency_dB"] == pytest.approx(-30.0)
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
    assert (r.x_mm, r.y_mm, r.z_mm) == pytest.approx((1.0, -2.0, -4.0))
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
