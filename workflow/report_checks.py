"""Report section on how far a study's numbers can be trusted: the uncertainty budget (per-case warnings
are listed by :mod:`.report` itself).

Kept apart from :mod:`.report` (plots and the case list); :func:`.report.write_report` appends the lines
:func:`budget_lines` returns.
"""
from __future__ import annotations

import pandas as pd


def _fmt(v, spec: str) -> str:
    try:
        v = float(v)
    except (TypeError, ValueError):
        return str(v)
    return "" if v != v else format(v, spec)


def plot_error_bars(summary: pd.DataFrame, path, max_cases: int = 40):
    """Peak SAR per mass and SAR-limited accepted power of each case with their expanded uncertainty (k = 2) as bars.

    One row per case (its label once, on the left), the two quantities side by side on a shared case axis, so that
    long labels stay readable however many cases there are.
    """
    import numpy as np

    from .report_plots import _labels, _plt, _save

    sar_cols = [c for c in summary.columns if c.startswith("peak_SAR_") and c.endswith("_U_rel")]
    ok = summary[summary["status"].isin(["ok", "warning"]) & summary[sar_cols].notna().any(axis=1)] if sar_cols else summary.iloc[:0]
    if ok.empty:
        return None
    ok = ok.head(max_cases)
    n = len(ok)
    plt = _plt()
    fig, (a1, a2) = plt.subplots(1, 2, sharey=True, figsize=(12, max(3.0, 0.34 * n + 1.6)), constrained_layout=True)
    y = np.arange(n)[::-1].astype(float)
    h = 0.6 / len(sar_cols)
    for k, uc in enumerate(sar_cols):
        mass = uc[len("peak_SAR_"):-len("_U_rel")]
        v = ok[f"peak_SAR_{mass}_W_per_kg_per_W"].to_numpy(float)
        a1.errorbar(v, y - (k - (len(sar_cols) - 1) / 2) * h, xerr=v * ok[uc].to_numpy(float), fmt="o", capsize=3,
                    ms=4, label=f"{mass} average")
    p = ok["sar_limited_accepted_dBm"].to_numpy(float)
    lo = p - ok["sar_limited_accepted_dBm_conservative"].to_numpy(float)
    own = (ok["uncertainty_source"] == "own").to_numpy()
    for sel, mfc, text in ((own, "C2", "own budget"), (~own, "white", "study-level budget (no own runs)")):
        if sel.any():
            a2.errorbar(p[sel], y[sel], xerr=[lo[sel], np.zeros(int(sel.sum()))], fmt="s", capsize=3, ms=5,
                        color="C2", mfc=mfc, label=text)
    a1.set_yticks(y, _labels(ok), fontsize=7)
    a1.set_ylim(-0.7, n - 0.3)
    for ax in (a1, a2):
        ax.grid(True, axis="x", alpha=0.3)
        ax.legend(fontsize=7, loc="best")
    a1.set_xlabel("peak averaged SAR (W/kg per W accepted at port 1)")
    a1.set_title("Peak SAR, bars: expanded uncertainty (k = 2)", fontsize=10)
    a2.set_xlabel("SAR-limited accepted power at port 1 (dBm)")
    a2.set_title("SAR-limited accepted power,\nbar: down to its conservative value", fontsize=10)
    return _save(fig, path)


def budget_lines(layout, summary: pd.DataFrame, case_id: str | None) -> list[str]:
    """``## Uncertainty budget`` section: error-bar plot and the budget table of ``case_id`` (empty without a budget)."""
    path = layout.tables_dir / "uncertainty.parquet"
    if not path.exists():
        return []
    table = pd.read_parquet(path)
    if table.empty:
        return []
    lines = ["", "## Uncertainty budget", "",
             "Each component is the change of a quantity when one input of the simulation is changed (a denser mesh, "
             "the boundary moved out, tissue properties changed, a deeper end criterion) or the excess of the case's "
             "power balance over 1, counted as the half-width of a rectangular distribution (divisor sqrt 3); the "
             "standard uncertainties combine by root-sum-square and are expanded with k = 2 (JCGM 100:2008). SAR and "
             "powers: relative (0.1 = 10 %); S-parameters: dB. Full table: `../tables/uncertainty.parquet`.", ""]
    png = plot_error_bars(summary, layout.report_dir / "uncertainty_error_bars.png")
    if png is not None:
        lines += [f"![Error bars]({png.name})", ""]
    if case_id is None or case_id not in set(table["case_id"]):
        case_id = str(table["case_id"].iloc[0])
    rows = table[table["case_id"] == case_id]
    lines += [f"Budget of case `{case_id}` ({rows['label'].iloc[0]}; {rows['source'].iloc[0]}):", "",
              "| quantity | component | deviation | distribution | divisor | standard uncertainty |",
              "|---|---|---|---|---|---|"]
    for _, r in rows.iterrows():
        unit = " dB" if r["unit"] == "dB" else ""
        lines.append(f"| {r['quantity']} | {r['component']} | {_fmt(r['deviation'], '+.3g')}{unit if r['deviation'] == r['deviation'] else ''} | "
                     f"{r['distribution']} | {_fmt(r['divisor'], '.3f')} | {_fmt(r['standard_uncertainty'], '.3g')}{unit} |")
    return lines
