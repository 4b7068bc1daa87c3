"""Where a study's outputs live, and the study's plan file.

``results/<study>/``
    ``plan.json``          the expanded cases of the last preparation: id, label, parameters, ports
    ``cases/<case_id>/``   one folder per case (the case-folder contract in DEVELOPERS.md)
    ``tables/``            merged tables (:mod:`bodysweep.workflow.collect`)
    ``report/``            plots and ``report.md`` (:mod:`bodysweep.workflow.report`)
    ``logs/``              Snakemake logs of ``bodysweep run``

The solves themselves (scene, port signals, raw fields) live in the shared store of solves
(:mod:`bodysweep.workflow.store`), by default ``<results_dir>/_solves/<solve_id>/``.
"""
from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

from .atomic import json_text, write_if_changed

PLAN_VERSION = 2  # 2: each entry carries its solve_id
#: the tables the collect step writes (:mod:`bodysweep.workflow.collect`), each as Parquet and CSV
TABLE_NAMES = ("summary", "sparams", "sar", "uncertainty")
#: folder of the shared store of solves inside the results folder (the default store)
DEFAULT_STORE_NAME = "_solves"


@dataclass(frozen=True)
class StudyLayout:
    """Paths of one study's output tree below ``root`` (= ``<results_dir>/<study name>``)."""

    root: Path

    @classmethod
    def of(cls, study_name: str, results_dir: str | Path = "results") -> "StudyLayout":
        if not study_name or "/" in study_name or study_name in (".", ".."):
            raise ValueError(f"study name {study_name!r} cannot be a folder name; use letters, digits, - and _")
        if study_name == DEFAULT_STORE_NAME:
            raise ValueError(f"study name {study_name!r} is the folder of the shared store of solves; choose another")
        return cls(Path(results_dir) / study_name)

    @property
    def cases_dir(self) -> Path:
        return self.root / "cases"

    def case_dir(self, case_id: str) -> Path:
        return self.cases_dir / case_id

    @property
    def tables_dir(self) -> Path:
        return self.root / "tables"

    @property
    def report_dir(self) -> Path:
        return self.root / "report"

    @property
    def report_file(self) -> Path:
        return self.report_dir / "report.md"

    @property
    def logs_dir(self) -> Path:
        return self.root / "logs"

    @property
    def plan_file(self) -> Path:
        return self.root / "plan.json"

    @property
    def cost_file(self) -> Path:
        """The remembered cost estimates of the study's cases (:mod:`.cost_cache`)."""
        return self.root / "cost_estimates.json"

    @property
    def expansion_file(self) -> Path:
        """The remembered expansion of the study: entries, settings, key (:mod:`.expansion`)."""
        return self.root / "expansion.json"

    @property
    def expansion_cases_file(self) -> Path:
        """The remembered expansion's ``case.json`` contents (:mod:`.expansion`)."""
        return self.root / "expansion_cases.json"

    def table_files(self) -> list[Path]:
        """The table files the collect step writes (Parquet and CSV of each table)."""
        return [self.tables_dir / f"{n}.{ext}" for n in TABLE_NAMES for ext in ("parquet", "csv")]


def read_plan(layout: StudyLayout) -> dict:
    """The study's ``plan.json`` (``{"study", "plan_version", "cases": [entry, ...]}``)."""
    try:
        return json.loads(layout.plan_file.read_text())
    except FileNotFoundError:
        raise FileNotFoundError(f"{layout.plan_file} does not exist; run `bodysweep run` (or prepare) first") from None


def write_plan(layout: StudyLayout, study_name: str, entries: list[dict], settings: dict | None = None) -> bool:
    """Write ``plan.json`` if its content changed; True if written.

    ``settings`` holds the study's keys that shape tables and report but not results (description,
    figure of merit, baseline, the exposure limits applied); they are kept under ``"settings"``.
    """
    content = {"study": study_name, "plan_version": PLAN_VERSION, "cases": entries}
    if settings:
        content["settings"] = settings
    return write_if_changed(layout.plan_file, json_text(content))


# -- component runs of an uncertainty budget in a plan (workflow/study/uncertainty.py writes them) ----------
def budget_map(entries: list[dict]) -> dict[str, dict[str, str]]:
    """``{case id: {component: id of its run}}`` from plan entries (their ``budget`` lists)."""
    out: dict[str, dict[str, str]] = {}
    for e in entries:
        for b in e.get("budget") or []:
            out.setdefault(b["of"], {})[b["component"]] = e["case_id"]
    return out


def is_budget_run(entry: dict) -> bool:
    """Whether a plan entry is only a component run (not a case of the study's own sweep)."""
    return bool(entry.get("budget")) and "uncertainty_run" in (entry.get("parameters") or {})
