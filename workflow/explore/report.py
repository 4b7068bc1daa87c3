"""The search report: progress, proposals in parameter space, sensitivity, the mesh check of the best and\nthe best's uncertainty budget."""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

from ..atomic import atomic_path, write_text
from .driver import SearchDriver, feasible_value


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def _save(fig, path: Path) -> Path:
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=100, bbox_inches="tight", format="png")
    _plt().close(fig)
    return path


def trials_frame(driver: SearchDriver) -> pd.DataFrame:
    """One row per proposal in round order: trial, round, state, value, feasible value, reason, the point,
    and ``cases_run`` (cumulative cases when the point was told; refused points run none)."""
    listed = driver._listed()
    by_num = {t.number: t for t in driver.trials()}
    rows, cases = [], 0
    for n in sorted(listed):
        t = by_num[n]
        refused, repeat = bool(t.user_attrs.get("refused")), "repeat_of" in t.user_attrs
        if not refused and not repeat and t.state.name in ("COMPLETE", "FAIL"):
            cases += driver.spec.cases_per_point
        state = "refused" if refused else "repeat" if repeat else t.state.name.lower()
        rows.append({"trial": n, "round": listed[n] + 1, "state": state, "repeat_of": t.user_attrs.get("repeat_of"),
                     "value": t.value if t.state.name == "COMPLETE" else math.nan,
                     "feasible_value": feasible_value(t), "reason": t.user_attrs.get("reason", ""),
                     "cases_run": cases, **t.user_attrs.get("point", {})})
    df = pd.DataFrame(rows)
    if len(df):
        df["feasible_value"] = df["feasible_value"].astype(float)
    return df


def _codes(df: pd.DataFrame, spec) -> dict[str, tuple[np.ndarray, list[str] | None]]:
    """Each searched parameter as plot coordinates (a choice's options as 0, 1, ... with their names)."""
    out = {}
    for p in spec.parameters:
        if p.name not in df:
            continue
        if p.is_choice:
            names = list(p.options)
            out[p.name] = (np.array([names.index(v) if v in names else np.nan for v in df[p.name]], float), names)
        else:
            out[p.name] = (df[p.name].astype(float).to_numpy(), None)
    return out


def plot_progress(df: pd.DataFrame, spec, path: Path) -> Path:
    plt = _plt()
    fig, ax = plt.subplots(figsize=(6.4, 3.8))
    ran = df[~df["state"].isin(("refused", "repeat"))]
    ok = ran[ran["feasible_value"].notna()]
    ax.plot(ok["cases_run"], ok["feasible_value"], "o", color="0.5", ms=4, label="point (feasible)")
    best = ok["feasible_value"].cummax() if spec.maximise else ok["feasible_value"].cummin()
    ax.step(ok["cases_run"], best, where="post", color="C0", label="best so far")
    bad = ran[ran["feasible_value"].isna()]
    if len(bad):
        y = np.full(len(bad), np.nanmin(ok["feasible_value"]) if len(ok) else 0.0)
        ax.plot(bad["cases_run"], y, "x", color="C3", label="failed / constraint not met")
    ax.set_xlabel("cases run")
    ax.set_ylabel(spec.merit_column)
    ax.set_title(f"{'maximise' if spec.maximise else 'minimise'} {spec.merit_column}")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8)
    return _save(fig, path)


def plot_pairs(df: pd.DataFrame, spec, path: Path) -> Path | None:
    plt = _plt()
    coords = _codes(df, spec)
    names = list(coords)
    if not names:
        return None
    k = len(names)
    fig, axes = plt.subplots(k, k, figsize=(2.6 * k + 1, 2.6 * k), squeeze=False)
    v = df["feasible_value"].to_numpy(float)
    good = np.isfinite(v)
    vmin, vmax = (np.nanmin(v), np.nanmax(v)) if good.any() else (0, 1)
    sc = None
    for i, yi in enumerate(names):
        for j, xj in enumerate(names):
            ax = axes[i][j]
            x, xl = coords[xj]
            y, yl = coords[yi] if i != j else (v, None)
            if i == j:
                ax.plot(x[good], v[good], "o", ms=3, color="C0")
                ax.set_ylabel(spec.merit_column if j == 0 else "", fontsize=7)
            else:
                ax.plot(x[~good], y[~good], "x", color="0.6", ms=4)
                sc = ax.scatter(x[good], y[good], c=v[good], cmap="viridis", vmin=vmin, vmax=vmax, s=18)
                if j == 0:
                    ax.set_ylabel(yi, fontsize=8)
            if i == k - 1:
                ax.set_xlabel(xj, fontsize=8)
            if xl:
                ax.set_xticks(range(len(xl)), xl, fontsize=7)
            if yl and i != j:
                ax.set_yticks(range(len(yl)), yl, fontsize=7)
            ax.tick_params(labelsize=7)
    if sc is not None:
        fig.colorbar(sc, ax=axes, shrink=0.8, label=spec.merit_column)
    fig.suptitle("proposals (colour: figure of merit; grey x: failed or constraint not met)", fontsize=9)
    return _save(fig, path)


def sensitivity(df: pd.DataFrame, spec) -> list[tuple[str, float, int]]:
    """Per parameter: the spread of the mean figure of merit over the parameter's quartiles (numbers) or
    options (choices), in the merit's unit, and the number of points used; larger = more influential.
    A plain one-at-a-time view over the points run, not a variance decomposition."""
    out = []
    v = df["feasible_value"].astype(float)
    for name, (x, labels) in _codes(df, spec).items():
        m = np.isfinite(x) & np.isfinite(v.to_numpy())
        if m.sum() < 3:
            out.append((name, math.nan, int(m.sum())))
            continue
        xs, vs = x[m], v.to_numpy()[m]
        if labels is None:
            edges = np.unique(np.quantile(xs, [0, 0.25, 0.5, 0.75, 1]))
            groups = np.clip(np.searchsorted(edges, xs, side="right") - 1, 0, max(0, len(edges) - 2))
        else:
            groups = xs.astype(int)
        means = [vs[groups == g].mean() for g in np.unique(groups)]
        out.append((name, float(max(means) - min(means)) if len(means) > 1 else 0.0, int(m.sum())))
    return sorted(out, key=lambda r: -(r[1] if r[1] == r[1] else -1))


def plot_sensitivity(df: pd.DataFrame, spec, path: Path) -> Path | None:
    plt = _plt()
    coords = _codes(df, spec)
    if not coords:
        return None
    fig, axes = plt.subplots(1, len(coords), figsize=(3.0 * len(coords), 3.0), squeeze=False)
    v = df["feasible_value"].to_numpy(float)
    for ax, (name, (x, labels)) in zip(axes[0], coords.items()):
        m = np.isfinite(v) & np.isfinite(x)
        ax.plot(x[m], v[m], "o", ms=4)
        ax.set_xlabel(name)
        if labels:
            ax.set_xticks(range(len(labels)), labels)
        ax.grid(alpha=0.3)
    axes[0][0].set_ylabel(spec.merit_column)
    fig.suptitle("figure of merit against each parameter (points run)", fontsize=9)
    return _save(fig, path)


def plot_mesh_check(check: dict, spec, path: Path) -> Path:
    plt = _plt()
    pts = check["points"]
    fig, ax = plt.subplots(figsize=(6.0, 3.4))
    x = np.arange(len(pts))
    ax.plot(x, [p["search_value"] for p in pts], "o-", label=f"search mesh ({check['cells_per_wavelength']['search']:g} cells/λ)")
    ax.plot(x, [np.nan if p["check_value"] is None else p["check_value"] for p in pts], "s--",
            label=f"denser mesh ({check['cells_per_wavelength']['check']:g} cells/λ)")
    ax.set_xticks(x, [f"#{p['trial']}" for p in pts])
    ax.set_xlabel("best points of the search (trial), in search order")
    ax.set_ylabel(spec.merit_column)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8)
    return _save(fig, path)


def _rank(values: list, maximise: bool) -> list:
    finite = sorted((v for v in values if v is not None), reverse=maximise)
    return [None if v is None else finite.index(v) + 1 for v in values]


def _fmt(v, spec=".4g") -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    return format(v, spec) if isinstance(v, (int, float)) else str(v)


def budget_lines(budget: dict | None, spec) -> list[str]:
    """The report's section on the best points' uncertainty budget and the best's leads."""
    from .budget import lead_sentence

    lines = ["", "## Uncertainty budget of the best", ""]
    if not budget or not budget.get("points"):
        lines.append("No uncertainty budget (explore.uncertainty_best is 0, or no feasible point).")
        return lines
    cfg = budget["settings"]
    lines += [f"Component runs ({', '.join(c for c in cfg['components'])}) of the best {len(budget['points'])} "
              f"point(s), run as study `{budget['study']}` (its `tables/uncertainty` holds every quantity). "
              "Each component is the change of the quantity when one input of the simulation is changed, taken "
              "as the half-width of a rectangular distribution; expanded uncertainty U = 2 x root-sum-square "
              "(GUM, JCGM 100:2008).", ""]
    first = budget["points"][0]
    unit_text = " dB" if first.get("how") == "dB" or first.get("unit") == "dB" else ""
    lines += [f"| trial | point | {spec.merit_column} | budget of | U of {spec.merit_column} (k = 2) | source |",
              "|---|---|---|---|---|---|"]
    for b in budget["points"]:
        point = " ".join(f"{k}={_fmt(v, '.4g')}" for k, v in b["point"].items())
        what = b["quantity"] or b.get("note", "")
        lines.append(f"| {b['trial']} | {point} | {_fmt(b['value'])} | {what} | {_fmt(b['U'], '.3g')} | "
                     f"{b.get('source') or b.get('note', '')} |")
    if first["components"]:
        u = first["unit"]
        lines += ["", f"Components for the best point (case {first['case_id']}, quantity {first['quantity']}, "
                  f"deviations {'in dB' if u == 'dB' else 'relative'}):", "",
                  "| component | deviation | standard uncertainty |", "|---|---|---|"]
        for c in first["components"]:
            lines.append(f"| {c['component']} | {_fmt(c['deviation'], '+.3g')} | {_fmt(c['standard_uncertainty'], '.3g')} |")
    lines.append("")
    for e in budget.get("leads", []):
        what = e["over"]
        if e.get("trial") is not None:
            what += f" (trial {e['trial']}, {_fmt(e['value'])})"
        if e.get("note"):
            lines.append(f"- Lead over {what}: {e['note']}.")
        else:
            lines.append("- " + lead_sentence(what, e, unit_text))
    if not budget.get("leads"):
        lines.append("No other feasible point to compare the best with.")
    lines += ["", "The lead is compared with the best point's own expanded uncertainty. The uncertainty of a "
              "difference of two points lies between nearly zero (errors fully shared: same mesh rules, boundary, "
              "tissue data) and about 1.4 U (independent errors); the mesh check above tests the ranking directly."]
    return lines


def write_search_report(driver: SearchDriver, check: dict | None, folder: Path, study_name: str,
                        budget: dict | None = None) -> Path:
    spec = driver.spec
    df = trials_frame(driver)
    write_text(folder / "proposals.csv", df.to_csv(index=False))
    once = df[df["state"] != "repeat"] if len(df) else df  # each point once in the views of the space
    figs = {"progress": plot_progress(df, spec, folder / "progress.png"),
            "pairs": plot_pairs(once, spec, folder / "proposals.png"),
            "sensitivity": plot_sensitivity(once, spec, folder / "sensitivity.png")}
    lines = [f"# Guided search of study {study_name}", "",
             f"Figure of merit: {'maximise' if spec.maximise else 'minimise'} `{spec.merit_column}` (worst of a point's "
             f"{spec.cases_per_point} case(s)); optimiser `{spec.optimiser}`, seed {spec.seed}, batch {spec.batch}, "
             f"budget {spec.budget_cases} cases.", ""]
    ran = df[~df["state"].isin(("refused", "repeat"))] if len(df) else df
    n_rep = int((df["state"] == "repeat").sum()) if len(df) else 0
    lines.append(f"Points proposed: {len(df)}; run: {len(ran)}; repeats of a point already run (told its result, "
                 f"no case): {n_rep}; refused before any solve: {len(df) - len(ran) - n_rep}; "
                 f"failed or constraint not met: {int(ran['feasible_value'].isna().sum()) if len(ran) else 0}.")
    lines += ["", "All figures are simulation estimates on the study's mesh; see the mesh check below before "
              "trusting a ranking.", "", "![progress](progress.png)", ""]
    if figs["pairs"]:
        lines += ["![proposals](proposals.png)", ""]
    lines += ["## Sensitivity", "", "Spread of the mean figure of merit over each parameter's quartiles (numbers) or "
              "options (choices), over the feasible points run; larger means more influential. A one-at-a-time "
              "view, not a variance decomposition.", "", f"| parameter | spread ({spec.merit_column}) | points |",
              "|---|---|---|"]
    lines += [f"| {n} | {_fmt(s, '.3g')} | {k} |" for n, s, k in sensitivity(once, spec)]
    if figs["sensitivity"]:
        lines += ["", "![sensitivity](sensitivity.png)"]
    lines += ["", "## Mesh check of the best points", ""]
    if check:
        pts = check["points"]
        rs = _rank([p["search_value"] for p in pts], spec.maximise)
        rc = _rank([p["check_value"] for p in pts], spec.maximise)
        plot_mesh_check(check, spec, folder / "mesh_check.png")
        lines += [f"Rerun at solver.cells_per_wavelength = {check['cells_per_wavelength']['check']:g} "
                  f"(search: {check['cells_per_wavelength']['search']:g}).", "",
                  "| trial | point | search value | rank | denser mesh value | rank | change | note |",
                  "|---|---|---|---|---|---|---|---|"]
        for p, a, b in zip(pts, rs, rc):
            point = " ".join(f"{k}={_fmt(v, '.4g')}" for k, v in p["point"].items())
            ch = None if p["check_value"] is None else p["check_value"] - p["search_value"]
            lines.append(f"| {p['trial']} | {point} | {_fmt(p['search_value'])} | {a} | {_fmt(p['check_value'])} | "
                         f"{_fmt(b)} | {_fmt(ch, '+.3g')} | {p['check_reason']} |")
        same = rs == rc
        lines += ["", "The ranking is the same on both meshes." if same else
                  "**The ranking changes on the denser mesh**: the search mesh does not resolve the differences "
                  "between these points; refine the mesh before choosing.", "", "![mesh check](mesh_check.png)"]
    else:
        lines.append("No mesh check (no feasible point, or mesh_check.best is 0).")
    lines += budget_lines(budget, spec)
    lines += ["", "## Proposals", "", "`proposals.csv` lists every proposal (trial, round, state, value, reason, point)."]
    path = folder / "report.md"
    write_text(path, "\n".join(lines) + "\n")
    return path
