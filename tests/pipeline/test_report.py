"""The study report and its pictures, from synthetic tables and case files (no solver; behaviour, common practice)."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from bodysweep.workflow import report_plots
from bodysweep.workflow.layout import StudyLayout, write_plan
from bodysweep.workflow.report import baseline_rows, write_report
from bodysweep.workflow.report_plots import plot_cases_overview, plot_vs_parameter


def _summary(link: bool = True) -> pd.DataFrame:
    # two arrangements whose external antenna and implant orientation move together (a list block),
    # crossed with two depths and two rings: 'ext' has one point per series, 'depth' and 'ring' two
    rows = []
    for ext, normal in (("loop", "z"), ("dipole", "x")):
        for depth in (8, 12):
            for ring in ("none", "ring"):
                p = 2.0 - depth / 2 + (3 if ring == "ring" else 0)
                rows.append({"case_id": f"{ext}{depth}{ring}", "label": f"ext={ext} depth={depth}mm ring={ring}",
                             "status": "ok", "ext": ext, "normal": normal, "depth": depth, "ring": ring,
                             "frequency_MHz": 403.0, "S11_dB": -0.1, "Zin1_re_ohm": 1.2, "Zin1_im_ohm": 132.0,
                             "mismatch_loss_port1_dB": 16.4,
                             "S21_dB": (-30.0 - depth - (10 if ext == "dipole" else 0)) if link else np.nan,
                             "peak_SAR_1g_W_per_kg_per_W": 10.0 + depth + (5 if ring == "ring" else 0),
                             "sar_limited_accepted_dBm": 20.0 - depth / 4, "deciding_limit": "1g_1.6W_per_kg",
                             "implant_power_unmatched_dBm": p - 16 if link else np.nan,
                             "implant_power_tx_matched_dBm": p if link else np.nan,
                             "implant_power_both_matched_dBm": np.nan,
                             "figure_of_merit": "implant_power_tx_matched_dBm" if link else "",
                             "figure_of_merit_value": p if link else np.nan,
                             "port2_reason": "port 2 not excited: add excite: [1, 2] to the study" if link
                             else "no implant port (one-port scene)",
                             "warnings": "strong coupling: something" if (ext, depth, ring) == ("loop", 8, "ring") else "",
                             "runtime_s": 60.0, "cells": 300000, "decay_reached": True})
    rows.append({"case_id": "bad", "label": "ext=loop depth=99mm ring=none", "status": "failed", "ext": "loop",
                 "normal": "z", "depth": 99, "ring": "none", "reason": "solve port 1: broke"})
    return pd.DataFrame(rows)


def _png_size(path):
    import matplotlib.image as mpimg

    return mpimg.imread(path).shape[:2]


def test_overview_has_a_row_per_finished_case(tmp_path):
    s = _summary()
    small = plot_cases_overview(s.iloc[:2], tmp_path / "two.png")
    big = plot_cases_overview(s, tmp_path / "all.png")
    assert small.exists() and big.exists()
    assert _png_size(big)[0] > _png_size(small)[0]  # taller with more cases


def test_parameter_moving_with_others_gets_no_line_plot(tmp_path):
    s = _summary()
    swept = ["ext", "normal", "depth", "ring"]
    assert plot_vs_parameter(s, "ext", ["normal", "depth", "ring"], tmp_path / "ext.png") is None
    png = plot_vs_parameter(s, "depth", [o for o in swept if o != "depth"], tmp_path / "depth.png")
    assert png is not None and png.exists()


def _figures(monkeypatch):
    figs = []

    def keep(fig, path):
        figs.append(fig)
        return path

    monkeypatch.setattr(report_plots, "_save", keep)
    return figs


def test_categorical_parameters_are_markers_not_lines(tmp_path, monkeypatch):
    figs = _figures(monkeypatch)
    s = _summary()
    assert plot_vs_parameter(s, "ring", ["ext", "normal", "depth"], tmp_path / "ring.png") is not None
    lines = [ln for ax in figs[-1].axes for ln in ax.get_lines()]
    assert lines and all(ln.get_linestyle() == "None" for ln in lines)  # no line joins two categories
    # categories in the study's order (first appearance), not alphabetical
    assert [t.get_text() for t in figs[-1].axes[0].get_xticklabels()] == ["none", "ring"]
    # a numeric parameter keeps its lines
    plot_vs_parameter(s, "depth", ["ext", "normal", "ring"], tmp_path / "depth.png")
    assert any(ln.get_linestyle() == "-" for ax in figs[-1].axes for ln in ax.get_lines())


def test_sar_only_study_ranks_by_sar(tmp_path, monkeypatch):
    figs = _figures(monkeypatch)
    s = _summary(link=False)
    assert plot_cases_overview(s, tmp_path / "o.png") is not None
    labels = [ax.get_xlabel() for ax in figs[-1].axes]
    assert "SAR-limited accepted power" in labels[0] and "SAR" in labels[1] and not any("S21" in x for x in labels)
    assert all(np.isfinite(ln.get_xdata()).all() for ln in figs[-1].axes[0].get_lines() if len(ln.get_xdata()))


def _study(tmp_path, summary, baseline=None, description="Loop versus dipole, our own scenario."):
    layout = StudyLayout.of("rep", tmp_path)
    entries = []
    for _, r in summary.iterrows():
        d = layout.case_dir(r["case_id"])
        d.mkdir(parents=True)
        (d / "case.json").write_text(json.dumps({"solver": {"cells_per_wavelength": 6.0}}))
        entries.append({"case_id": r["case_id"], "label": r["label"], "ports": [1],
                        "parameters": {"frequency_MHz": 403.0, "scene.external": r["ext"], "scene.implant.normal": r["normal"],
                                       "scene.implant.depth_mm": r["depth"], "scene.concentrators": r["ring"]}})
    summary = summary.rename(columns={"ext": "scene.external", "normal": "scene.implant.normal",
                                      "depth": "scene.implant.depth_mm", "ring": "scene.concentrators"})
    settings = {"description": description, "figure_of_merit": "implant_power", "baseline": baseline,
                "limits": [{"mass_g": 1, "limit_W_per_kg": 1.6, "source": "FCC 47 CFR 1.1310 (1 g)"}],
                "limits_are_defaults": True, "solver_preset": "draft",
                "parameter_paths": {"ext": "scene.external", "normal": "scene.implant.normal",
                                    "depth": "scene.implant.depth_mm", "ring": "scene.concentrators"}}
    write_plan(layout, "rep", entries, settings)
    layout.tables_dir.mkdir(parents=True)
    summary.to_parquet(layout.tables_dir / "summary.parquet")
    return layout


def test_report_carries_description_limits_cautions_and_warnings(tmp_path):
    layout = _study(tmp_path, _summary())
    text = write_report(layout).read_text()
    assert "Loop versus dipole, our own scenario." in text
    assert "## How to read this" in text and "accepted" in text
    # the deciding limit with its source, and that defaults were applied
    assert "FCC 47 CFR 1.1310 (1 g)" in text and "8 of 8 finished cases" in text
    assert "default limits were applied" in text
    # coarse mesh and the simulation-estimate caution deferring to standards, regulations, licensed practice
    assert "`draft` solver preset" in text and "Coarse meshes overstate peak SAR" in text
    assert "applicable standards" in text and "local" in text and "licensed professional practice" in text
    # per-case warnings, cells per wavelength, cells, runtime
    assert "strong coupling: something" in text and "`loop8ring`" in text
    assert "| 6 | 300,000 | 60 |" in text
    # port-1 figures and why the both-ends figure is missing, with how to get it
    assert "1.2 + j132" in text and "excite: [1, 2]" in text
    assert "allowed input" not in text and "delivered_dBm" not in text


def test_baseline_comparison(tmp_path):
    s = _summary()
    layout = _study(tmp_path, s, baseline={"ring": "none"})
    text = write_report(layout).read_text()
    assert "## Against the baseline" in text
    delta = pd.read_csv(layout.report_dir / "baseline_comparison.csv")
    assert len(delta) == 4  # every ring case has its ring=none twin; the baseline cases are left out
    r = delta.set_index("case_id").loc["loop8ring"]
    assert r["baseline_case_id"] == "loop8none"
    # analytic: the synthetic ring adds 3 dB to the figure of merit and 5 W/kg per W to a 18 W/kg per W peak
    assert r["delta_figure_of_merit_dB"] == pytest.approx(3.0)
    assert r["delta_peak_SAR_1g_dB"] == pytest.approx(10 * np.log10(23 / 18))
    assert r["delta_S21_dB"] == pytest.approx(0.0)
    # a case id as baseline
    d2 = baseline_rows(pd.read_parquet(layout.tables_dir / "summary.parquet"), "loop12none", {})
    assert len(d2) == 7 and set(d2["baseline_case_id"]) == {"loop12none"}


def test_overview_of_no_finished_case_is_skipped(tmp_path):
    s = _summary()
    assert plot_cases_overview(s[s["status"] == "failed"], tmp_path / "none.png") is None
