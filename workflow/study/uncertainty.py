"""The study's ``uncertainty`` section: which extra runs an uncertainty budget needs.

Each component that needs a run is an ordinary case of the pipeline, derived from a case of the study by
changing one thing:

``mesh``
    ``cells_per_wavelength`` x ``mesh_refinement_factor`` (at least 1.5, IEC/IEEE 62704-1 asks for at least 50 %
    more cells per wavelength for a convergence check), ``port_cells`` and ``min_cells_per_layer`` doubled
    (cells at most half as large next to the antennas' conductors and across the tissue layers, where the
    peak SAR lies), ``max_growth_ratio - 1`` halved (down to 1.05: on a graded mesh the cells between the fine
    zones and the wavelength limit follow the grading, so without it the denser run had barely more cells:
    the demo's mesh run had as many cells as its case), ``min_cell_m`` halved when set; with
    ``mesh_run_at_least`` set to a preset, also no coarser than that preset's mesh (each of those four keys);
``boundary``
    ``air_margin_wavelengths`` + ``boundary_shift_wavelengths`` (the absorbing boundary moved outward);
``tissue``
    eps_r and sigma of every phantom tissue multiplied by ``1 + tissue_change_fraction`` (as declared materials of
    fixed properties at the case frequency, density unchanged);
``end_criterion``
    ``end_criterion_dB`` lowered by ``end_criterion_deeper_dB``.

``power_balance`` needs no run (it comes from the case's own ``metrics.json``).

The derived case has its own identity (a hash of its content like every case), so it is run once,
reused by any study that needs the same run, and rerun only when its inputs change. Its ``case.json``
carries ``budget``: a list of ``{"of": case id, "component": name}`` (descriptive, not part of the id).
"""
from __future__ import annotations

import copy
import random

from ..layout import budget_map, is_budget_run  # noqa: F401  (plan-entry helpers, re-exported)

#: components and whether each needs an extra run
COMPONENTS = ("mesh", "boundary", "tissue", "power_balance", "end_criterion")
RUN_COMPONENTS = ("mesh", "boundary", "tissue", "end_criterion")
#: the most negative end criterion the solver schema allows (dB)
_END_CRITERION_FLOOR_DB = -120.0


def budget_settings(raw: dict) -> dict | None:
    """The study's ``uncertainty`` section with the schema defaults filled in, or None without one."""
    sec = raw.get("uncertainty")
    if sec is None:
        return None
    from .schema import study_schema

    props = study_schema()["properties"]["uncertainty"]["properties"]
    out = {k: copy.deepcopy(v["default"]) for k, v in props.items() if "default" in v}
    out.update(copy.deepcopy(sec))
    return out


def _fixed_tissue(name: str, f_Hz: float, user: dict, factor: float) -> dict:
    from bodysweep.geometry.tissues import resolve_material

    m = resolve_material(name, f_Hz, user)
    return {"type": "fixed_tissue", "name": f"{name}_changed", "eps_r": float(m.eps_r) * factor,
            "sigma_S_per_m": float(m.sigma_S_per_m) * factor, "density_kg_m3": float(m.density_kg_m3)}


def _changed_tissues(scene: dict, f_Hz: float, factor: float) -> dict:
    """The SI scene with every phantom tissue replaced by a fixed tissue of scaled eps_r and sigma."""
    from bodysweep.geometry.tissues import material_spec_from_dict

    scene = copy.deepcopy(scene)
    ph = scene.get("phantom") or {}
    user = {m["name"]: material_spec_from_dict(m) for m in scene.get("materials", [])}
    declared: dict[str, dict] = {}

    def swap(name: str) -> str:
        if name not in declared:
            declared[name] = _fixed_tissue(name, f_Hz, user, factor)
        return declared[name]["name"]

    for layer in ph.get("layers", []):
        layer["tissue"] = swap(layer["tissue"])
    if isinstance(ph.get("core"), dict):
        ph["core"]["tissue"] = swap(ph["core"]["tissue"])
    if ph.get("type") == "liquid_box":
        ph["liquid"] = swap(ph["liquid"])
    scene["materials"] = list(scene.get("materials", [])) + list(declared.values())
    return scene


def variant(case: dict, component: str, cfg: dict) -> dict:
    """The case dict of one component run of ``case`` (a fresh dict with its own ``case_id``)."""
    from bodysweep.workflow.meshing.settings import settings_from_dict

    from .cases import case_identities

    scene, solver = copy.deepcopy(case["scene"]), copy.deepcopy(case["solver"])
    f = float(case["frequency_Hz"])
    if component == "mesh":
        solver["cells_per_wavelength"] = float(solver["cells_per_wavelength"]) * float(cfg["mesh_refinement_factor"])
        solver["port_cells"] = int(solver["port_cells"]) * 2
        solver["min_cells_per_layer"] = int(solver["min_cells_per_layer"]) * 2
        solver["max_growth_ratio"] = max(1.05, 1.0 + (float(solver["max_growth_ratio"]) - 1.0) / 2.0)
        if solver.get("min_cell_m") is not None:
            solver["min_cell_m"] = float(solver["min_cell_m"]) / 2
        floor = cfg.get("mesh_run_at_least", "none")
        if floor and floor != "none":  # and at least that preset's resolution, key by key
            from bodysweep.workflow.meshing.settings import preset

            p = preset(floor)
            solver["cells_per_wavelength"] = max(float(solver["cells_per_wavelength"]), float(p.cells_per_wavelength))
            solver["port_cells"] = max(int(solver["port_cells"]), int(p.port_cells))
            solver["min_cells_per_layer"] = max(int(solver["min_cells_per_layer"]), int(p.min_cells_per_layer))
            solver["max_growth_ratio"] = min(float(solver["max_growth_ratio"]), float(p.max_growth_ratio))
    elif component == "boundary":
        solver["air_margin_wavelengths"] = float(solver["air_margin_wavelengths"]) + float(cfg["boundary_shift_wavelengths"])
    elif component == "tissue":
        scene = _changed_tissues(scene, f, 1.0 + float(cfg["tissue_change_fraction"]))
    elif component == "end_criterion":
        solver["end_criterion_dB"] = max(_END_CRITERION_FLOOR_DB,
                                         float(solver["end_criterion_dB"]) - float(cfg["end_criterion_deeper_dB"]))
    else:
        raise ValueError(f"uncertainty component {component!r} needs no run")
    solver = settings_from_dict(solver).to_dict() | {"excite_ports": list(case["excite_ports"])}
    out = copy.deepcopy(case)
    out.update(scene=scene, solver=solver)
    out["solve_id"], out["case_id"] = case_identities(out)  # its own solve and finish identities
    out["label"] = f"{case.get('label', '')} [{component} run for {case['case_id']}]"
    out["parameters"] = {**case.get("parameters", {}), "uncertainty_run": component}
    out["budget"] = [{"of": case["case_id"], "component": component}]
    return out


#: summary column of each ``rank_by`` choice (the others name their column)
RANK_COLUMNS = {"figure_of_merit": "figure_of_merit_value"}


def _merit(layout, case_ids: list[str], rank_by: str) -> dict[str, float]:
    """Figure of merit of each case that has a result (from the collector's summary of those cases)."""
    import pandas as pd

    from bodysweep.workflow.casefolder import CaseFolder
    from bodysweep.workflow.collect import collect_frames

    entries = [{"case_id": c, "label": "", "parameters": {}} for c in case_ids
               if CaseFolder(layout.case_dir(c)).has_metrics()]
    if not entries:
        return {}
    s = collect_frames(layout, entries, band=False)["summary"]
    s = s[s["status"].isin(["ok", "warning"])]
    col = RANK_COLUMNS.get(rank_by, rank_by)
    if col not in s:
        return {}
    vals = pd.to_numeric(s[col], errors="coerce")
    return {str(c): float(v) for c, v in zip(s["case_id"], vals) if v == v}


def selection(cfg: dict, case_ids: list[str], layout=None) -> tuple[list[str], str]:
    """The case ids that get their own runs, and a note on how they were chosen.

    ``best`` ranks the cases that already have results (none yet: nothing chosen; ``bodysweep run``
    prepares the study again once the cases have run).
    """
    n = min(int(cfg["count"]), len(case_ids))
    if cfg["cases"] == "all":
        return list(case_ids), f"all {len(case_ids)} cases"
    if cfg["cases"] == "sample":
        rng = random.Random(int(cfg["seed"]))
        chosen = set(rng.sample(list(case_ids), n))
        return [c for c in case_ids if c in chosen], f"a sample of {n} of {len(case_ids)} cases (seed {cfg['seed']})"
    merit = _merit(layout, case_ids, cfg["rank_by"]) if layout is not None else {}
    if not merit:
        return [], f"the best {n} cases by {cfg['rank_by']}, chosen once the cases have results"
    ranked = sorted(merit, key=lambda c: -merit[c])[:n]
    missing = len(case_ids) - len(merit)
    note = f"the best {len(ranked)} of {len(merit)} cases with results by {cfg['rank_by']}"
    return ranked, note + (f" ({missing} without results yet)" if missing else "")


def budget_case_dicts(raw: dict, dicts: list[dict], layout=None) -> tuple[list[dict], str]:
    """Component runs to add to a study's cases, and the selection note ("" without a budget section).

    Runs that coincide with a case of the study (or with each other) are kept once, their ``budget``
    lists merged.
    """
    cfg = budget_settings(raw)
    if cfg is None:
        return [], ""
    chosen, note = selection(cfg, [d["case_id"] for d in dicts], layout)
    by_id = {d["case_id"]: d for d in dicts}
    extra: dict[str, dict] = {}
    for cid in chosen:
        for comp in cfg["components"]:
            if comp not in RUN_COMPONENTS:
                continue
            v = variant(by_id[cid], comp, cfg)
            host = by_id.get(v["case_id"]) or extra.get(v["case_id"])
            if host is None:
                extra[v["case_id"]] = v
            else:
                host.setdefault("budget", []).extend(v["budget"])
    return list(extra.values()), note


def budget_note(raw: dict, entries: list[dict], layout=None) -> str:
    """One line for ``plan``: which cases have their own component runs and how many runs that is."""
    cfg = budget_settings(raw)
    if cfg is None:
        return ""
    own = [e["case_id"] for e in entries if not is_budget_run(e)]
    runs = [e for e in entries if is_budget_run(e)]
    _, how = selection(cfg, own, layout)
    comps = [c for c in cfg["components"] if c in RUN_COMPONENTS]
    return (f"uncertainty budget: component runs ({', '.join(comps)}) for {how}: {len(runs)} runs in the table "
            "above (labels [<component> run for <case id>]); the other cases get the study-level budget")


__all__ = ["COMPONENTS", "RUN_COMPONENTS", "budget_settings", "variant", "selection", "budget_case_dicts",
           "budget_map", "is_budget_run"]
