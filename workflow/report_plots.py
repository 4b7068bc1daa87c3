"""The study report's pictures (PNG), drawn from the summary table and the case files.

``cases_overview.png``            every finished case, best first by the study's figure of merit
``vs_<parameter>.png``            S21 (or peak SAR) and the figure of merit against each swept parameter;
                                  categorical parameters (option names, case frequencies) as grouped
                                  markers, numeric ones as lines
``peak_sar.png``                  peak 1 g / 10 g averaged SAR per watt accepted at port 1, per case
``sar_section_<case_id>.png``     SAR in three planes through the peak (x-z, y-z, x-y), one row per case
                                  (the best case, and its baseline beside it when the study names one)
``impedance.png``                 input resistance and reactance over the band of the excited ports
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

from .atomic import atomic_path

MAX_SERIES = 10
MAX_BARS = 60
MAX_IMPEDANCE_CASES = 6
FINISHED = ("ok", "warning")

#: axis text of the summary columns the plots draw
AXIS_TEXT = {
    "S21_dB": "S21 (dB)",
    "implant_power_both_matched_dBm": "implant power at the SAR limit,\nboth ends matched (dBm)",
    "implant_power_tx_matched_dBm": "implant power at the SAR limit,\nport 1 matched (dBm)",
    "implant_power_unmatched_dBm": "implant power at the SAR limit,\nno matching (dBm)",
    "sar_limited_accepted_dBm": "SAR-limited accepted power\nat port 1 (dBm)",
}


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


def axis_text(col: str) -> str:
    if col.startswith("peak_SAR_"):
        return f"peak {col[len('peak_SAR_'):-len('_W_per_kg_per_W')]} averaged SAR\n(W/kg per W accepted)"
    return AXIS_TEXT.get(col, col)


def finished(summary: pd.DataFrame) -> pd.DataFrame:
    return summary[summary["status"].isin(FINISHED)]


def _finite(summary: pd.DataFrame, col: str) -> bool:
    return col in summary and pd.to_numeric(summary[col], errors="coerce").notna().any()


def rank_column(summary: pd.DataFrame) -> str:
    """The column cases are ranked by: the figure of merit, else (a SAR-only study) the SAR-limited power."""
    basis = summary["figure_of_merit"].dropna().astype(str) if "figure_of_merit" in summary else pd.Series([], dtype=str)
    basis = next((b for b in basis if b), "")
    if basis and _finite(summary, basis):
        return basis
    for col in ("sar_limited_accepted_dBm", "S21_dB"):
        if _finite(summary, col):
            return col
    return ""


def companion_column(summary: pd.DataFrame, rank: str) -> str:
    """The second quantity beside the ranking: S21 for a link study, the first peak SAR otherwise."""
    if rank != "S21_dB" and _finite(summary, "S21_dB"):
        return "S21_dB"
    sar = [c for c in summary.columns if c.startswith("peak_SAR_") and c.endswith("_W_per_kg_per_W")]
    return next((c for c in sar if _finite(summary, c)), "")


def is_categorical(col: pd.Series, name: str) -> bool:
    """Option names, and the case frequency (each frequency is its own tissue model), are categories."""
    return name == "frequency_MHz" or pd.to_numeric(col, errors="coerce").isna().any()


def _cat(v) -> str:
    """Category text: numbers without a trailing ``.0`` (433.0 -> 433), names as they are."""
    try:
        return f"{float(v):g}"
    except (TypeError, ValueError):
        return str(v)


def _labels(ok: pd.DataFrame) -> pd.Series:
    lab = ok["label"].astype(str)
    return lab.where(lab != "", ok["case_id"].astype(str))


def plot_cases_overview(summary: pd.DataFrame, path: Path) -> Path | None:
    """One row per finished case, best first: the ranking quantity and its companion (S21 or peak SAR)."""
    ok = finished(summary).copy()
    rank = rank_column(ok) if not ok.empty else ""
    if not rank:
        return None
    ok["_rank"] = pd.to_numeric(ok[rank], errors="coerce")
    ok = ok.sort_values("_rank", ascending=False, na_position="last").head(MAX_BARS)
    other = companion_column(ok, rank)
    cols = [rank] + ([other] if other else [])
    plt = _plt()
    n = len(ok)
    fig, axes = plt.subplots(1, len(cols), sharey=True, figsize=(5.5 * len(cols), max(2.5, 0.32 * n + 1.4)),
                             squeeze=False)
    y = np.arange(n)[::-1]
    for ax, col in zip(axes[0], cols):
        vals = pd.to_numeric(ok[col], errors="coerce").to_numpy(float)
        if np.isfinite(vals).any():
            ax.hlines(y, np.nanmin(vals), vals, color="0.8", lw=1)
        ax.plot(vals, y, "o", color="tab:blue")
        for yy, v in zip(y, vals):
            if np.isfinite(v):
                ax.annotate(f"{v:.3g}" if col.startswith("peak_SAR_") else f"{v:.1f}", (v, yy), xytext=(4, 0),
                            textcoords="offset points", va="center", fontsize=7)
        if col.startswith("peak_SAR_"):
            ax.set_xscale("log")
        ax.set_xlabel(axis_text(col))
        ax.grid(True, axis="x", alpha=0.3)
    axes[0][0].set_yticks(y, _labels(ok), fontsize=7)
    extra = f" (best {MAX_BARS} of {len(summary)})" if len(summary) > MAX_BARS else ""
    fig.suptitle(f"All finished cases, best first by {rank}{extra}")
    fig.tight_layout()
    return _save(fig, path)


def plot_vs_parameter(summary: pd.DataFrame, param: str, others: list[str], path: Path,
                      order: list | None = None) -> Path | None:
    """The companion quantity and the ranking quantity against ``param``, one series per combination of ``others``.

    A categorical ``param`` (option names, case frequencies) is drawn as markers grouped at each category,
    series side by side, never joined by lines; a numeric one as lines with markers. ``order`` gives the
    categories' order (default: first appearance). Returns None when no series has two or more points.
    """
    ok = finished(summary)
    rank = rank_column(ok) if not ok.empty else ""
    if not rank:
        return None
    other = companion_column(ok, rank)
    cols = ([other] if other else []) + [rank]
    groups = list(ok.groupby(others, dropna=False, sort=False)) if others else [((), ok)]
    groups = [(k, g) for k, g in groups if g[param].nunique(dropna=False) > 1]
    if not groups:
        return None
    categorical = is_categorical(summary[param], param)
    cats = None
    if categorical:
        seen = list(dict.fromkeys(summary[param].map(_cat)))
        cats = [str(c) for c in order if str(c) in seen] + [c for c in seen if c not in map(str, order)] if order else seen
    plt = _plt()
    shown = min(len(groups), MAX_SERIES)
    legend_rows = 0 if len(groups) == 1 else (shown if shown > 5 else (shown + 1) // 2)
    legend_in = 0.15 * legend_rows + 0.1 if legend_rows else 0.0
    fig, axes = plt.subplots(1, len(cols), figsize=(5 * len(cols), 4 + legend_in), squeeze=False)
    width = 0.7
    for k, (key, g) in enumerate(groups[:MAX_SERIES]):
        key = key if isinstance(key, tuple) else (key,)
        label = ", ".join(f"{o}={v}" for o, v in zip(others, key)) or None
        for ax, col in zip(axes[0], cols):
            yv = pd.to_numeric(g[col], errors="coerce").to_numpy(float)
            if categorical:
                x = g[param].map(_cat).map({c: i for i, c in enumerate(cats)}).to_numpy(float)
                dx = (k - (shown - 1) / 2) * (width / max(shown, 1)) if shown > 1 else 0.0
                ax.plot(x + dx, yv, marker="o", ls="none", color=f"C{k % 10}", label=label)
            else:
                x = pd.to_numeric(g[param]).to_numpy(float)
                srt = np.argsort(x)
                ax.plot(x[srt], yv[srt], marker="o", color=f"C{k % 10}", label=label)
    for ax, col in zip(axes[0], cols):
        ax.set_xlabel(param)
        ax.set_ylabel(axis_text(col))
        if col.startswith("peak_SAR_"):
            ax.set_yscale("log")
        ax.grid(True, alpha=0.3)
        if categorical:
            ax.set_xticks(range(len(cats)), cats, rotation=20)
            ax.set_xlim(-0.6, len(cats) - 0.4)
    extra = f" (first {MAX_SERIES} of {len(groups)} series)" if len(groups) > MAX_SERIES else ""
    fig.suptitle(f"{' and '.join(c.split('_')[0] if c == 'S21_dB' else axis_text(c).split(chr(10))[0] for c in cols)} "
                 f"vs {param}{extra}", fontsize=10)
    if legend_rows:
        handles, labels = axes[0][0].get_legend_handles_labels()
        fig.legend(handles, labels, loc="lower center", ncol=1 if shown > 5 else 2, fontsize=7, frameon=False)
        fig.tight_layout(rect=(0, legend_in / (4 + legend_in), 1, 1))
    else:
        fig.tight_layout()
    return _save(fig, path)


def plot_peak_sar(summary: pd.DataFrame, path: Path) -> Path | None:
    """Bars of peak averaged SAR per watt accepted at port 1 for every finished case."""
    cols = [c for c in summary.columns if c.startswith("peak_SAR_") and c.endswith("_W_per_kg_per_W")]
    ok = finished(summary)
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
    ax.set_xticks(range(len(ok)), _labels(ok), rotation=70, ha="right", fontsize=7)
    ax.set_ylabel("peak averaged SAR (W/kg per W accepted at port 1)")
    ax.set_yscale("log")
    ax.grid(True, axis="y", alpha=0.3)
    ax.legend()
    ax.set_title("Peak averaged SAR per watt accepted at port 1")
    return _save(fig, path)


def read_sar_volume(result_h5: Path, name: str = "local"):
    """A SAR volume per watt accepted at port 1 and its cell centres (metres) from a case's ``result.h5``.

    Returns ``(sar (nx, ny, nz), (x (nx,), y (ny,), z (nz,)))``.
    """
    from .casefolder import CaseFolder

    vol = CaseFolder(Path(result_h5).parent).read_sar(name)
    sar, edges = vol["values"], vol["edges"]
    centres = tuple(0.5 * (e[1:] + e[:-1]) for e in edges)
    if tuple(c.size for c in centres) != sar.shape:
        raise ValueError(f"{result_h5}: SAR shape {sar.shape} does not match the grid {[c.size for c in centres]}")
    return sar, centres


def plot_sar_sections(cases: list[tuple[Path, str]], path: Path) -> Path:
    """Local SAR in the three planes through each case's own peak, one row per case.

    Colours are dB relative to the largest peak of all rows (W/kg per W accepted at port 1), so rows
    side by side compare directly. Each panel has its own axes and labels (constrained layout: no overlap).
    """
    plt = _plt()
    data = []
    for h5, title in cases:
        sar, xyz = read_sar_volume(h5, "local")
        data.append((np.nan_to_num(np.asarray(sar, float), nan=0.0), xyz, title))
    top = max(float(d[0].max()) for d in data)
    fig = plt.figure(figsize=(15, 4.6 * len(data)), layout="constrained")
    subfigs = np.atleast_1d(fig.subfigures(len(data), 1))
    for sf, (sar, (x, y, z), title) in zip(subfigs, data):
        row = sf.subplots(1, 3)
        i, j, k = np.unravel_index(int(np.argmax(sar)), sar.shape)
        peak = sar[i, j, k]
        with np.errstate(divide="ignore"):
            db = 10.0 * np.log10(np.maximum(sar, top * 1e-6) / top) if top > 0 else np.zeros_like(sar)
        planes = ((x, z, db[:, j, :], "x", "z", f"y = {y[j] * 1e3:.1f} mm", (x[i], z[k])),
                  (y, z, db[i, :, :], "y", "z", f"x = {x[i] * 1e3:.1f} mm", (y[j], z[k])),
                  (x, y, db[:, :, k], "x", "y", f"z = {z[k] * 1e3:.1f} mm (horizontal plane)", (x[i], y[j])))
        im = None
        hot = np.nonzero(sar > top * 1e-4)  # crop to where there is SAR (tissue), with a margin
        box = [(c[idx.min()] - 0.005, c[idx.max()] + 0.005) if idx.size else (c[0], c[-1])
               for c, idx in zip((x, y, z), hot)]
        lim = {"x": box[0], "y": box[1], "z": (box[2][0], max(box[2][1], 0.005))}
        for ax, (h, v, sl, hn, vn, fixed, pk) in zip(row, planes):
            im = ax.pcolormesh(h * 1e3, v * 1e3, sl.T, shading="nearest", cmap="magma", vmin=-40, vmax=0)
            ax.plot([pk[0] * 1e3], [pk[1] * 1e3], "c+", ms=12, mew=2)
            if vn == "z":
                ax.axhline(0.0, color="w", lw=0.6, ls="--")
            ax.set_xlabel(f"{hn} (mm)")
            ax.set_ylabel(f"{vn} (mm)" + (", body surface at 0" if vn == "z" else ""))
            ax.set_title(fixed, fontsize=9)
            ax.set_xlim(lim[hn][0] * 1e3, lim[hn][1] * 1e3)
            ax.set_ylim(lim[vn][0] * 1e3, lim[vn][1] * 1e3)
            ax.set_aspect("equal")
        sf.colorbar(im, ax=row, label="local SAR rel. to the largest peak shown (dB)", shrink=0.85)
        sf.suptitle(f"{title}: peak local SAR {peak:.3g} W/kg per W accepted at port 1, at "
                    f"({x[i] * 1e3:.1f}, {y[j] * 1e3:.1f}, {z[k] * 1e3:.1f}) mm", fontsize=9)
    return _save(fig, path)


def plot_impedance(cases: list[tuple[Path, str]], path: Path) -> Path | None:
    """Input resistance and reactance over the band of each excited port (scikit-rf reads the Touchstone file).

    ``cases`` are (Touchstone file, label). Returns None when there is no file.
    """
    import skrf

    nets = [(skrf.Network(str(p)), lab) for p, lab in cases if Path(p).exists()]
    if not nets:
        return None
    plt = _plt()
    fig, axes = plt.subplots(1, 2, figsize=(11, 4.2), layout="constrained")
    for k, (ntw, lab) in enumerate(nets):
        for p in range(ntw.nports):
            sub = ntw.s11 if p == 0 else ntw.s22
            z = sub.z[:, 0, 0]
            kw = dict(color=f"C{k % 10}", ls="-" if p == 0 else "--", label=f"Z{p + 1}{p + 1} in, {lab}")
            axes[0].plot(ntw.f * 1e-6, z.real, **kw)
            axes[1].plot(ntw.f * 1e-6, z.imag, **kw)
    for ax, t in zip(axes, ("input resistance R (ohm)", "input reactance X (ohm)")):
        ax.set_xlabel("frequency (MHz)")
        ax.set_ylabel(t)
        ax.grid(True, alpha=0.3)
    axes[1].axhline(0.0, color="0.5", lw=0.8)
    axes[1].set_yscale("symlog", linthresh=1.0)  # reactances of small antennas span decades of either sign
    fig.legend(*axes[0].get_legend_handles_labels(), loc="outside lower center", ncol=2, fontsize=7, frameon=False)
    fig.suptitle("Input impedance of the excited ports (other port on the reference impedance)", fontsize=10)
    return _save(fig, path)
