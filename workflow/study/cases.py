"""Expansion of a study into cases, each fully resolved in SI and identified by a short hash."""
from __future__ import annotations

import copy
import functools
import hashlib
import json
import itertools
from dataclasses import dataclass, field
from typing import Any, Callable

from bodysweep.geometry.units import from_edge_units

from .edge_checks import check_edge_values
from .errors import StudyError, join_path, si2edge_text
from .expressions import evaluate
from .identity import CASE_ID_LENGTH, _normalise, canonical_json, code_versions
from .paths import has_path, parent_exists, path2parts, set_path
from .schema import CaseSceneChecker
from .study import Study, absolute_cad_files, base_value, cad_part_dicts, declared_solver_key, label_volume_dicts, study_folder


_PLAIN = (str, int, float, bool, type(None))


def plain_copy(obj: Any, memo: dict | None = None) -> Any:
    """``copy.deepcopy`` of plain data (dicts, lists, scalars), several times faster, same result.

    Shared containers stay shared in the copy (as with ``deepcopy``: YAML anchors give those); any
    other type is handed to ``copy.deepcopy`` with the same memo.
    """
    if memo is None:
        memo = {}
    t = type(obj)
    if t in _PLAIN:
        return obj
    if t is dict or t is list:
        done = memo.get(id(obj))
        if done is not None:
            return done
        if t is dict:
            out: Any = {}
            memo[id(obj)] = out
            for k, v in obj.items():
                out[k] = v if type(v) in _PLAIN else plain_copy(v, memo)
        else:
            out = []
            memo[id(obj)] = out
            out.extend(v if type(v) in _PLAIN else plain_copy(v, memo) for v in obj)
        return out
    return copy.deepcopy(obj, memo)


@dataclass(frozen=True)
class Case:
    """One case: one frequency and one set of parameter values, fully resolved.

    Attributes
    ----------
    case_id : str
        12 hex characters, the finish identity: sha256 of the solve id plus the post-processing settings
        (SAR masses and limits, ``max_air_fraction``, ``n_band_points``, post version); independent of
        the study name and label.
    label : str
        Human readable, e.g. ``"f=403MHz depth=10mm ext=loop"``.
    study : str
        Name of the study the case was expanded from (not part of the identity).
    parameters : dict
        Dotted path -> value in edge units for everything that varies (option names for choices),
        plus ``"frequency_MHz"``.
    frequency_Hz : float
    scene : dict
        SI scene spec dict (for ``bodysweep.geometry.scene.Scene.from_dict``).
    solver : dict
        SI solver settings dict (for ``bodysweep.workflow.meshing.settings.settings_from_dict``).
    sar : dict
        ``masses_kg``, ``limits`` (``mass_kg``, ``limit_W_per_kg``, ``source``), ``max_air_fraction``.
    excite_ports : tuple of int
    versions : dict
        ``builder``, ``adapter``, ``post``.
    solve_id : str
        12 hex characters, the solve identity: sha256 of what decides the fields (:func:`solve_content`);
        names the stored solve shared by every case and study with the same fields.
    """

    case_id: str
    label: str
    study: str
    parameters: dict = field(repr=False)
    frequency_Hz: float = 0.0
    scene: dict = field(default_factory=dict, repr=False)
    solver: dict = field(default_factory=dict, repr=False)
    sar: dict = field(default_factory=dict, repr=False)
    excite_ports: tuple[int, ...] = (1,)
    versions: dict = field(default_factory=dict, repr=False)
    solve_id: str = ""

    def identity_content(self) -> dict:
        """The content the case id (finish identity) is the hash of."""
        return identity_content(self.scene, self.frequency_Hz, self.solver, self.sar, self.excite_ports,
                                self.versions)

    def solve_content(self) -> dict:
        """The content the solve id is the hash of."""
        return solve_content(self.scene, self.frequency_Hz, self.solver, self.sar, self.excite_ports, self.versions)

    def to_dict(self) -> dict:
        """The ``case.json`` content (plain JSON-ready data, a fresh copy)."""
        return plain_copy({
            "case_id": self.case_id, "solve_id": self.solve_id, "label": self.label, "study": self.study, "parameters": self.parameters,
            "frequency_Hz": self.frequency_Hz, "scene": self.scene, "solver": self.solver, "sar": self.sar,
            "excite_ports": list(self.excite_ports), "versions": self.versions,
        })


#: solver settings that decide how a case is run, not what it computes: left out of the case identity
#: (a study rerun with another thread count reuses its finished cases)
RUN_ONLY_SOLVER_KEYS = ("threads",)
#: solver settings used only by the finish step (the band's frequency points are taken from the stored
#: port time signals when the case is finished): part of the finish identity, not of the solve identity
FINISH_ONLY_SOLVER_KEYS = ("n_band_points",)


def solver_identity(solver: dict) -> dict:
    """The solver settings that are part of the case identity: all but :data:`RUN_ONLY_SOLVER_KEYS`."""
    return {k: v for k, v in solver.items() if k not in RUN_ONLY_SOLVER_KEYS}


def scene_identity(scene: dict) -> dict:
    """The scene as it enters the case identity: a CAD part (antenna, capsule, casing, concentrator) or a
    label-volume phantom by its file's content hash, not by where its file lies.

    Scenes without such parts are returned unchanged (the same object).
    """
    if not any(d.get("sha256") for d in cad_part_dicts(scene) + label_volume_dicts(scene)):
        return scene

    hashed = [id(d) for d in cad_part_dicts(scene) + label_volume_dicts(scene) if d.get("sha256")]

    def strip(d):
        return {n: v for n, v in d.items() if n != "file"} if id(d) in hashed else d
    out = dict(scene)
    if isinstance(scene.get("phantom"), dict):
        out["phantom"] = strip(scene["phantom"])
    for k in ("external", "implant"):
        if isinstance(scene.get(k), dict):
            out[k] = {n: strip(v) for n, v in strip(scene[k]).items()}
    if isinstance(scene.get("concentrators"), list):
        out["concentrators"] = [strip(c) for c in scene["concentrators"]]
    return out


def solve_solver_settings(solver: dict) -> dict:
    """The solver settings that decide the fields: all but the run-only and the finish-only keys."""
    return {k: v for k, v in solver.items() if k not in RUN_ONLY_SOLVER_KEYS + FINISH_ONLY_SOLVER_KEYS}


def solve_content(scene: dict, frequency_Hz: float, solver: dict, sar: dict, excite_ports, versions: dict) -> dict:
    """What the solve identity is the hash of: everything that decides the stored fields and port signals.

    Scene (SI), frequency, the solver settings but the run-only and finish-only keys, the excited ports,
    the builder and adapter versions; the averaging masses only when the engine's own averaged SAR is
    recorded (``solver.engine_sar_average``: the solve step then runs the engine's averaging for them).
    """
    out = {"scene": scene_identity(scene), "frequency_Hz": frequency_Hz, "solver": solve_solver_settings(solver),
           "excite_ports": list(excite_ports),
           "versions": {k: versions[k] for k in ("builder", "adapter") if k in versions}}
    if solver.get("engine_sar_average"):
        out["engine_sar_masses_kg"] = list(sar.get("masses_kg", []))
    return out


def finish_content(solve_id: str, solver: dict, sar: dict, versions: dict) -> dict:
    """What the case id (the finish identity) is the hash of: the solve id plus the post-processing settings.

    SAR masses, limits (value and source text), ``max_air_fraction``, the finish-only solver keys
    (``n_band_points``) and the post-processing version.
    """
    return {"solve_id": solve_id, "sar": sar,
            "finish_solver": {k: solver[k] for k in FINISH_ONLY_SOLVER_KEYS if k in solver},
            "versions": {"post": versions.get("post")}}


def identity_content(scene: dict, frequency_Hz: float, solver: dict, sar: dict, excite_ports, versions: dict) -> dict:
    """The mapping whose canonical JSON hash is the case id (:func:`finish_content` of the solve id)."""
    from .identity import content2case_id

    solve_id = content2case_id(solve_content(scene, frequency_Hz, solver, sar, excite_ports, versions))
    return finish_content(solve_id, solver, sar, versions)


def case_identities(case: dict) -> tuple[str, str]:
    """``(solve_id, case_id)`` recomputed from a ``case.json`` content."""
    from .identity import content2case_id

    args = (case["scene"], case["frequency_Hz"], case["solver"], case["sar"], case.get("excite_ports", [1]),
            case["versions"])
    solve_id = content2case_id(solve_content(*args))
    return solve_id, content2case_id(finish_content(solve_id, case["solver"], case["sar"], case["versions"]))


def sar2si(sar: dict) -> dict:
    """The study's ``sar`` section in SI: ``masses_kg``, ``limits`` with ``mass_kg``, ``max_air_fraction``."""
    return {
        "masses_kg": [float(m) * 1e-3 for m in sar["masses_g"]],
        "limits": [{"mass_kg": float(lim["mass_g"]) * 1e-3, "limit_W_per_kg": float(lim["limit_W_per_kg"]),
                    "source": lim["source"]} for lim in sar["limits"]],
        "max_air_fraction": float(sar["max_air_fraction"]),
    }


def _resolver(build: Callable[[dict], Any]) -> Callable[[dict], dict]:
    """``d -> build(d).to_dict()``: a section in the form its builder gives back (defaults filled in)."""
    def resolve(d: dict) -> dict:
        return build(plain_copy(d)).to_dict()

    return resolve


def _format(value: Any) -> str:
    if isinstance(value, float):
        return format(value, ".10g")
    return str(value)


def case_label(frequency_MHz: float, items: list[tuple[str, Any, str]]) -> str:
    """``"f=403MHz depth=10mm ext=loop"`` from the frequency and ``(name, value, unit)`` items."""
    return " ".join([f"f={_format(float(frequency_MHz))}MHz"] + [f"{n}={_format(v)}{u}" for n, v, u in items])


@functools.lru_cache(maxsize=1)
def _integer_solver_paths() -> frozenset[str]:
    """``solver.<key>`` paths whose schema type is integer."""
    from .schema import _read_json

    schema = _read_json("bodysweep.workflow", "schema", "solver.schema.json")
    return frozenset(f"solver.{k}" for k, v in schema.get("properties", {}).items()
                     if isinstance(v, dict) and v.get("type") == "integer")


def _apply(study: Study, names: tuple[str, ...], row: tuple[Any, ...], freq_MHz: float, label: str):
    """Edge-unit scene/solver of one case and its parameter dict (choices, then scalars, then derived)."""
    doc = {"scene": plain_copy(study.raw["scene"]), "solver": plain_copy(study.raw["solver"])}
    values = dict(zip(names, row))
    params = study.parameters
    parameters: dict[str, Any] = {"frequency_MHz": freq_MHz}
    choices = sorted((n for n in names if params[n].is_choice), key=lambda n: len(path2parts(params[n].path)))
    for n in choices:
        p = params[n]
        if not parent_exists(doc, p.path):
            raise StudyError(join_path("sweep.parameters", n, "path"), f"in case {label}: the parent of {p.path!r} "
                             "does not exist", p.path, "a path whose parent exists in every case")
        set_path(doc, p.path, plain_copy(p.options[values[n]]))
    inactive: list[str] = []
    for n in names:
        p = params[n]
        if p.is_choice:
            parameters[p.path] = values[n]
            continue
        if not has_path(doc, p.path) and not declared_solver_key(p.path):
            if any(params[c].path != p.path and p.path.startswith(params[c].path + ".") for c in choices):
                # a conditional parameter: it lives inside an option this case did not choose
                parameters[p.path] = None
                inactive.append(n)
                continue
            raise StudyError(join_path("sweep.parameters", n), f"in case {label}: path {p.path!r} does not exist "
                             "(the chosen options do not have it)", p.path, "a path present in every case")
        set_path(doc, p.path, values[n])
        parameters[p.path] = values[n]
    env: dict[str, Any] = {"frequency_MHz": freq_MHz}
    for n, p in params.items():
        if not p.is_choice:
            env[n] = base_value(doc, p.path)
    for d in study.derived:
        where = join_path("derived", d.name)
        for n in d.names:
            if n in params and env.get(n) is None:
                raise StudyError(join_path(where, "expr"), f"in case {label}: parameter {n!r} has no value "
                                 f"(path {params[n].path!r} missing)", d.expr, "parameters with a numeric value")
        try:
            value = evaluate(d.tree, env, d.expr, join_path(where, "expr"))
        except StudyError as exc:
            raise StudyError(exc.key_path, f"in case {label}: {exc.problem}", exc.value, exc.allowed) from None
        if not has_path(doc, d.path) and not declared_solver_key(d.path):
            raise StudyError(join_path(where, "path"), f"in case {label}: path {d.path!r} does not exist",
                             d.path, "a path present in every case")
        value = float(f"{float(value):.12g}")  # drop float noise such as 30.299999999999997
        if d.path in _integer_solver_paths():  # a count (cells, timesteps): stays a whole number
            if not value.is_integer():
                raise StudyError(join_path(where, "expr"), f"in case {label}: {d.path} takes a whole number, "
                                 f"the expression gives {value:g}", d.expr, "an expression giving a whole number "
                                 "(e.g. use min/max of whole numbers)")
            value = int(value)
        set_path(doc, d.path, value)
        parameters[d.path] = value
        env[d.name] = value
    return doc, parameters, inactive


class _Memo:
    """Per-expansion memory of work that depends on one part of a case only (keyed by ``repr``).

    ``repr`` of plain data tells apart everything that could change a result (``1`` / ``1.0`` /
    ``True``, ``-0.0``, key order), so a hit stands for the very same input.
    """

    def __init__(self):
        self.edge_ok: set[tuple[str, str, str]] = set()  # (section, key, repr) whose edge check passed
        self.solver: dict[str, dict] = {}  # repr of the SI solver section -> resolved settings
        self.normal: dict[tuple[str, str], Any] = {}  # (where, repr) -> normalised identity part
        self.scene_key: dict[str, str] = {}  # repr of an SI scene -> its canonical JSON

    def check_edge_values(self, doc: dict, context: str) -> None:
        """:func:`check_edge_values` of ``doc`` (``scene`` / ``solver`` sections), each top part once."""
        if not all(isinstance(v, dict) for v in doc.values()):
            check_edge_values(doc, "", context)
            return
        for section, part in doc.items():
            for k, v in part.items():
                key = (section, k, repr(v))
                if key not in self.edge_ok:
                    check_edge_values({k: v}, section, context)  # same walk, same messages
                    self.edge_ok.add(key)

    def normalised(self, obj: Any, where: str) -> Any:
        key = (where, repr(obj))
        if key not in self.normal:
            self.normal[key] = _normalise(obj, where)
        return self.normal[key]

    def _hash(self, content: dict) -> str:
        normal = {}
        for k, v in content.items():  # in content order, so a refused value is named as before
            if k == "frequency_Hz":
                normal[k] = _normalise(v, k)
            elif k == "scene" and isinstance(v, dict) and all(isinstance(n, str) for n in v):
                normal[k] = {n: self.normalised(part, f"scene.{n}") for n, part in v.items()}  # as _normalise
            else:
                normal[k] = self.normalised(v, k)
        text = json.dumps(normal, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)
        return hashlib.sha256(text.encode("utf-8")).hexdigest()[:CASE_ID_LENGTH]

    def case_ids(self, scene: dict, frequency_Hz: float, solver: dict, sar: dict, excite, versions: dict) -> tuple[str, str]:
        """``(solve_id, case_id)``: :func:`~.identity.content2case_id` of :func:`solve_content` and of
        :func:`finish_content`, constant parts normalised once."""
        solve_id = self._hash(solve_content(scene, frequency_Hz, solver, sar, excite, versions))
        return solve_id, self._hash(finish_content(solve_id, solver, sar, versions))


def expand(study: Study, *, check_scene: bool = True) -> list[Case]:
    """All cases of a study, in a fixed order: frequencies outermost, then the product of the blocks.

    Within the product the first block varies slowest; within a block the rows keep their order.
    Each case's edge-unit scene is validated against the scene schema (when a sweep or derived value
    changed it), then checked with ``bodysweep.geometry.scene.Scene.from_dict``, and its solver section
    with ``settings_from_dict`` (``check_scene=False`` skips both scene checks),
    so geometry errors surface here with the case label. Cases that resolve to the same content
    (same id) are kept once, at their first position.

    Raises
    ------
    StudyError
        A path missing in some case, an expression failing for some case, a value out of range in
        some case, or the scene / solver builders refusing a case (key path ``scene`` / ``solver``).
    """
    from bodysweep.geometry.scene import Scene

    from ..meshing.settings import settings_from_dict

    scene_resolve = _resolver(Scene.from_dict) if check_scene else None
    solver_resolve = _resolver(settings_from_dict)
    versions = code_versions()
    folder = study_folder(study)
    sar = sar2si(study.raw["sar"])
    excite = tuple(study.excite_ports)
    names = tuple(n for b in study.blocks for n in b.names)
    combos = itertools.product(*(b.rows for b in study.blocks)) if study.blocks else [()]
    combos = [tuple(v for row in combo for v in row) for combo in combos]
    cases: list[Case] = []
    seen: set[str] = set()
    checker = CaseSceneChecker()  # validates each distinct part of the swept scenes once
    resolved: dict[str, dict] = {}  # canonical SI scene -> builder-resolved scene (frequency-independent)
    varies = bool(study.blocks or study.derived)  # otherwise the base scene was validated at load time
    memo = _Memo()
    conditional = conditional_names(study)
    applies: dict[str, bool] = {}  # conditional parameter -> applies in at least one case
    fresh: set[str] = set()  # resolved scenes not yet handed to a case (no copy needed the first time)
    for f_Hz in study.frequencies_Hz:
        f_MHz = f_Hz / 1e6
        for row in combos:
            items = [(n, v, study.parameters[n].unit) for n, v in zip(names, row)]
            label = case_label(f_MHz, items)
            doc, parameters, inactive = _apply(study, names, row, f_MHz, label)
            absolute_cad_files(doc["scene"], folder)  # a sweep option may bring its own relative file
            if inactive:  # conditional parameters the chosen option does not have: not part of the case
                label = case_label(f_MHz, [it for it in items if it[0] not in inactive])
                for n in inactive:
                    applies.setdefault(n, False)
            for n in conditional:
                if n not in inactive:
                    applies[n] = True
            memo.check_edge_values(doc, f"in case {label}")
            if varies and check_scene:
                checker.check(doc["scene"], f"in case {label}")
            scene_si = from_edge_units(doc["scene"])
            solver_si = from_edge_units(doc["solver"])
            solver_si["excite_ports"] = list(excite)
            if scene_resolve is not None:
                try:
                    text = repr(scene_si)
                    key = memo.scene_key.get(text)
                    if key is None:
                        key = memo.scene_key[text] = canonical_json(scene_si)
                    if key not in resolved:
                        resolved[key] = scene_resolve(scene_si)
                        fresh.add(key)
                    if key in fresh:
                        fresh.discard(key)
                        scene_si = resolved[key]
                    else:
                        scene_si = plain_copy(resolved[key])
                except (ValueError, TypeError, KeyError) as exc:
                    raise StudyError("scene", f"in case {label}: {si2edge_text(str(exc))}", None,
                                     "a scene the builders accept", show_value=False) from None
            if solver_resolve is not None:
                try:
                    text = repr(solver_si)
                    if text not in memo.solver:
                        memo.solver[text] = solver_resolve(solver_si)
                    solver_si = plain_copy(memo.solver[text])
                except (ValueError, TypeError, KeyError) as exc:
                    raise StudyError("solver", f"in case {label}: {exc}", None, "settings the solver accepts",
                                     show_value=False) from None
            if 2 in excite and not scene_si.get("implant"):
                raise StudyError("excite", f"port 2 is the implant antenna's feed, but case {label} has no implant",
                                 list(excite), "[1] for a scene without implant")
            solve_id, case_id = memo.case_ids(scene_si, f_Hz, solver_si, sar, excite, versions)
            if case_id in seen:
                continue
            seen.add(case_id)
            cases.append(Case(case_id=case_id, label=label, study=study.name, parameters=parameters,
                              frequency_Hz=f_Hz, scene=scene_si, solver=solver_si, sar=plain_copy(sar),
                              excite_ports=excite, versions=dict(versions), solve_id=solve_id))
    never = [n for n in conditional if not applies.get(n, False)]
    if never:
        p = study.parameters[never[0]]
        raise StudyError(join_path("sweep.parameters", never[0]), f"path {p.path!r} is in no option any case "
                         "chooses, so the parameter never applies", p.path,
                         "a path inside an option that some case chooses")
    return cases


def conditional_names(study: Study) -> tuple[str, ...]:
    """Swept numeric parameters whose path lies inside a swept choice (they apply where the option has them)."""
    swept = study.swept_names()
    choices = [study.parameters[n].path for n in swept if study.parameters[n].is_choice]
    return tuple(n for n in swept if not study.parameters[n].is_choice
                 and any(study.parameters[n].path.startswith(c + ".") for c in choices))


def count_cases(study: Study) -> int:
    """Number of rows before removal of identical cases (frequencies x product of block sizes)."""
    return study.n_cases
