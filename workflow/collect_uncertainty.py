"""The uncertainty budget in the tables: the ``uncertainty`` table and the summary's uncertainty columns.

Reads the metrics of each case and of its component runs (plan entries with ``budget``, see
:mod:`bodysweep.workflow.study.uncertainty`), computes the deviations and combines them with
:mod:`bodysweep.workflow.post.uncertainty`.

A case with its own runs uses its own deviations (``uncertainty_source`` = ``own``); the others use the
study-level budget: per component and quantity the largest absolute deviation among the cases that have
their own runs (``study-level (largest of N cases)``). The power-balance component is always the case's
own. A component run that failed leaves its deviations NaN: the expanded uncertainty is then NaN and
``uncertainty_source`` names the missing run, never a smaller number that looks complete.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd

from .post import uncertainty as gum
from .layout import budget_map, is_budget_run
from .post.flags import WARNING_SEPARATOR

UNCERTAINTY_COLUMNS = ("case_id", "label", "source", "quantity", "unit", "component", "deviation", "distribution",
                       "divisor", "standard_uncertainty", "run_case_id")


def split_entries(entries: list[dict]) -> tuple[list[dict], list[dict]]:
    """(the study's own cases, the component runs) of a plan's entries."""
    own = [e for e in entries if not is_budget_run(e)]
    runs = [e for e in entries if is_budget_run(e)]
    return own, runs


def _column(q: str, unit: str) -> str:
    return f"{q}_U_dB" if unit == "dB" else f"{q}_U_rel"


def _after(q: str) -> str:
    """The summary column an uncertainty column of quantity ``q`` is placed after."""
    if q.startswith("peak_SAR_"):
        return f"{q}_W_per_kg_per_W"
    return {"S11": "S11_dB", "S21": "S21_dB"}.get(q, f"{q}_dBm")


def add_budget(frames: dict[str, pd.DataFrame], layout, entries: list[dict], runs: list[dict],
               cfg: dict | None, read_metrics) -> dict[str, pd.DataFrame]:
    """Add the ``uncertainty`` table and the summary's uncertainty columns (unchanged summary without ``cfg``)."""
    if cfg is None:
        frames["uncertainty"] = pd.DataFrame(columns=list(UNCERTAINTY_COLUMNS))
        return frames
    comps = list(cfg["components"])
    bmap = budget_map(entries + runs)
    metrics = {e["case_id"]: read_metrics(layout.case_dir(e["case_id"])) for e in entries + runs}
    ok = {c for c, m in metrics.items() if m.get("status") in ("ok", "warning")}

    # own deviations of the cases with component runs
    own: dict[str, dict[str, dict[str, float]]] = {}
    missing: dict[str, list[str]] = {}
    for e in entries:
        cid = e["case_id"]
        if cid not in ok or cid not in bmap:
            continue
        devs = {}
        for comp in comps:
            if comp == "power_balance":
                continue
            run = bmap[cid].get(comp)
            if run in ok:
                devs[comp] = gum.run_deviations(metrics[cid], metrics[run])
            else:
                devs[comp] = {q: math.nan for q in gum.quantities(metrics[cid])}
                missing.setdefault(cid, []).append(comp)
        own[cid] = devs
    # study level: per component and quantity the largest |deviation| of the cases with their own runs
    level: dict[str, dict[str, float]] = {}
    for devs in own.values():
        for comp, d in devs.items():
            for q, a in d.items():
                if math.isfinite(a):
                    level.setdefault(comp, {})[q] = max(level.get(comp, {}).get(q, 0.0), abs(a))

    rows, extra = [], {}
    n_own = len(own)
    for e in entries:
        cid = e["case_id"]
        if cid not in ok:
            continue
        m = metrics[cid]
        kinds = {q: k for q, (v, k) in gum.quantities(m).items()}
        if cid in own:
            devs, source = dict(own[cid]), "own"
            if cid in missing:
                source = f"incomplete: {', '.join(missing[cid])} run failed or missing"
        elif level:
            devs = {c: {q: level.get(c, {}).get(q, math.nan) for q in kinds} for c in comps if c != "power_balance"}
            source = f"study-level (largest of {n_own} cases)"
        else:
            devs = {c: {q: math.nan for q in kinds} for c in comps if c != "power_balance"}
            source = "none yet: the component runs have no results"
        if "power_balance" in comps:
            devs["power_balance"] = gum.power_balance_deviations(m)
        devs = {c: devs[c] for c in comps if c in devs}
        case_rows = gum.budget_rows(devs, kinds)
        run_ids = bmap.get(cid, {})
        for r in case_rows:
            r.update(case_id=cid, label=e.get("label", ""), source=source, run_case_id=run_ids.get(r["component"], ""))
        rows += case_rows
        U = {r["quantity"]: r["standard_uncertainty"] for r in case_rows if r["component"].startswith("expanded")}
        mesh = {q: abs(devs.get("mesh", {}).get(q, math.nan)) for q in kinds if q.startswith("peak_SAR_")}
        extra[cid] = {"U": U, "kinds": kinds, "source": source, "mesh": mesh}

    summary = frames["summary"].copy()
    if extra:
        quantities = list(dict.fromkeys(q for x in extra.values() for q in x["kinds"]))
        kinds = {q: k for x in extra.values() for q, k in x["kinds"].items()}
        for q in quantities:
            summary[_column(q, kinds[q])] = summary["case_id"].map(lambda c, q=q: extra.get(c, {}).get("U", {}).get(q, np.nan))
        summary["sar_limited_accepted_W_conservative"] = [
            _conservative(metrics.get(c, {}), extra.get(c)) for c in summary["case_id"]]
        summary["sar_limited_accepted_dBm_conservative"] = [
            10 * math.log10(p / 1e-3) if p == p and p > 0 else math.nan
            for p in summary["sar_limited_accepted_W_conservative"]]
        summary["uncertainty_source"] = summary["case_id"].map(lambda c: extra.get(c, {}).get("source", ""))
        limit = float(cfg.get("mesh_warning_fraction", 0.1))
        for i, c in enumerate(summary["case_id"]):
            src = extra.get(c, {}).get("source", "")
            whose = "" if src == "own" else f" ({src})"
            flags = [f"mesh_component: mesh component of {q} is {v * 100:.3g} %{whose}, above {limit * 100:g} %: refine the mesh "
                     "before quoting it" for q, v in (extra.get(c, {}).get("mesh") or {}).items() if v == v and v > limit]
            if flags:
                old = summary.at[summary.index[i], "warnings"] if "warnings" in summary else ""
                old = old if isinstance(old, str) else ""
                summary.at[summary.index[i], "warnings"] = WARNING_SEPARATOR.join([old] + flags if old else flags)
                if summary.at[summary.index[i], "status"] == "ok":
                    summary.at[summary.index[i], "status"] = "warning"
        # place each uncertainty column beside its quantity
        order = list(frames["summary"].columns)
        for q in quantities:
            col, anchor = _column(q, kinds[q]), _after(q)
            pos = order.index(anchor) + 1 if anchor in order else len(order)
            order.insert(pos, col)
        a = order.index("sar_limited_accepted_U_rel") + 1 if "sar_limited_accepted_U_rel" in order else len(order)
        order[a:a] = ["sar_limited_accepted_W_conservative", "sar_limited_accepted_dBm_conservative"]
        order.append("uncertainty_source")
        summary = summary.reindex(columns=order)
    frames["summary"] = summary
    frames["uncertainty"] = pd.DataFrame(rows, columns=list(UNCERTAINTY_COLUMNS))
    return frames


def _conservative(m: dict, x: dict | None) -> float:
    """Smallest over the limits of ``sar_limited_accepted / (1 + U_rel(peak SAR of the limit's mass))``."""
    if not x:
        return math.nan
    out = []
    for lim in m.get("limits") or []:
        p = lim.get("sar_limited_accepted_W")
        if not isinstance(p, (int, float)):
            continue
        q = f"peak_SAR_{round(float(lim['mass_kg']) * 1e3, 6):g}g"
        out.append(gum.conservative_power(float(p), x["U"].get(q, math.nan)))
    finite = [v for v in out if v == v]
    return min(finite) if len(finite) == len(out) and finite else math.nan


__all__ = ["UNCERTAINTY_COLUMNS", "split_entries", "add_budget"]
