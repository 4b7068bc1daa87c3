"""The uncertainty budget of the search's best points, and whether the best's lead exceeds it.

After the search (and its mesh check) the best ``explore.uncertainty_best`` points are run again as the
study ``<study>_uncertainty`` with the study's ``uncertainty`` section (its defaults without one) applied
to every case of it: the component runs are ordinary cases made by
:mod:`bodysweep.workflow.study.uncertainty`, the budget is the ``uncertainty`` table that the collector
builds (:mod:`bodysweep.workflow.collect_uncertainty`). The points' own cases have the same solves as in
the search (shared store), so only the component runs are solved.

The expanded uncertainty (k = 2) of the budget quantity behind the figure of merit is put in the merit
column's unit (a relative uncertainty ``U`` of a power read in dB or dBm becomes
``max(10 log10(1 + U), -10 log10(1 - U))`` dB), and the best point's lead over the runner-up and over the
baseline point is compared with it.
"""
from __future__ import annotations

import math

import pandas as pd

from ..study.uncertainty import budget_settings

#: keys of the uncertainty section that choose cases; the search chooses them instead
_CHOOSERS = ("cases", "count", "seed", "rank_by")


def budget_name(name: str) -> str:
    return f"{name[:52]}_uncertainty"


def section(raw: dict) -> dict:
    """The uncertainty section the budget study runs with: the study's (or empty), for all its cases."""
    own = {k: v for k, v in (raw.get("uncertainty") or {}).items() if k not in _CHOOSERS}
    return {**own, "cases": "all"}


def merit_quantity(column: str, quantities: list[str], basis: str | None = None) -> tuple[str | None, str]:
    """The budget quantity behind a merit column and how to read it: ``(quantity, "dB" | "linear")``.

    ``basis``: for ``figure_of_merit_value``, the column it copies (the summary's ``figure_of_merit``).
    ``(None, "")`` when no budgeted quantity is behind the column.
    """
    if column == "figure_of_merit_value" and basis:
        column = basis
    for q in quantities:
        if column in (f"{q}_dB", f"{q}_dBm"):
            return q, "dB"
        if column in (f"{q}_W", f"{q}_W_per_kg_per_W"):
            return q, "linear"
    return None, ""


def in_merit_unit(U: float, unit: str, how: str, value: float) -> float:
    """The expanded uncertainty ``U`` of the budget (``unit``: ``dB`` or ``relative``) in the merit's unit."""
    if not isinstance(U, (int, float)) or not math.isfinite(U):
        return math.nan
    if unit == "dB":
        return float(U)
    if how == "dB":
        return max(10 * math.log10(1 + U), -10 * math.log10(1 - U)) if U < 1 else math.inf
    return float(U) * abs(float(value))


def point_budget(table: pd.DataFrame, summary: pd.DataFrame, case_ids: list[str], merit_column: str,
                 value: float) -> dict:
    """The budget of one point: its deciding case (largest expanded uncertainty of the merit's quantity
    among the point's cases), that case's components, and ``U`` in the merit's unit (NaN if incomplete)."""
    rows = table[table["case_id"].isin(case_ids)]
    out = {"case_ids": list(case_ids), "quantity": None, "U": math.nan, "components": [], "source": "",
           "note": ""}
    if rows.empty:
        out["note"] = "no budget rows (the component runs have no results)"
        return out
    basis = None
    srow = summary[summary["case_id"].isin(case_ids)]
    if "figure_of_merit" in srow and len(srow):
        basis = str(srow["figure_of_merit"].iloc[0])
    q, how = merit_quantity(merit_column, list(dict.fromkeys(rows["quantity"])), basis)
    if q is None:
        out["note"] = f"{merit_column} has no budgeted quantity (budgeted: {', '.join(dict.fromkeys(rows['quantity']))})"
        return out
    best_U, best_cid = -1.0, None
    for cid in case_ids:
        r = rows[(rows["case_id"] == cid) & (rows["quantity"] == q) & rows["component"].str.startswith("expanded")]
        if r.empty:
            continue
        u = float(r["standard_uncertainty"].iloc[0])
        u = math.inf if not math.isfinite(u) else u  # an incomplete budget decides (shown as such)
        if u > best_U:
            best_U, best_cid = u, cid
    if best_cid is None:
        out["note"] = f"no expanded uncertainty of {q}"
        return out
    r = rows[(rows["case_id"] == best_cid) & (rows["quantity"] == q)]
    unit = str(r["unit"].iloc[0])
    comps = [{"component": str(c), "deviation": _num(d), "standard_uncertainty": _num(u), "unit": unit}
             for c, d, u in zip(r["component"], r["deviation"], r["standard_uncertainty"])]
    U = _num(r[r["component"].str.startswith("expanded")]["standard_uncertainty"].iloc[0])
    out.update(quantity=q, unit=unit, how=how, case_id=best_cid, components=comps, U_budget=U,
               U=in_merit_unit(U, unit, how, value), source=str(r["source"].iloc[0]))
    return out


def _num(v) -> float:
    try:
        return float(v)
    except (TypeError, ValueError):
        return math.nan


def lead(best_value: float, other_value: float, U: float, maximise: bool) -> dict:
    """How far the best is ahead of another point, and whether that exceeds ``U`` (NaN ``U``: unknown)."""
    d = (best_value - other_value) if maximise else (other_value - best_value)
    exceeds = None if not math.isfinite(U) and U != math.inf else bool(d > U)
    return {"lead": d, "U": U, "exceeds": exceeds}


def lead_sentence(what: str, entry: dict, unit_text: str) -> str:
    if entry["exceeds"] is None:
        return f"Lead over {what}: {entry['lead']:+.3g}{unit_text}; the budget is incomplete, so it cannot be judged."
    verdict = ("exceeds" if entry["exceeds"] else "does **not** exceed")
    tail = "" if entry["exceeds"] else ": the two cannot be told apart within the simulation's uncertainty"
    return (f"Lead over {what}: {entry['lead']:+.3g}{unit_text}, which {verdict} the best point's expanded "
            f"uncertainty U = {entry['U']:.3g}{unit_text} (k = 2){tail}.")


def run_budget(study, spec, folder, results_dir: str, run_args: list[str], run_command, best: list, echo=print):
    """Run the budget study for the trials ``best`` (best first); the budget dict (or ``None`` without points).

    Raises SearchStopped when the run cannot go on (as the rounds do).
    """
    from ..collect import collect_frames
    from ..layout import StudyLayout
    from .points import PipelinePoints

    trials = best[:spec.uncertainty_best]
    if not trials:
        return None
    name = budget_name(study.name)
    cfg = section(study.raw)
    echo(f"uncertainty budget: the best {len(trials)} point(s) with component runs "
         f"({', '.join(budget_settings({'uncertainty': cfg})['components'])}) as study {name}")
    runner = PipelinePoints(study, spec, folder, results_dir, run_args, name=name, run_command=run_command,
                            uncertainty=cfg)
    pts = [t.user_attrs["point"] for t in trials]
    runner.evaluate(pts, pts)
    frames = collect_frames(StudyLayout.of(name, results_dir), band=False)
    out = {"study": name, "settings": budget_settings({"uncertainty": cfg}), "points": []}
    for t, p in zip(trials, pts):
        ids = [c["case_id"] for c in runner.cases(p)]
        b = point_budget(frames["uncertainty"], frames["summary"], ids, spec.merit_column, float(t.value))
        out["points"].append({"trial": t.number, "point": p, "value": float(t.value), **b})
    return out


def leads(budget: dict | None, ranked: list, spec) -> list[dict]:
    """The best's lead over the runner-up and over the baseline point, against the best's ``U``."""
    if not budget or not budget["points"] or not ranked:
        return []
    from .driver import point_key

    U = budget["points"][0]["U"]
    best_v, best_t = ranked[0]
    best_key = point_key(best_t.user_attrs["point"])
    out = []
    runner = next(((v, t) for v, t in ranked if point_key(t.user_attrs["point"]) != best_key), None)
    if runner is not None:
        out.append({"over": "the runner-up", "trial": runner[1].number, "point": runner[1].user_attrs["point"],
                    "value": runner[0], **lead(best_v, runner[0], U, spec.maximise)})
    if spec.baseline:
        key = point_key(spec.baseline)
        base = next(((v, t) for v, t in ranked if point_key(t.user_attrs["point"]) == key), None)
        if base is None:
            out.append({"over": "the baseline", "point": spec.baseline, "value": None, "lead": math.nan, "U": U,
                        "exceeds": None, "note": "the baseline point has no feasible result"})
        elif point_key(base[1].user_attrs["point"]) != best_key:
            out.append({"over": "the baseline", "trial": base[1].number, "point": spec.baseline, "value": base[0],
                        **lead(best_v, base[0], U, spec.maximise)})
        else:
            out.append({"over": "the baseline", "point": spec.baseline, "value": base[0], "lead": 0.0, "U": U,
                        "exceeds": None, "note": "the baseline is the best point"})
    return out
