"""A study expanded once per command, and remembered in its results folder for the next command.

Expanding a study (parse, validate, resolve every case's scene and solver settings, hash the identities)
costs milliseconds per case, seconds for a sweep of thousands. Its result is a pure function of

* the study file's bytes and its absolute path (relative CAD files are read from its folder),
* the code that expands (``workflow/study/``, the schemas, ``geometry/``, the solver settings, the
  version constants; :func:`code_signature` hashes their files),
* the content of the CAD files its cases read (their sha256 is part of the cases),

so it is kept in the study folder, keyed by a hash of all of them (:func:`expansion_key`):

``results/<study>/expansion.json``
    ``{"key", "format", "name", "raw", "settings", "entries", "cad_files", "geometry"}``: the study's
    validated sections, what the tables and report need (:func:`study_settings`), the plan entries of the
    sweep's cases (without uncertainty-budget runs, which depend on results), the CAD files with their
    sha256, and once the geometry check passed its outcome (distinct scenes, arrangement warnings).
``results/<study>/expansion_cases.json``
    ``{"key", "cases": [case.json content, ...]}``: read only when a command needs the full cases
    (meshing a case without a remembered estimate, writing case folders).

A command with the same key reads these instead of expanding; any change of file, path, code or CAD part
gives another key and a fresh expansion. Nothing is written into a study folder that does not exist
(``check`` writes nothing; ``plan`` only where a study folder exists; ``run`` creates it).
``bodysweep run`` expands once, writes ``plan.json`` and hands it to Snakemake, whose Snakefile reads it
instead of expanding again (:func:`bodysweep.workflow.pipeline.snakefile_context`).
"""
from __future__ import annotations

import functools
import hashlib
import json
import re
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any, Callable

from .atomic import write_text
from .layout import StudyLayout

#: layout of the two files (a change gives other keys)
FORMAT = 1

#: folders (package, sub-folder) and single modules whose source decides an expansion
_CODE_TREES = (("bodysweep.geometry", ""), ("bodysweep.workflow", "study"), ("bodysweep.workflow", "schema"))
_CODE_FILES = (("bodysweep.workflow", "expansion.py"), ("bodysweep.workflow", "meshing/settings.py"),
               ("bodysweep.workflow", "solver/__init__.py"), ("bodysweep.workflow", "post/__init__.py"),
               ("bodysweep.workflow", "layout.py"))


@functools.lru_cache(maxsize=1)
def code_signature() -> str:
    """Hash of the source and data files whose change may alter an expansion (names and contents)."""
    from bodysweep import __version__

    h = hashlib.sha256(f"{FORMAT} {__version__}".encode())
    files: list[tuple[str, Path]] = []
    for pkg, sub in _CODE_TREES:
        root = Path(str(resources.files(pkg)))
        folder = root / sub if sub else root
        files += [(f"{pkg}/{p.relative_to(root).as_posix()}", p) for p in sorted(folder.rglob("*"))
                  if p.is_file() and "__pycache__" not in p.parts and p.suffix not in (".pyc", ".png")]
    for pkg, rel in _CODE_FILES:
        files.append((f"{pkg}/{rel}", Path(str(resources.files(pkg))) / rel))
    for name, p in files:
        h.update(name.encode() + b"\0" + p.read_bytes() + b"\0")
    return h.hexdigest()[:24]


def expansion_key(study_path: str | Path) -> str:
    """Hash of the study file's bytes, its absolute path and :func:`code_signature` (CAD files apart)."""
    p = Path(study_path).resolve()
    h = hashlib.sha256(code_signature().encode() + b"\0" + str(p).encode() + b"\0")
    h.update(p.read_bytes())
    return h.hexdigest()[:24]


_NAME_LINE = re.compile(rb"""^study:[ \t]*(["']?)([A-Za-z0-9_-]+)\1[ \t]*(?:#.*)?$""", re.M)


def name_hint(study_path: str | Path) -> str | None:
    """The study name as a top-level ``study: <name>`` line gives it, without parsing the YAML; None if unsure.

    Only tells where a remembered expansion might be; the key decides whether it is used.
    """
    try:
        found = _NAME_LINE.findall(Path(study_path).read_bytes())
    except OSError:
        return None
    names = {m[1].decode() for m in found}
    return names.pop() if len(names) == 1 else None


# -- what the plan and the tables need of each case and of the study ---------------------------------------
def plan_entry(case_dict: dict) -> dict:
    """The plan entry of one case (what collectors and the Snakefile need without opening case.json)."""
    ports = case_dict.get("excite_ports") or (case_dict.get("solver") or {}).get("excite_ports") or [1]
    return {"case_id": case_dict["case_id"], "solve_id": case_dict.get("solve_id"), "label": case_dict.get("label", ""),
            "parameters": case_dict.get("parameters", {}), "frequency_Hz": case_dict.get("frequency_Hz"),
            "ports": [int(p) for p in ports], **({"budget": case_dict["budget"]} if case_dict.get("budget") else {})}


def study_settings(study) -> dict:
    """What the tables and the report need from the study file beyond its cases (never part of a case id)."""
    from .study.schema import study_schema
    from .study.uncertainty import budget_settings

    sar = study.raw["sar"]
    default_limits = study_schema()["properties"]["sar"]["properties"]["limits"]["default"]
    out = {"description": study.description, "figure_of_merit": study.raw.get("figure_of_merit", "implant_power"),
           "baseline": study.raw.get("baseline"), "excite": list(study.excite_ports),
           "limits": [dict(lim) for lim in sar["limits"]], "limits_are_defaults": sar["limits"] == default_limits,
           "solver_preset": (study.raw.get("solver") or {}).get("preset", "standard"),
           "parameter_paths": {n: p.path for n, p in study.parameters.items()}}
    budget = budget_settings(study.raw)
    if budget is not None:
        out["uncertainty"] = budget
    return out


def _cad_files(dicts: list[dict]) -> dict[str, str]:
    """``{absolute file: sha256}`` of the CAD parts the cases read: every mapping of a scene with a ``file``
    and its ``sha256`` (antennas, capsules and casings, concentrators)."""
    out: dict[str, str] = {}

    def walk(o):
        if isinstance(o, dict):
            if isinstance(o.get("file"), str) and o["file"] and "sha256" in o:
                out[o["file"]] = str(o["sha256"])
            for v in o.values():
                walk(v)
        elif isinstance(o, list):
            for v in o:
                walk(v)
    for d in dicts:
        walk(d.get("scene") or {})
    return out


def _cad_unchanged(files: dict[str, str]) -> bool:
    for f, digest in files.items():
        try:
            if hashlib.sha256(Path(f).read_bytes()).hexdigest() != digest:
                return False
        except OSError:
            return False
    return True


# -- the expansion ------------------------------------------------------------------------------------------
@dataclass
class Expansion:
    """A study's sweep expanded into cases, fresh or remembered.

    ``entries`` and ``dicts`` are the sweep's cases (plan entries and ``case.json`` contents, same order)
    without uncertainty-budget runs (:meth:`with_budget_runs` adds those). ``dicts`` and ``study`` (the
    full :class:`~bodysweep.workflow.study.Study`) are produced on first use when remembered.
    """

    path: Path
    key: str
    name: str
    raw: dict
    settings: dict
    entries: list[dict]
    layout: StudyLayout
    cad_files: dict[str, str] = field(default_factory=dict)
    geometry: dict | None = None  # {"scenes": n, "notes": [warning, ...]} once the geometry check passed
    remembered: bool = False
    _dicts: list[dict] | None = field(default=None, repr=False)
    _study: Any = field(default=None, repr=False)

    @property
    def budget(self) -> dict:
        """``max_cases``, ``max_cpu_hours``, ``max_disk_GB`` of the study (as ``Study.budget``)."""
        return dict(self.raw["budget"])

    @property
    def study(self):
        if self._study is None:
            from .study import load_study

            self._study = load_study(self.path)
        return self._study

    @property
    def dicts(self) -> list[dict]:
        if self._dicts is None:
            self._dicts = _read_cases(self.layout, self.key)
            if self._dicts is None or len(self._dicts) != len(self.entries):  # gone meanwhile: expand again
                self._dicts = _expand_dicts(self.study)
        return self._dicts

    def with_budget_runs(self) -> tuple[list[dict], list[dict]]:
        """``(entries, dicts)`` with the uncertainty budget's component runs (chosen from the results folder
        as it is now for ``cases: best``); the sweep's own lists when the study has no ``uncertainty``."""
        entries, cases = self.cases()
        return entries, cases()

    def cases(self) -> tuple[list[dict], Callable[[], list[dict]]]:
        """``(entries, dicts)`` as :meth:`with_budget_runs`, the case dicts as a function: a remembered
        expansion of a study without ``uncertainty`` gives its entries without reading its cases."""
        if self.raw.get("uncertainty") is None:
            return list(self.entries), lambda: list(self.dicts)
        from .study.cases import plain_copy
        from .study.uncertainty import budget_case_dicts

        dicts = plain_copy(self.dicts)  # budget runs that coincide with a case add `budget` to it
        dicts += budget_case_dicts(self.raw, dicts, self.layout)[0]
        return [plan_entry(d) for d in dicts], lambda: dicts

    def save(self) -> bool:
        """Remember this expansion in its study folder if that exists; True if written."""
        if self.remembered or not self.layout.root.is_dir():
            return False
        head = {"key": self.key, "format": FORMAT, "name": self.name, "raw": self.raw, "settings": self.settings,
                "entries": self.entries, "cad_files": self.cad_files, "geometry": self.geometry}
        try:
            head_text = json.dumps(head, separators=(",", ":"), allow_nan=False)
            cases_text = json.dumps({"key": self.key, "cases": self.dicts}, separators=(",", ":"), allow_nan=False)
        except (TypeError, ValueError):  # not plain JSON data: simply not remembered
            return False
        write_text(self.layout.expansion_cases_file, cases_text)
        write_text(self.layout.expansion_file, head_text)  # last: its key vouches for both
        self.remembered = True
        return True

    def note_geometry(self, scenes: int, notes: list[str]) -> None:
        """Record that the geometry check passed: distinct scenes built, arrangement warnings (remembered by
        the next :meth:`save`; ``check`` itself writes nothing)."""
        self.geometry = {"scenes": int(scenes), "notes": list(notes)}
        self.remembered = False  # the files no longer hold all of it


def _expand_dicts(study) -> list[dict]:
    from .study import expand

    return [c.to_dict() for c in expand(study)]


def _read_cases(layout: StudyLayout, key: str) -> list[dict] | None:
    try:
        data = json.loads(layout.expansion_cases_file.read_bytes())
    except (OSError, ValueError):
        return None
    if not isinstance(data, dict) or data.get("key") != key or not isinstance(data.get("cases"), list):
        return None
    return data["cases"]


def remembered(study_path: str | Path, results_dir: str | Path, key: str | None = None) -> Expansion | None:
    """The expansion remembered for this study file, code and CAD files, or None."""
    name = name_hint(study_path)
    if name is None:
        return None
    try:
        layout = StudyLayout.of(name, results_dir)
        key = key or expansion_key(study_path)
        data = json.loads(layout.expansion_file.read_bytes())
    except (OSError, ValueError):
        return None
    if not isinstance(data, dict) or data.get("key") != key or data.get("name") != name:
        return None
    if not _cad_unchanged(data.get("cad_files") or {}):
        return None
    return Expansion(path=Path(study_path), key=key, name=name, raw=data["raw"], settings=data["settings"],
                     entries=data["entries"], layout=layout, cad_files=data.get("cad_files") or {},
                     geometry=data.get("geometry"), remembered=True)


def expand_once(study_path: str | Path, results_dir: str | Path = "results") -> Expansion:
    """The study's expansion: remembered if this file, code and CAD parts were expanded before, else fresh.

    A fresh expansion raises the study layer's ``StudyError`` (or ``ValueError``) for an unusable study;
    it is not written anywhere (see :meth:`Expansion.save`).
    """
    key = expansion_key(study_path)
    found = remembered(study_path, results_dir, key)
    if found is not None:
        return found
    from .study import load_study

    study = load_study(study_path)
    layout = StudyLayout.of(study.name, results_dir)
    dicts = _expand_dicts(study)
    return Expansion(path=Path(study_path), key=key, name=study.name, raw=study.raw, settings=study_settings(study),
                     entries=[plan_entry(d) for d in dicts], layout=layout, cad_files=_cad_files(dicts),
                     _dicts=dicts, _study=study)
