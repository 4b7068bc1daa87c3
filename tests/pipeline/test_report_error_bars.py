"""The report's error-bar figure of the uncertainty budget stays readable with many long case labels.

Invented demo data (16 cases with the demo's kind of labels); the check is geometric: in the drawn figure every
case label appears once, the labels do not overlap each other and none reaches into a plotting area.
"""
import numpy as np
import pandas as pd

from bodysweep.workflow import report_checks, report_plots


def _summary(n=16):
    rows = []
    for k in range(n):
        f = 403 if k < n // 2 else 915
        rows.append({"case_id": f"{k:012x}", "status": "warning" if k % 3 else "ok",
                     "label": f"f={f}MHz ext={'wrist_loop' if k % 4 < 2 else 'strip_dipole'} implant_normal=z "
                              f"ring={'none' if k % 2 else 'split_ring_z'} depth={12 + 4 * (k % 2)}mm",
                     "peak_SAR_1g_W_per_kg_per_W": 50.0 + 10 * k, "peak_SAR_10g_W_per_kg_per_W": 20.0 + 2 * k,
                     "peak_SAR_1g_U_rel": 0.2, "peak_SAR_10g_U_rel": 0.15,
                     "sar_limited_accepted_dBm": 10.0 + 0.2 * k, "sar_limited_accepted_dBm_conservative": 9.2 + 0.2 * k,
                     "uncertainty_source": "own" if k < 2 else "study-level (largest of 2 cases)"})
    return pd.DataFrame(rows)


def _overlap(a, b) -> bool:
    return a.x0 < b.x1 and b.x0 < a.x1 and a.y0 < b.y1 and b.y0 < a.y1


def test_labels_once_and_apart(tmp_path, monkeypatch):
    figs = []

    def keep(fig, path):  # save as the report does, but keep the figure open to measure it
        figs.append(fig)
        fig.savefig(path, dpi=110, bbox_inches="tight")
        return path

    monkeypatch.setattr(report_plots, "_save", keep)
    s = _summary()
    out = report_checks.plot_error_bars(s, tmp_path / "bars.png")
    assert out is not None and out.exists() and out.stat().st_size > 0
    fig = figs[0]
    fig.canvas.draw()
    r = fig.canvas.get_renderer()
    texts = [t for ax in fig.axes for t in ax.get_yticklabels() + ax.get_xticklabels()
             if t.get_visible() and t.get_text() in set(s["label"])]
    assert sorted(t.get_text() for t in texts) == sorted(s["label"])  # each case label once
    boxes = [t.get_window_extent(r) for t in texts]
    for i in range(len(boxes)):
        for j in range(i + 1, len(boxes)):
            assert not _overlap(boxes[i], boxes[j]), (texts[i].get_text(), texts[j].get_text())
    plots = [ax.get_window_extent(r) for ax in fig.axes]
    assert not any(_overlap(b, p) for b in boxes for p in plots)
    # the bars are the expanded uncertainty: each peak SAR's bar runs from value (1 - U) to value (1 + U)
    ends = np.concatenate([np.asarray(seg)[:, :, 0].ravel() for c in fig.axes[0].collections for seg in [c.get_segments()]])
    for mass, u in (("1g", 0.2), ("10g", 0.15)):
        v = s[f"peak_SAR_{mass}_W_per_kg_per_W"].to_numpy()
        for want in np.concatenate([v * (1 - u), v * (1 + u)]):
            assert np.isclose(ends, want).any(), (mass, want)
