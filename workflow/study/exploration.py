"""The study file's ``explore`` section: a guided search over parameter ranges, checked and resolved.

A search point (one value per searched parameter) becomes ordinary cases: the searched parameters are
added to the study's sweep as one ``list`` block whose rows are the points (:func:`points_study`), so
every point is run, identified and tabulated exactly like a swept case. A point has one case per
frequency and per row of the study's own sweep; its figure of merit is the worst of them.

Nothing here runs anything; :mod:`bodysweep.workflow.explore` drives the rounds.
"""
from __future__ import annotations

import copy
import math
from dataclasses import dataclass, field
from typing import Any

from .edge_checks import check_edge_values
from .errors import StudyError, join_path
from .paths import has_path, parent_exists, path2parts
from .sweeps import RESERVED_NAMES, Parameter, path2unit

SECTION = "explore"
GOALS = ("maximise", "minimise")
#: the study's own ranking column (its figure_of_merit: power reaching the implant at the SAR limit)
DEFAULT_MERIT = "figure_of_merit_value"


@dataclass(frozen=True)
class SearchParameter:
    """One searched parameter: a numeric range (continuous, on a step grid, or whole numbers) or a choice.

    ``parent`` names the searched choice inside whose options the path lies (a conditional parameter,
    present only when one of ``parent_options`` is chosen); ``None`` when the path is in the base scene.
    """

    name: str
    path: str
    low: float | None = None
    high: float | None = None
    step: float | None = None
    integer: bool = False
    options: dict | None = field(default=None, repr=False)
    parent: str | None = None
    parent_options: tuple[str, ...] = ()

    @property
    def is_choice(self) -> bool:
        return self.options is not None

    @property
    def unit(self) -> str:
        return "" if self.is_choice else path2unit(self.path)


@dataclass(frozen=True)
class SearchSpec:
    """A checked ``explore`` section. ``parameters`` are in suggestion order (choices before the rest)."""

    parameters: tuple[SearchParameter, ...]
    merit_column: str
    maximise: bool
    constraints: tuple[tuple[str, float | None, float | None], ...]  # (column, at_most, at_least)
    budget_cases: int
    batch: int
    seed: int
    patience_rounds: int | None
    optimiser: str
    mesh_best: int
    mesh_factor: float
    cases_per_point: int
    section: dict = field(repr=False, default_factory=dict)
    #: the best this many points get an uncertainty budget after the search (0: none)
    uncertainty_best: int = 1
    #: a reference point (searched name -> value), proposed first and compared with the best; None: none
    baseline: dict | None = None

    @property
    def max_points(self) -> int:
        """Points the budget allows (each point costs :attr:`cases_per_point` cases)."""
        return self.budget_cases // self.cases_per_point

    def by_name(self, name: str) -> SearchParameter:
        return next(p for p in self.parameters if p.name == name)

    def active(self, point: dict) -> list[SearchParameter]:
        """The parameters a point has: choices, base-scene numbers, and conditionals whose option is chosen."""
        return [p for p in self.parameters if p.parent is None or point.get(p.parent) in p.parent_options]


def _mass_tag(mass_g: float) -> str:
    return f"{round(float(mass_g), 6):g}g"  # as the collector names per-mass columns


def summary_number_columns(raw: dict) -> dict[str, str]:
    """Numeric columns the summary table will have for this study -> what they need (empty: always there).

    Mirrors :func:`bodysweep.workflow.collect.collect_frames` (column names per averaging mass and per limit).
    """
    from ..collect import IMPLANT_VARIANTS

    two = "excite: [1, 2]"
    excite = raw.get("excite") or [1]
    ports = raw.get("solver", {}).get("excite_ports") or excite
    need2 = "" if 2 in ports else two
    cols = {c: "" for c in ("figure_of_merit_value", "S11_dB", "S21_dB", "Zin1_re_ohm", "Zin1_im_ohm",
                            "mismatch_loss_port1_dB", "sar_limited_accepted_W", "sar_limited_accepted_dBm")}
    for c in ("S22_dB", "Zin2_re_ohm", "Zin2_im_ohm", "mismatch_loss_port2_dB", "rollett_K", "max_available_gain_dB"):
        cols[c] = need2
    for v in IMPLANT_VARIANTS:
        for u in ("W", "dBm"):
            cols[f"implant_power_{v}_{u}"] = need2 if v == "both_matched" else ""
    for m in raw["sar"]["masses_g"]:
        cols[f"peak_SAR_{_mass_tag(m)}_W_per_kg_per_W"] = ""
    for lim in raw["sar"]["limits"]:
        tag = f"{_mass_tag(lim['mass_g'])}_{float(lim['limit_W_per_kg']):g}W_per_kg"
        for c in ("sar_limited_accepted_W", "sar_limited_accepted_dBm"):
            cols[f"{c}_{tag}"] = ""
    cols.update({c: "" for c in ("runtime_s", "cells", "timesteps")})
    return cols


def _column(raw: dict, col: str, where: str) -> str:
    cols = summary_number_columns(raw)
    if col not in cols:
        import difflib

        near = difflib.get_close_matches(col, list(cols), n=3, cutoff=0.5)
        allowed = ("nearest: " + ", ".join(near)) if near else ", ".join(list(cols)[:8]) + f", ... ({len(cols)} columns)"
        raise StudyError(where, "not a numeric column of the summary table", col, allowed)
    if cols[col]:
        raise StudyError(where, f"{col} is only computed with {cols[col]}", col,
                         ", ".join(c for c, need in cols.items() if not need))
    return col


def _range_parameter(name: str, spec: dict, where: str, base: dict, choices: dict[str, SearchParameter]
                     ) -> SearchParameter:
    path = spec["path"]
    if "range" not in spec:
        raise StudyError(where, "no range and no options", sorted(spec), "range: [low, high] or options: {...}")
    low, high = (float(v) for v in spec["range"])
    if not low < high:
        raise StudyError(join_path(where, "range"), "empty range: low must be below high", spec["range"],
                         "[low, high] with low < high")
    key = path.rsplit(".", 1)[-1]  # a list item (offset_mm.2) is checked like a swept one: by its index text
    for v in (low, high):
        try:
            check_edge_values({key: v})
        except StudyError as exc:
            raise StudyError(join_path(where, "range"), f"{exc.problem} for {path}", spec["range"], exc.allowed) from None
    integer, step = bool(spec.get("integer", False)), spec.get("step")
    if integer and math.floor(high) - math.ceil(low) < 1:
        raise StudyError(join_path(where, "range"), "fewer than two whole numbers in the range", spec["range"],
                         "a range holding at least two whole numbers")
    if step is not None and float(step) > high - low:
        raise StudyError(join_path(where, "step"), f"step larger than the range ({high - low:g})", step,
                         "a step at most high - low")
    parent, opts = None, ()
    if not has_path(base, path):
        for c in choices.values():
            if path.startswith(c.path + "."):
                rest = path[len(c.path) + 1:]
                opts = tuple(o for o, v in c.options.items() if has_path({"v": v}, "v." + rest))
                if opts:
                    parent = c.name
                    break
        if parent is None:
            raise StudyError(join_path(where, "path"), f"path {path!r} does not exist in the base "
                             f"{path2parts(path)[0]} (nor in an option of a searched choice)", path,
                             "a dotted path to an existing number")
    else:
        from .schema import base_value

        current = base_value(base, path)
        if not isinstance(current, (int, float)) or isinstance(current, bool):
            raise StudyError(join_path(where, "path"), f"path {path!r} does not hold a number in the base", path,
                             "a path to a number (use options for anything else)")
    return SearchParameter(name=name, path=path, low=low, high=high, step=None if step is None else float(step),
                           integer=integer, parent=parent, parent_options=opts)


def parse_search(raw: dict, sweep_params: dict[str, Parameter], swept: set[str], derived_paths: set[str],
                 n_freq: int, n_rows: int) -> SearchSpec | None:
    """Check the ``explore`` section of a study (``None`` when it has none).

    ``sweep_params``: the sweep's declared parameters; ``swept``: those varied in a block;
    ``derived_paths``: paths set by derived values; ``n_freq`` x ``n_rows``: cases per point.

    Raises
    ------
    StudyError
        One line naming the key: an empty range, an unknown merit or constraint column, a budget below
        one batch, a parameter both swept and searched, a path that does not exist.
    """
    sec = raw.get(SECTION)
    if sec is None:
        return None
    base = {"scene": raw["scene"], "solver": raw["solver"]}
    swept_paths = {sweep_params[n].path: n for n in swept}
    choices: dict[str, SearchParameter] = {}
    ranges: list[tuple[str, dict]] = []
    seen_paths: dict[str, str] = {}
    for name, spec in sec["parameters"].items():
        where = join_path(SECTION, "parameters", name)
        path = spec["path"]
        if name in RESERVED_NAMES or name in sweep_params:
            raise StudyError(where, "name already used by a sweep parameter or reserved", name,
                             "a name not in sweep.parameters, not min/max/frequency_MHz")
        if path in swept_paths:
            raise StudyError(join_path(where, "path"), f"both swept (sweep parameter {swept_paths[path]!r}) and "
                             "searched", path, "a path that no sweep block varies")
        if any(path.startswith(p + ".") or p.startswith(path + ".") for p in swept_paths):
            raise StudyError(join_path(where, "path"), "overlaps a path that a sweep block varies", path,
                             "a path outside the swept ones")
        if path in derived_paths:
            raise StudyError(join_path(where, "path"), "path also set by a derived value", path,
                             "a path no derived value sets")
        if path in seen_paths:
            raise StudyError(join_path(where, "path"), f"same path as searched parameter {seen_paths[path]!r}",
                             path, "one parameter per path")
        seen_paths[path] = name
        if "options" in spec:
            for key in ("range", "step", "integer"):
                if key in spec:
                    raise StudyError(join_path(where, key), "a choice (options) takes no range", spec[key],
                                     "either options, or range with optional step / integer")
            if len(spec["options"]) < 2:
                raise StudyError(join_path(where, "options"), "a choice needs at least two options",
                                 sorted(spec["options"]), "two or more named options")
            if not parent_exists(base, path):
                raise StudyError(join_path(where, "path"), f"the parent of {path!r} does not exist in the base",
                                 path, "a path whose parent mapping or list exists")
            for opt, value in spec["options"].items():
                check_edge_values(value, join_path(where, "options", opt))
            choices[name] = SearchParameter(name=name, path=path, options=copy.deepcopy(spec["options"]))
        else:
            ranges.append((name, spec))
    numeric = [_range_parameter(n, s, join_path(SECTION, "parameters", n), base, choices) for n, s in ranges]
    merit = sec.get("merit", {})
    column = _column(raw, merit.get("column", DEFAULT_MERIT), join_path(SECTION, "merit", "column"))
    constraints = []
    for i, c in enumerate(sec.get("constraints", [])):
        where = join_path(SECTION, "constraints", i)
        _column(raw, c["column"], join_path(where, "column"))
        if "at_most" not in c and "at_least" not in c:
            raise StudyError(where, "a constraint needs at_most or at_least", c, "{column, at_most} or {column, at_least}")
        lo, hi = c.get("at_least"), c.get("at_most")
        if lo is not None and hi is not None and not lo <= hi:
            raise StudyError(where, "at_least above at_most: no value can meet it", c, "at_least <= at_most")
        constraints.append((c["column"], hi, lo))
    batch = int(sec.get("batch", 2))
    per_point = n_freq * n_rows
    budget = int(sec["budget_cases"])
    if budget < batch * per_point:
        raise StudyError(join_path(SECTION, "budget_cases"), f"smaller than one round ({batch} points x "
                         f"{per_point} cases per point)", budget, f"at least {batch * per_point} cases")
    mesh = sec.get("mesh_check", {})
    baseline = _baseline(sec.get("baseline"), choices, numeric)
    return SearchSpec(parameters=tuple(choices.values()) + tuple(numeric), merit_column=column,
                      maximise=merit.get("goal", "maximise") == "maximise", constraints=tuple(constraints),
                      budget_cases=budget, batch=batch, seed=int(sec.get("seed", 0)),
                      patience_rounds=sec.get("patience_rounds"), optimiser=sec.get("optimiser", "tree_parzen"),
                      mesh_best=int(mesh.get("best", 3)), mesh_factor=float(mesh.get("density_factor", 1.5)),
                      cases_per_point=per_point, section=copy.deepcopy(sec),
                      uncertainty_best=int(sec.get("uncertainty_best", 1)), baseline=baseline)


def _baseline(base: dict | None, choices: dict[str, SearchParameter], numeric: list[SearchParameter]) -> dict | None:
    """The checked ``explore.baseline`` point: searched names with a value each choice has / in each range."""
    if base is None:
        return None
    params = {**choices, **{p.name: p for p in numeric}}
    out = {}
    for name, v in base.items():
        where = join_path(SECTION, "baseline", name)
        if name not in params:
            raise StudyError(where, "not a searched parameter", name, ", ".join(params))
        p = params[name]
        if p.is_choice:
            if v not in p.options:
                raise StudyError(where, "not an option of this choice", v, ", ".join(p.options))
        elif isinstance(v, bool) or not isinstance(v, (int, float)) or not p.low <= float(v) <= p.high:
            raise StudyError(where, "outside the searched range", v, f"a number in [{p.low:g}, {p.high:g}]")
        if p.parent is not None and base.get(p.parent) not in p.parent_options:
            raise StudyError(where, f"exists only with {p.parent} in {list(p.parent_options)}", v,
                             f"also give {p.parent} one of {list(p.parent_options)}")
        out[name] = v if p.is_choice else float(v)
    missing = [p.name for p in params.values() if p.name not in out
               and (p.parent is None or out.get(p.parent) in p.parent_options)]
    if missing:
        raise StudyError(join_path(SECTION, "baseline"), "a baseline point needs a value of every parameter it has",
                         sorted(out), f"also {', '.join(missing)}")
    return out


def point_row(spec: SearchSpec, point: dict) -> dict:
    """A point as a full list-block row: every searched parameter, an inactive conditional at its low end
    (the case leaves it out, see the sweep's conditional parameters)."""
    row = {}
    for p in spec.parameters:
        row[p.name] = point[p.name] if p.name in point else p.low
    return row


def points_study(raw: dict, spec: SearchSpec, points: list[dict], *, name: str | None = None,
                 solver: dict | None = None, uncertainty: dict | None = None) -> dict:
    """An ordinary study (no ``explore`` section) whose cases are the given points.

    The searched parameters join ``sweep.parameters``; the points, without repeats, form one more
    ``list`` block. A conditional parameter active in no point is left out of the block.
    ``name``/``solver`` replace the study name and update the solver section (the mesh check).
    The study's ``uncertainty`` section is left out (the search's rounds run no component runs);
    ``uncertainty`` puts one in (the budget of the best points after the search).
    """
    out = copy.deepcopy({k: v for k, v in raw.items() if k not in (SECTION, "uncertainty")})
    if uncertainty is not None:
        out["uncertainty"] = copy.deepcopy(uncertainty)
    if name is not None:
        out["study"] = name
    if solver:
        out["solver"] = {**out.get("solver", {}), **solver}
    if out.get("solver", {}).get("excite_ports") is not None:
        out.pop("excite", None)  # the solver's list decides, as in the original file
    if not out.get("derived"):
        out.pop("derived", None)
    used = [p for p in spec.parameters if p.parent is None or any(p.name in pt for pt in points)]
    rows, seen = [], set()
    for pt in points:
        full = point_row(spec, pt)
        row = {p.name: full[p.name] for p in used}
        key = repr(sorted(row.items()))
        if key not in seen:
            seen.add(key)
            rows.append(row)
    sweep = out.setdefault("sweep", {"parameters": {}, "blocks": []})
    for p in used:
        sweep["parameters"][p.name] = ({"path": p.path, "options": copy.deepcopy(p.options)} if p.is_choice
                                       else p.path)
    sweep["blocks"] = list(sweep.get("blocks", [])) + [{"list": rows}]
    budget = out.setdefault("budget", {})
    budget["max_cases"] = max(int(budget.get("max_cases", 10_000)), len(rows) * spec.cases_per_point)
    return out
