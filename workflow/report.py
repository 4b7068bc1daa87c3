"""The study report: PNG plots and a short Markdown summary in ``results/<study>/report/``.

Plots
-----
``cases_overview.png``            every case in one chart: S21 (dB) and delivered implant power (dBm), best first
``s21_vs_<parameter>.png``        S21 (dB) and delivered implant power (dBm) against each swept parameter
                                  (only parameters along which some series has two or more points)
``peak_sar.png``                  peak 1 g / 10 g averaged SAR per watt of input power, per case
``sar_section_<case_id>.png``     SAR cross-sections through the SAR peak of the best case (result.h5)
"""
from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pandas as pd

from .atomic import atomic_path, write_text
from .layout import StudyLayout, read_plan

SAFETY_NOTE = ("Results are simulation estimates from a simplified model of tissue and antennas. Exposure "
               "compliance is decided under the applicable standards, local regulations and licensed practice.")

MAX_SERIES = 10
MAX_BARS = 60


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def _save(fig, path: Path) -> Path:
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=110, bbox_inches="tight")
    _plt().close(fig)
    return path


def _safe(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", name).strip("_")


def swept_parameters(summary: pd.DataFrame, parameter_columns: list[str]) -> list[str]:
    """The parameter columns that take more than one value in the study."""
    return [c for c in parameter_columns if c in summary and summary[c].nunique(dropna=False) > 1]


def best_case(summary: pd.DataFrame) -> pd.Series | None:
    """The finished case that delivers most power to the implant within the SAR limit (else: highest S21)."""
    ok = summary[summary["status"].isin(["ok", "warning"])]
    if ok.empty:
        return None
    for col in ("delivered_W", "S21_dB"):
        if col in ok and ok[col].notna().any():
            return ok.loc[ok[col].idxmax()]
    return ok.iloc[0]


def _x_values(col: pd.Series) -> tuple[np.ndarray, list[str] | None]:
    num = pd.to_numeric(col, errors="coerce")
    if num.notna().all():
        return num.to_numpy(float), None
    cats = sorted(col.astype(str).unique())
    return col.astype(str).map({c: i for i, c in enumerate(cats)}).to_numpy(float), cats


def _ranking_column(summary: pd.DataFrame) -> str:
    for col in ("delivered_dBm", "S21_dB"):
        if col in summary and pd.to_numeric(summary[col], errors="coerce").notna().any():
            return col
    return "S21_dB"


def plot_cases_overview(summary: pd.DataFrame, path: Path) -> Path | None:
    """One row per finished case, best first: S21 (dB) and delivered implant power at the SAR limit (dBm).

    Works for any sweep shape (also when parameters move together, as in a list block), so it is the first
    picture of the report. At most ``MAX_BARS`` cases are shown.
    """
    ok = summary[summary["status"].isin(["ok", "warning"])].copy()
    if ok.empty:
        return None
    rank = _ranking_column(ok)
    ok["_rank"] = pd.to_numeric(ok[rank], errors="coerce")
    ok = ok.sort_values("_rank", ascending=False, na_position="last").head(MAX_BARS)
    plt = _plt()
    n = len(ok)
    fig, axes = plt.subplots(1, 2, sharey=True, figsize=(11, max(2.5, 0.32 * n + 1.4)))
    y = np.arange(n)[::-1]
    labels = ok["label"].astype(str).where(ok["label"].astype(str) != "", ok["case_id"].astype(str))
    for ax, col, xlab in zip(axes, ("S21_dB", "delivered_dBm"),
                             ("S21 (dB)", "delivered implant power at the SAR limit (dBm)")):
        vals = pd.to_numeric(ok[col], errors="coerce").to_numpy(float) if col in ok else np.full(n, np.nan)
        ax.hlines(y, np.nanmin(vals) if np.isfinite(vals).any() else 0, vals, color="0.8", lw=1)
        ax.plot(vals, y, "o", color="tab:blue")
        for yy, v in zip(y, vals):
            if np.isfinite(v):
                ax.annotate(f"{v:.1f}", (v, yy), xytext=(4, 0), textcoords="offset points", va="center", fontsize=7)
        ax.set_xlabel(xlab)
        ax.grid(True, axis="x", alpha=0.3)
    axes[0].set_yticks(y, labels, fontsize=7)
    extra = f" (best {MAX_BARS} of {len(summary)})" if len(summary) > MAX_BARS else ""
    fig.suptitle(f"All cases, best first by {rank}{extra}")
    fig.tight_layout()
    return _save(fig, path)


def plot_vs_parameter(summary: pd.DataFrame, param: str, others: list[str], path: Path) -> Path | None:
    """S21 (dB) and delivered power (dBm) against ``param``, one line per combination of ``others``.

    Returns None (no plot) when no series has two or more points along ``param`` (the parameter only
    moves together with others, as in a list or zip block: the overview shows those cases).
    """
    ok = summary[summary["status"].isin(["ok", "warning"])]
    groups = list(ok.groupby(others, dropna=False)) if others else [((), ok)]
    groups = [(k, g) for k, g in groups if g[param].nunique(dropna=False) > 1]
    if not groups:
        return None
    plt = _plt()
    shown = min(len(groups), MAX_SERIES)
    legend_rows = 0 if len(groups) == 1 else (shown if shown > 5 else (shown + 1) // 2)
    legend_in = 0.15 * legend_rows + 0.1 if legend_rows else 0.0  # inches below the axes for the legend
    fig, axes = plt.subplots(1, 2, figsize=(10, 4 + legend_in))
    x_all, cats = _x_values(summary[param])
    cat_map = {c: i for i, c in enumerate(cats)} if cats else None
    for k, (key, g) in enumerate(groups[:MAX_SERIES]):
        key = key if isinstance(key, tuple) else (key,)
        label = ", ".join(f"{o}={v}" for o, v in zip(others, key)) or None
        x = (g[param].astype(str).map(cat_map).to_numpy(float) if cat_map else pd.to_numeric(g[param]).to_numpy(float))
        order = np.argsort(x)
        for ax, col in zip(axes, ("S21_dB", "delivered_dBm")):
            ax.plot(x[order], g[col].to_numpy(float)[order], marker="o", label=label)
    for ax, ylab in zip(axes, ("S21 (dB)", "delivered implant power\nat the SAR limit (dBm)")):
        ax.set_xlabel(param)
        ax.set_ylabel(ylab)
        ax.grid(True, alpha=0.3)
        if cats:
            ax.set_xticks(range(len(cats)), cats, rotation=20)
    extra = f" (first {MAX_SERIES} of {len(groups)} series)" if len(groups) > MAX_SERIES else ""
    fig.suptitle(f"S21 and delivered power vs {param}{extra}")
    if legend_rows:  # legend below the plots, where it hides no point
        handles, labels = axes[0].get_legend_handles_labels()
        fig.legend(handles, labels, loc="lower center", ncol=1 if shown > 5 else 2, fontsize=7, frameon=False)
        fig.tight_layout(rect=(0, legend_in / (4 + legend_in), 1, 1))
    else:
        fig.tight_layout()
    return _save(fig, path)


def plot_peak_sar(summary: pd.DataFrame, path: Path) -> Path | None:
    """Bars of peak averaged SAR per watt of input power for every finished case."""
    cols = [c for c in summary.columns if c.startswith("peak_SAR_") and c.endswith("_W_per_kg_per_W")]
    ok = summary[summary["status"].isin(["ok", "warning"])]
    if not cols or ok.empty or not np.any(ok[cols].to_numpy(float) > 0):  # no tissue (phantom none): no SAR
        return None
    plt = _plt()
    ok = ok.sort_values(cols[0], ascending=False).head(MAX_BARS)
    fig, ax = plt.subplots(figsize=(max(6, 0.35 * len(ok) + 2), 4.5))
    w = 0.8 / len(cols)
    for k, c in enumerate(cols):
        mass = c[len("peak_SAR_"):-len("_W_per_kg_per_W")]
        ax.bar(np.arange(len(ok)) + (k - (len(cols) - 1) / 2) * w, ok[c].to_numpy(float), width=w,
               label=f"{mass} average")
    labels = ok["label"].astype(str).where(ok["label"].astype(str) != "", ok["case_id"])
    ax.set_xticks(range(len(ok)), labels, rotation=70, ha="right", fontsize=7)
    ax.set_ylabel("peak averaged SAR (W/kg per W accepted at port 1)")
    ax.set_yscale("log")
    ax.grid(True, axis="y", alpha=0.3)
    ax.legend()
    ax.set_title("Peak averaged SAR per watt accepted at port 1")
    return _save(fig, path)


def read_sar_volume(result_h5: Path, name: str = "local") -> tuple[np.ndarray, tuple[np.ndarray, np.ndarray, np.ndarray]]:
    """A SAR volume per watt and its cell centres from a case's ``result.h5``.

    Parameters
    ----------
    result_h5 : Path
        The file written by the finish step (group ``sar``: ``local``, ``avg_<m>g``, ``<a>_edges_m``).
    name : str
        ``"local"`` (point SAR) or an averaged volume such as ``"avg_10g"``.

    Returns
    -------
    sar : ndarray, shape (nx, ny, nz)
        SAR in W/kg per watt accepted at port 1.
    (x, y, z) : ndarrays of shapes (nx,), (ny,), (nz,)
        Cell-centre coordinates in metres.
    """
    import h5py

    with h5py.File(result_h5, "r") as h5:
        if "sar" not in h5 or name not in h5["sar"]:
            raise KeyError(f"{result_h5}: no SAR volume sar/{name}")
        g = h5["sar"]
        sar = g[name][()].astype(float)
        edges = [g[f"{a}_edges_m"][()] for a in "xyz"]
    centres = tuple(0.5 * (e[1:] + e[:-1]) for e in edges)
    if tuple(c.size for c in centres) != sar.shape:
        raise ValueError(f"{result_h5}: SAR shape {sar.shape} does not match the grid {[c.size for c in centres]}")
    return sar, centres  # type: ignore[return-value]


def plot_sar_section(result_h5: Path, path: Path, title: str) -> Path:
    """Two cross-sections (x-z and y-z) through the SAR peak, in dB relative to the peak."""
    plt = _plt()
    name = "local"
    sar, (x, y, z) = read_sar_volume(result_h5, name)
    sar = np.nan_to_num(np.asarray(sar, float), nan=0.0)
    i, j, k = np.unravel_index(int(np.argmax(sar)), sar.shape)
    peak = sar[i, j, k]
    with np.errstate(divide="ignore"):
        db = 10.0 * np.log10(np.maximum(sar, peak * 1e-6) / peak) if peak > 0 else np.zeros_like(sar)
    fig, axes = plt.subplots(1, 2, figsize=(11, 4.5))
    for ax, sl, hor, hname, fixed in ((axes[0], db[:, j, :], x, "x", f"y = {y[j] * 1e3:.1f} mm"),
                                      (axes[1], db[i, :, :], y, "y", f"x = {x[i] * 1e3:.1f} mm")):
        im = ax.pcolormesh(hor * 1e3, z * 1e3, sl.T, shading="nearest", cmap="magma", vmin=-40, vmax=0)
        ax.plot([hor[i if hname == "x" else j] * 1e3], [z[k] * 1e3], "c+", ms=12, mew=2)
        ax.axhline(0.0, color="w", lw=0.6, ls="--")
        ax.set_xlabel(f"{hname} (mm)")
        ax.set_ylabel("z (mm), body surface at 0")
        ax.set_title(fixed, fontsize=9)
        ax.set_aspect("equal")
    fig.colorbar(im, ax=axes, label="SAR relative to the peak (dB)")
    fig.suptitle(f"{title}\npeak local SAR {peak:.3g} W/kg per W accepted at port 1, at "
                 f"({x[i] * 1e3:.1f}, {y[j] * 1e3:.1f}, {z[k] * 1e3:.1f}) mm", fontsize=9)
    return _save(fig, path)


def _fmt(v, spec: str = ".3g") -> str:
    try:
        if v is None or (isinstance(v, float) and math.isnan(v)):
            return "-"
        return format(float(v), spec)
    except (TypeError, ValueError):
        return str(v)


def write_report(layout: StudyLayout) -> Path:
    """Plots and ``report.md`` of a study from its tables; returns the path of ``report.md``."""
    summary = pd.read_parquet(layout.tables_dir / "summary.parquet")
    plan = read_plan(layout)
    pkeys: list[str] = list(dict.fromkeys(k for e in plan["cases"] for k in e.get("parameters", {})))
    pcols = [k if k == "frequency_MHz" else (f"param.{k}" if f"param.{k}" in summary.columns else k) for k in pkeys]
    rdir = layout.report_dir
    rdir.mkdir(parents=True, exist_ok=True)
    for stale in [*rdir.glob("s21_vs_*.png"), *rdir.glob("sar_section_*.png")]:  # from an earlier report
        stale.unlink(missing_ok=True)
    swept = swept_parameters(summary, pcols)
    ok = summary[summary["status"].isin(["ok", "warning"])]
    failed = summary[~summary["status"].isin(["ok", "warning"])]
    lines = [f"# Study `{plan['study']}`", "",
             f"> **Safety note.** {SAFETY_NOTE}", "",
             f"{len(summary)} cases: {len(ok)} finished, {len(failed)} failed or missing. "
             f"Tables: `../tables/summary.parquet`, `sparams.parquet`, `sar.parquet` (and `.csv`).", ""]
    figures: list[tuple[str, Path]] = []
    if not ok.empty:
        overview = plot_cases_overview(summary, rdir / "cases_overview.png")
        if overview:
            figures.append(("All cases, best first", overview))
        for p in swept:
            others = [o for o in swept if o != p]
            png = plot_vs_parameter(summary, p, others, rdir / f"s21_vs_{_safe(p)}.png")
            if png:
                figures.append((f"S21 and delivered power vs `{p}`", png))
        sar_png = plot_peak_sar(summary, rdir / "peak_sar.png")
        if sar_png:
            figures.append(("Peak averaged SAR per watt of input power", sar_png))
    best = best_case(summary)
    if best is not None:
        lines += ["## Best case", "",
                  f"`{best['case_id']}` ({best['label']}): S21 {_fmt(best['S21_dB'], '.2f')} dB, "
                  f"allowed input power {_fmt(best.get('allowed_input_dBm'), '.1f')} dBm, delivered implant "
                  f"power {_fmt(best.get('delivered_dBm'), '.1f')} dBm, matched link efficiency "
                  f"{_fmt(best.get('matched_link_efficiency_dB'), '.1f')} dB.", ""]
        h5 = layout.case_dir(str(best["case_id"])) / "result.h5"
        try:
            figures.append((f"SAR cross-sections through the peak, case `{best['case_id']}`",
                            plot_sar_section(h5, rdir / f"sar_section_{best['case_id']}.png",
                                             f"case {best['case_id']} ({best['label']})")))
        except (OSError, KeyError, ValueError) as exc:
            lines += [f"(no SAR cross-section: {exc})", ""]
    lines += ["## Plots", ""]
    for caption, png in figures:
        lines += [f"### {caption}", "", f"![{caption}]({png.name})", ""]
    cols = ["case_id", "label", "status", "S11_dB", "S21_dB", "allowed_input_dBm", "delivered_dBm"]
    lines += ["## Cases", "", "| " + " | ".join(cols) + " |", "|" + "---|" * len(cols)]
    for _, r in summary.iterrows():
        lines.append("| " + " | ".join(
            _fmt(r.get(c), ".2f") if c.endswith(("_dB", "_dBm")) else str(r.get(c, "")) for c in cols) + " |")
    from .report_checks import budget_lines, warning_lines

    lines += warning_lines(summary)
    lines += budget_lines(layout, summary, None if best is None else str(best["case_id"]))
    if not failed.empty:
        lines += ["", "## Failed cases", ""]
        lines += [f"- `{r['case_id']}` ({r['label']}): {r['status']}: {r['reason']}" for _, r in failed.iterrows()]
    lines.append("")
    write_text(layout.report_file, "\n".join(lines))
    return layout.report_file
