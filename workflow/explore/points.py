"""Search points evaluated as ordinary cases of the study, through ``bodysweep run`` and the collector.

Each round writes the study with every point run so far as one more ``list`` block
(:func:`~bodysweep.workflow.study.exploration.points_study`) to the search folder and runs it with the
ordinary ``run`` command: same case identities, same Snakemake pipeline (locally or on SLURM), same
tables in ``results/<study>/tables/``; finished cases are never rerun. A point's figure of merit is the
worst over its cases (one per frequency and row of the study's own sweep); a point with a failed case,
an empty merit column or an unknown constraint value is told failed with the reason.
"""
from __future__ import annotations

import math
from pathlib import Path

import yaml

from ..atomic import write_text
from ..study.exploration import SearchSpec, points_study
from .driver import Outcome, SearchStopped

#: exit codes of ``bodysweep run`` after which the search goes on (0 ok, 3 some cases failed)
RUN_CONTINUES = (0, 3)


def point_cases(raw: dict, spec: SearchSpec, point: dict) -> list[dict]:
    """Case dicts of one point (its own identities), after the study layer's and the geometry checks.

    Raises
    ------
    StudyError, StudyUnusable
        The point's scene is refused (e.g. parts overlapping): its one-line message.
    """
    from ..cli_support import _check_geometry
    from ..study import expand, load_study

    cases = [c.to_dict() for c in expand(load_study(points_study(raw, spec, [point])))]
    _check_geometry(cases)
    return cases


def outcome_of(summary, case_ids: list[str], spec: SearchSpec) -> Outcome:
    """The figure of merit of one point from the summary rows of its cases (worst case decides)."""
    rows = summary[summary["case_id"].isin(case_ids)]
    if len(rows) < len(case_ids):
        return Outcome(None, reason="cases missing from the summary table", case_ids=case_ids)
    bad = rows[~rows["status"].isin(("ok", "warning"))]
    if len(bad):
        r = bad.iloc[0]
        return Outcome(None, reason=f"case {r['case_id']} {r['status']}: {r['reason']}", case_ids=case_ids)
    notes = []
    if (rows["status"] == "warning").any():
        notes.append("a case has status warning (see its reason)")
    values = [float(v) for v in rows[spec.merit_column]]
    if any(not math.isfinite(v) for v in values):
        return Outcome(None, reason=f"{spec.merit_column} is empty or not finite", case_ids=case_ids)
    value = max(values) if not spec.maximise else min(values)
    excess = []
    for col, at_most, at_least in spec.constraints:
        vals = [float(v) for v in rows[col]]
        if any(not math.isfinite(v) for v in vals):
            notes.append(f"{col} empty: constraint counted as not met")
            excess.append(math.inf)
            continue
        e = -math.inf
        if at_most is not None:
            e = max(e, max(vals) - at_most)
        if at_least is not None:
            e = max(e, at_least - min(vals))
        excess.append(e)
    excess = [1e300 if x == math.inf else x for x in excess]  # JSON has no infinity
    return Outcome(value, excess=excess, reason="; ".join(notes), case_ids=case_ids)


class PipelinePoints:
    """Evaluator of the search driver: points as ordinary cases run by ``bodysweep run``."""

    def __init__(self, study, spec: SearchSpec, folder: Path, results_dir: str, run_args: list[str],
                 name: str | None = None, solver: dict | None = None, run_command=None,
                 uncertainty: dict | None = None):
        """``run_command``: the command line's entry point (``argv -> exit code``), handed down by ``cli.main``
        so that this layer above ``run`` does not import the command line."""
        if run_command is None:
            raise ValueError("PipelinePoints needs the command line's entry point (run_command)")
        self.run_command = run_command
        self.study, self.spec, self.folder = study, spec, Path(folder)
        self.results_dir, self.run_args = results_dir, list(run_args)
        self.name, self.solver, self.uncertainty = name, solver, uncertainty
        self._cases: dict[str, list[dict]] = {}

    def _raw(self, points: list[dict]) -> dict:
        return points_study(self.study.raw, self.spec, points, name=self.name, solver=self.solver,
                            uncertainty=self.uncertainty)

    def cases(self, point: dict) -> list[dict]:
        key = repr(sorted(point.items()))
        if key not in self._cases:
            from ..study import expand, load_study

            self._cases[key] = [c.to_dict() for c in expand(load_study(self._raw([point])))]
        return self._cases[key]

    def refuse(self, point: dict) -> str | None:
        from ..cli_support import StudyUnusable
        from ..study.errors import StudyError

        try:
            point_cases(self.study.raw, self.spec, point)
        except (StudyError, StudyUnusable, ValueError) as exc:
            return " ".join(str(exc).split())
        return None

    def study_file(self, points: list[dict]) -> Path:
        path = self.folder / (f"{self.name}.yaml" if self.name else "points_study.yaml")
        write_text(path, "# written by `bodysweep explore`: the study with every point run so far\n"
                   + yaml.safe_dump(self._raw(points), sort_keys=False, allow_unicode=True))
        return path

    def evaluate(self, points: list[dict], all_points: list[dict]) -> list[Outcome]:
        from ..collect import collect_frames
        from ..layout import StudyLayout
        from ..pipeline import plan_entry

        path = self.study_file(all_points)
        rc = self.run_command(["run", str(path), "--results-dir", self.results_dir, *self.run_args])
        if rc not in RUN_CONTINUES:
            raise SearchStopped(f"`bodysweep run {path}` ended with exit {rc}", rc)
        layout = StudyLayout.of(self.name or self.study.name, self.results_dir)
        per_point = [self.cases(p) for p in points]
        entries = [plan_entry(c) for cs in per_point for c in cs]
        summary = collect_frames(layout, entries, band=False)["summary"]
        return [outcome_of(summary, [c["case_id"] for c in cs], self.spec) for cs in per_point]
