"""A study file loaded: parsed safely, validated against the schema, checked for meaning, resolved.

:func:`load_study` is the only way in; it raises :class:`StudyError` (one line naming the key) for
anything it cannot use.
"""
from __future__ import annotations

import copy
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

from .edge_checks import check_edge_values, check_finite
from .errors import StudyError, join_path
from .expressions import expression_names, parse_expression
from .paths import get_path, has_path, parent_exists, path2parts
from .safe_yaml import load_yaml_file, text2data, bytes2text
from .schema import base_value, declared_solver_key, solver_key_defaults, study_schema, validate_study_data  # noqa: F401
from .sweeps import RESERVED_NAMES, Block, Parameter, block_kind, block_names, block_rows, block_size

#: default largest number of cases a study may expand to (``budget.max_cases`` raises it)
DEFAULT_MAX_CASES = 10_000


@dataclass(frozen=True)
class Derived:
    """A derived value: ``expr`` evaluated per case and written to ``path`` (edge units)."""

    name: str
    path: str
    expr: str
    tree: Any = field(repr=False, compare=False)
    names: frozenset[str] = frozenset()


@dataclass(frozen=True)
class Study:
    """A validated, resolved study.

    Attributes
    ----------
    name : str
        Letters, digits, ``-`` and ``_`` only (becomes ``results/<name>/``).
    frequencies_Hz : tuple of float
        Case frequencies (the implicit outer sweep axis).
    raw : dict
        The validated edge-unit mapping, with the defaults of the study's own sections filled in.
    parameters : dict of str to Parameter
        Declared sweep parameters by short name.
    blocks : tuple of Block
        The sweep blocks with their rows.
    derived : tuple of Derived
        Derived values in evaluation order.
    excite_ports : tuple of int
        Ports excited one after the other.
    max_cases : int
        Largest number of cases allowed.
    source : str
        Path of the study file, or ``"<mapping>"``.
    """

    name: str
    frequencies_Hz: tuple[float, ...]
    raw: dict = field(repr=False)
    parameters: dict = field(default_factory=dict, repr=False)
    blocks: tuple[Block, ...] = field(default=(), repr=False)
    derived: tuple[Derived, ...] = field(default=(), repr=False)
    excite_ports: tuple[int, ...] = (1,)
    max_cases: int = DEFAULT_MAX_CASES
    source: str = "<mapping>"

    @property
    def description(self) -> str:
        return self.raw.get("description", "")

    @property
    def budget(self) -> dict:
        """``max_cases``, ``max_cpu_hours`` and ``max_disk_GB`` (``None`` = no limit)."""
        return dict(self.raw["budget"])

    @property
    def n_cases(self) -> int:
        """Number of cases before removal of identical ones (frequencies x product of block sizes)."""
        return len(self.frequencies_Hz) * math.prod(len(b) for b in self.blocks)

    def swept_names(self) -> tuple[str, ...]:
        """Parameter names that appear in a block, in block order."""
        return tuple(n for b in self.blocks for n in b.names)


def _fill_defaults(raw: dict) -> dict:
    """Fill the schema defaults of the study's own sections (not of scene/solver)."""
    props = study_schema()["properties"]
    out = copy.deepcopy(raw)
    for key in ("description", "excite", "derived"):
        out.setdefault(key, copy.deepcopy(props[key]["default"]))
    out.setdefault("solver", {})
    for section in ("sar", "budget"):
        sec = out.setdefault(section, {})
        for k, sub in props[section]["properties"].items():
            if "default" in sub:
                sec.setdefault(k, copy.deepcopy(sub["default"]))
    return out


def _plain(data: Any, path: str = "") -> Any:
    """Deep copy of mapping input as plain JSON-like data (tuples -> lists); refuses other types."""
    if isinstance(data, Mapping):
        out = {}
        for k, v in data.items():
            if not isinstance(k, str):
                raise StudyError(path or "(root)", "mapping keys must be strings", k, "names such as depth_mm")
            out[k] = _plain(v, join_path(path, k))
        return out
    if isinstance(data, (list, tuple)):
        return [_plain(v, join_path(path, i)) for i, v in enumerate(data)]
    if data is None or isinstance(data, (str, bool, int, float)):
        return data
    raise StudyError(path or "(root)", f"not plain data ({type(data).__name__})", data,
                     "mappings, lists, strings, numbers, booleans, null")


def _section_of(path: str) -> str:
    return path2parts(path)[0]  # "scene" or "solver"


def _check_path(path: str, where: str, base: dict, choices: dict[str, Parameter]) -> None:
    """A plain parameter's or derived value's path exists in the base, or inside a choice's options."""
    if has_path(base, path) or declared_solver_key(path):
        return
    for c in choices.values():
        if path.startswith(c.path + "."):
            rest = path[len(c.path) + 1:]
            if any(has_path(opt, rest) for opt in c.options.values()):
                return
    raise StudyError(where, f"path {path!r} does not exist in the base {_section_of(path)} "
                     "(nor in any option of a choice)", path, "a dotted path to an existing key "
                     "(list items by index, e.g. scene.phantom.layers.0.thickness_mm)")


def _parameters(raw: dict, base: dict) -> dict[str, Parameter]:
    params: dict[str, Parameter] = {}
    spec = raw.get("sweep", {}).get("parameters", {})
    by_path: dict[str, str] = {}
    for name, p in spec.items():
        where = join_path("sweep.parameters", name)
        if name in RESERVED_NAMES:
            raise StudyError(where, "reserved parameter name", name, "any name but " + ", ".join(sorted(RESERVED_NAMES)))
        path, options = (p, None) if isinstance(p, str) else (p["path"], p.get("options"))
        if path in by_path:
            raise StudyError(where, f"same path as parameter {by_path[path]!r}", path, "one parameter per path")
        by_path[path] = name
        params[name] = Parameter(name=name, path=path, options=copy.deepcopy(options))
    choices = {n: p for n, p in params.items() if p.is_choice}
    for name, p in params.items():
        where = join_path("sweep.parameters", name)
        if p.is_choice:
            outer = [c for c in choices.values() if c is not p and p.path.startswith(c.path + ".")]
            if not parent_exists(base, p.path) and not outer:
                raise StudyError(join_path(where, "path"), f"the parent of {p.path!r} does not exist in the base "
                                 f"{_section_of(p.path)}", p.path, "a path whose parent mapping or list exists")
            for opt_name, value in p.options.items():
                check_edge_values(value, join_path(where, "options", opt_name))
        else:
            _check_path(p.path, where, base, choices)
            current = base_value(base, p.path)
            if isinstance(current, (dict, list)):
                raise StudyError(where, f"path {p.path!r} holds a mapping or list; sweep a scalar inside it, "
                                 "or give options", p.path, "a path to a number or string, or {path, options}")
    return params


def _blocks(raw: dict, params: dict[str, Parameter], base: dict, n_freq: int, max_cases: int) -> tuple[Block, ...]:
    blocks_spec = raw.get("sweep", {}).get("blocks", [])
    # sizes first (cheap), so that a huge grid is refused before it is built
    total = n_freq
    for i, b in enumerate(blocks_spec):
        total *= block_size(block_kind(b), b[block_kind(b)], f"sweep.blocks.{i}")
    if total > max_cases:
        raise StudyError("sweep.blocks", f"the study expands to {total} cases, more than budget.max_cases",
                         total, f"at most {max_cases} cases (raise budget.max_cases up to 1000000 to allow more)")
    owner: dict[str, int] = {}
    blocks = []
    for i, b in enumerate(blocks_spec):
        kind = block_kind(b)
        spec = b[kind]
        where = f"sweep.blocks.{i}"
        names = block_names(kind, spec)
        for n in names:
            at = join_path(where, kind, "ranges" if kind in ("random", "latin_hypercube") else None,
                           0 if kind == "list" else None, n)
            if n not in params:
                raise StudyError(at, "unknown parameter", n, ", ".join(params) or "declare it in sweep.parameters")
            if n in owner:
                raise StudyError(at, f"parameter already varied in sweep.blocks.{owner[n]}", n,
                                 "each parameter in one block only")
            owner[n] = i
            p = params[n]
            if p.is_choice and kind in ("random", "latin_hypercube"):
                raise StudyError(at, "a choice cannot be sampled from a range", n,
                                 "grid, zip or list of option names")
        rows = block_rows(kind, spec, where)
        for r, row in enumerate(rows):
            for n, v in zip(names, row):
                _check_value(params[n], v, base, where, kind, r, n)
        blocks.append(Block(kind=kind, names=names, rows=rows, key_path=where))
    return tuple(blocks)


def _check_value(p: Parameter, v: Any, base: dict, where: str, kind: str, r: int, n: str) -> None:
    at = (join_path(where, kind, r, n) if kind == "list" else
          join_path(where, kind, n, r) if kind in ("grid", "zip") else join_path(where, kind, "ranges", n))
    if p.is_choice:
        if not isinstance(v, str) or v not in p.options:
            raise StudyError(at, f"not an option of {n!r}", v, ", ".join(p.options))
        return
    current = base_value(base, p.path)
    if isinstance(current, str) and not isinstance(v, str):
        raise StudyError(at, f"{p.path} holds text in the base scene; give text", v, "a string")
    if isinstance(current, (int, float)) and not isinstance(current, bool) and isinstance(v, str):
        raise StudyError(at, f"{p.path} holds a number in the base; give a number", v, "a number")
    if isinstance(v, (int, float)) and not isinstance(v, bool):
        try:
            check_edge_values({p.path.rsplit(".", 1)[-1]: v})
        except StudyError as exc:
            raise StudyError(at, exc.problem + f" for {p.path}", v, exc.allowed) from None


def _derived(raw: dict, params: dict[str, Parameter], base: dict, swept: set[str]) -> tuple[Derived, ...]:
    out = []
    known = set(params) | {"frequency_MHz"}
    choices = {n: p for n, p in params.items() if p.is_choice}
    used_paths = {p.path: n for n, p in params.items() if n in swept}
    for name, d in raw.get("derived", {}).items():
        where = join_path("derived", name)
        if name in params or name in RESERVED_NAMES:
            raise StudyError(where, "derived name clashes with a parameter or reserved name", name,
                             "a name not used in sweep.parameters, not min/max/frequency_MHz")
        tree = parse_expression(d["expr"], join_path(where, "expr"))
        names = expression_names(tree)
        unknown = sorted(names - known)
        if unknown:
            raise StudyError(join_path(where, "expr"), f"expression {d['expr']!r} uses unknown name(s) "
                             f"{', '.join(unknown)}", d["expr"], "parameters, earlier derived names, frequency_MHz: "
                             + ", ".join(sorted(known)))
        for n in names:
            if n in choices:
                raise StudyError(join_path(where, "expr"), f"{n!r} is a choice (option names), not a number",
                                 d["expr"], "numeric parameters")
        if d["path"] in used_paths:
            raise StudyError(join_path(where, "path"), f"path also set by parameter {used_paths[d['path']]!r}",
                             d["path"], "a path no parameter sets")
        _check_path(d["path"], join_path(where, "path"), base, choices)
        used_paths[d["path"]] = name
        out.append(Derived(name=name, path=d["path"], expr=d["expr"], tree=tree, names=frozenset(names)))
        known.add(name)
    return tuple(out)


def _excite(raw: dict, given: dict) -> tuple[int, ...]:
    ports = tuple(raw["excite"])
    if 1 not in ports:
        raise StudyError("excite", "port 1 (the external antenna) must be excited: SAR comes from it", list(ports),
                         "[1] or [1, 2]")
    solver_ports = raw["solver"].get("excite_ports")
    if solver_ports is not None:
        if "excite" not in given:
            return tuple(solver_ports)
        if list(solver_ports) != list(ports):
            raise StudyError("solver.excite_ports", "differs from excite", solver_ports, f"leave it out or {list(ports)}")
    return ports


def _sar_checks(raw: dict) -> None:
    masses = [float(m) for m in raw["sar"]["masses_g"]]
    for i, lim in enumerate(raw["sar"]["limits"]):
        if float(lim["mass_g"]) not in masses:
            raise StudyError(f"sar.limits.{i}.mass_g", "no averaging mass of this size in sar.masses_g",
                             lim["mass_g"], ", ".join(f"{m:g}" for m in masses))


def _tissue_checks(raw: dict) -> None:
    """Every ``tissue:`` in the scene and in the sweep's options names a built-in tissue or a declared material."""
    import difflib

    from bodysweep.geometry.tissues import builtin_tissues

    known = sorted(builtin_tissues())
    declared = sorted(str(m.get("name")) for m in (raw["scene"].get("materials") or []) if isinstance(m, dict))

    def walk(node, path):
        if isinstance(node, dict):
            for k, v in node.items():
                if k == "tissue" and isinstance(v, str) and v not in known and v not in declared:
                    near = difflib.get_close_matches(v, known + declared, n=1)
                    raise StudyError(join_path(path, k), "unknown tissue" + (f" (did you mean {near[0]}?)" if near else ""),
                                     v, "built-in tissues " + ", ".join(known)
                                     + (" or the scene's materials " + ", ".join(declared) if declared else ""))
                walk(v, join_path(path, k))
        elif isinstance(node, list):
            for i, v in enumerate(node):
                walk(v, join_path(path, i))

    walk(raw["scene"], "scene")
    for name, par in ((raw.get("sweep") or {}).get("parameters") or {}).items():
        if isinstance(par, dict) and isinstance(par.get("options"), dict):
            walk(par["options"], f"sweep.parameters.{name}.options")


def _baseline_checks(raw: dict, blocks: tuple[Block, ...]) -> None:
    """A baseline mapping names swept parameters and values they take (a case id is checked by the report)."""
    import difflib

    base = raw.get("baseline")
    if not isinstance(base, dict):
        return
    values: dict[str, list] = {}
    for b in blocks:
        for i, n in enumerate(b.names):
            values.setdefault(n, []).extend(r[i] for r in b.rows)
    for name, v in base.items():
        if name not in values:
            near = difflib.get_close_matches(name, list(values), n=1)
            raise StudyError(f"baseline.{name}", "not a swept parameter" + (f" (did you mean {near[0]}?)" if near else ""),
                             name, ", ".join(values) or "no parameter is swept")
        taken = values[name]
        if not any(str(v) == str(t) or (isinstance(t, (int, float)) and isinstance(v, (int, float)) and
                                        float(t) == float(v)) for t in taken):
            raise StudyError(f"baseline.{name}", "a value this parameter never takes", v,
                             ", ".join(dict.fromkeys(str(t) for t in taken)))


def study_folder(study_or_source) -> Path:
    """Folder that relative file names in a study are read from: the study file's, else the working folder."""
    src = getattr(study_or_source, "source", study_or_source)
    src = str(src)
    return Path(src).resolve().parent if src and not src.startswith("<") else Path.cwd()


def cad_part_dicts(scene) -> list[dict]:
    """Every mapping of a scene (edge units or SI) that reads an STL file: a cad antenna, a cad capsule or
    casing (``shape: cad``), a cad concentrator."""
    if not isinstance(scene, dict):
        return []
    out = []
    for part in ("external", "implant"):
        d = scene.get(part)
        if not isinstance(d, dict):
            continue
        if d.get("type") == "cad":
            out.append(d)
        for shell in ("capsule", "casing"):
            if isinstance(d.get(shell), dict) and d[shell].get("shape") == "cad":
                out.append(d[shell])
    conc = scene.get("concentrators")
    out += [c for c in (conc if isinstance(conc, list) else []) if isinstance(c, dict) and c.get("type") == "cad"]
    return out


def label_volume_dicts(scene) -> list[dict]:
    """The phantom mapping of a scene (edge units or SI) when it reads a label-volume file, else nothing."""
    ph = scene.get("phantom") if isinstance(scene, dict) else None
    return [ph] if isinstance(ph, dict) and ph.get("type") == "label_volume" else []


def absolute_cad_files(scene: dict, folder: Path) -> None:
    """Make the ``file`` of every CAD part and label-volume phantom of an edge-unit scene absolute, a relative
    one read from ``folder``."""
    for d in cad_part_dicts(scene) + label_volume_dicts(scene):
        if isinstance(d.get("file"), str) and d["file"]:
            p = Path(d["file"]).expanduser()
            d["file"] = str(p if p.is_absolute() else (folder / p).resolve())


def load_study(source: str | Path | Mapping[str, Any], *, max_cases: int | None = None) -> Study:
    """Parse (safely), validate and resolve a study.

    Parameters
    ----------
    source : str, Path or mapping
        Path of a YAML study file, or the study as a mapping (edge units, as in the file).
        A ``str`` that contains a newline is read as YAML text.
    max_cases : int, optional
        Largest number of cases; default ``budget.max_cases`` of the study (10000 if not given).

    Returns
    -------
    Study

    Raises
    ------
    StudyError
        One line naming the key path, the bad value and what is allowed.
    """
    if isinstance(source, Mapping):
        data, origin = _plain(source), "<mapping>"
    elif isinstance(source, str) and "\n" in source:
        data, origin = text2data(bytes2text(source.encode("utf-8"))), "<text>"
    elif isinstance(source, (str, Path)):
        data, origin = load_yaml_file(source), str(source)
    elif isinstance(source, bytes):
        data, origin = text2data(bytes2text(source)), "<bytes>"
    else:
        raise StudyError("(root)", "a study is a file path or a mapping", type(source).__name__,
                         "a path to a .yaml file, or a dict")
    if not isinstance(data, dict):
        raise StudyError("(root)", "a study file must be a mapping of keys (study, frequencies_MHz, scene, ...)",
                         data, "a YAML mapping")
    check_finite(data)
    validate_study_data(data)
    raw = _fill_defaults(data)
    absolute_cad_files(raw.get("scene") or {}, study_folder(origin))
    name = raw["study"]
    if name in (".", "..") or "/" in name or "\\" in name:  # the schema pattern already refuses these
        raise StudyError("study", "not a plain folder name", name, "letters, digits, '-' and '_'")
    base = {"scene": raw["scene"], "solver": raw["solver"]}
    check_edge_values(base)
    _tissue_checks(raw)
    _sar_checks(raw)
    excite = _excite(raw, data)
    limit = int(max_cases if max_cases is not None else raw["budget"]["max_cases"])
    freqs = tuple(float(f) * 1e6 for f in raw["frequencies_MHz"])
    params = _parameters(raw, base)
    blocks = _blocks(raw, params, base, len(freqs), limit)
    derived = _derived(raw, params, base, {n for b in blocks for n in b.names})
    _baseline_checks(raw, blocks)
    from .exploration import parse_search  # checks the explore section (the search reads it again)

    parse_search(raw, params, {n for b in blocks for n in b.names}, {d.path for d in derived}, len(freqs),
                 math.prod(len(b) for b in blocks))
    return Study(name=name, frequencies_Hz=freqs, raw=raw, parameters=params, blocks=blocks, derived=derived,
                 excite_ports=excite, max_cases=limit, source=origin)
