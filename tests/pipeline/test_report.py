"""The study report's pictures, from a synthetic summary table (no solver; behaviour, common practice)."""
from __future__ import annotations

import numpy as np
import pandas as pd

from bodysweep.workflow.report import plot_cases_overview, plot_vs_parameter


def _summary() -> pd.DataFrame:
    # two arrangements whose external antenna and implant orientation move together (a list block),
    # crossed with two depths: 'ext' has one point per series, 'depth' two
    rows = []
    for ext, normal in (("loop", "z"), ("dipole", "x")):
        for depth in (8, 12):
            rows.append({"case_id": f"{ext}{depth}", "label": f"ext={ext} depth={depth}mm", "status": "ok",
                         "ext": ext, "normal": normal, "depth": depth,
                         "S21_dB": -30.0 - depth - (10 if ext == "dipole" else 0),
                         "delivered_dBm": 2.0 - depth / 2})
    rows.append({"case_id": "bad", "label": "ext=loop depth=99mm", "status": "failed", "ext": "loop",
                 "normal": "z", "depth": 99, "S21_dB": np.nan, "delivered_dBm": np.nan})
    return pd.DataFrame(rows)


def _png_size(path):
    import matplotlib.image as mpimg

    return mpimg.imread(path).shape[:2]


def test_overview_has_a_row_per_finished_case(tmp_path):
    s = _summary()
    small = plot_cases_overview(s.iloc[:2], tmp_path / "two.png")
    big = plot_cases_overview(s, tmp_path / "all.png")
    assert small.exists() and big.exists()
    assert _png_size(big)[0] > _png_size(small)[0]  # taller with more cases (4 finished vs 2)


def test_parameter_moving_with_others_gets_no_line_plot(tmp_path):
    s = _summary()
    swept = ["ext", "normal", "depth"]
    assert plot_vs_parameter(s, "ext", ["normal", "depth"], tmp_path / "ext.png") is None
    png = plot_vs_parameter(s, "depth", [o for o in swept if o != "depth"], tmp_path / "depth.png")
    assert png is not None and png.exists()


def test_overview_of_no_finished_case_is_skipped(tmp_path):
    s = _summary()
    assert plot_cases_overview(s[s["status"] == "failed"], tmp_path / "none.png") is None
