"""What the `bodysweep` subcommands share: the one-line error, loading a study as `run` does, the geometry check.

Kept apart from ``cli.py`` so that commands built on top of ``run`` (``explore``) use them without importing
the command line itself.
"""
from __future__ import annotations

import sys
from pathlib import Path


class StudyUnusable(Exception):
    """The study file or one of its cases cannot be used (exit 2); one-line message."""


def _err(msg: str) -> None:
    print(f"bodysweep: error: {msg}", file=sys.stderr)


def _expand(study_path: str, results_dir: str):
    """``(study, layout, entries, case_dicts)``; a StudyError or ValueError becomes StudyUnusable."""
    from .pipeline import expand_study
    from .study.errors import StudyError

    if not Path(study_path).is_file():
        raise StudyUnusable(f"{study_path}: no such study file")
    try:
        return expand_study(study_path, results_dir)
    except StudyError as exc:
        raise StudyUnusable(f"{study_path}: {exc}") from None
    except ValueError as exc:
        raise StudyUnusable(f"{study_path}: {' '.join(str(exc).split())}") from None


def _expansion(study_path: str, results_dir: str):
    """The study's :class:`~bodysweep.workflow.expansion.Expansion` (remembered or fresh); a StudyError or
    ValueError becomes StudyUnusable."""
    from .expansion import expand_once, remembered

    if not Path(study_path).is_file():
        raise StudyUnusable(f"{study_path}: no such study file")
    found = remembered(study_path, results_dir)  # without importing the study layer (a second of imports)
    if found is not None:
        return found
    from .study.errors import StudyError

    try:
        return expand_once(study_path, results_dir)
    except StudyError as exc:
        raise StudyUnusable(f"{study_path}: {exc}") from None
    except ValueError as exc:
        raise StudyUnusable(f"{study_path}: {' '.join(str(exc).split())}") from None


def _build_model(case: dict):
    from bodysweep.geometry.scene import Scene

    return Scene.from_dict(case["scene"]).build(float(case["frequency_Hz"]))


def _note_arrangement(case: dict, notes: dict[str, list[str]]) -> None:
    """Add the scene's arrangement warnings (:mod:`bodysweep.geometry.arrangement`) to ``notes``."""
    from bodysweep.geometry.arrangement import arrangement_warnings
    from bodysweep.geometry.scene import Scene

    for text in arrangement_warnings(Scene.from_dict(case["scene"])):
        labels = notes.setdefault(text, [])
        if case.get("label", "") not in labels:
            labels.append(case.get("label", ""))


def _check_geometry(dicts: list[dict]) -> int:
    """Build every distinct scene once; raise StudyUnusable naming the first case that fails; print the
    arrangement warnings on stderr. Returns the number of distinct scenes."""
    n, lines = _geometry_outcome(dicts)
    _print_notes(lines)
    return n


def _check_expansion_geometry(exp) -> int:
    """:func:`_check_geometry` of an expansion's cases, its outcome remembered with the expansion."""
    if exp.geometry is None:
        exp.note_geometry(*_geometry_outcome(exp.dicts))
    _print_notes(exp.geometry["notes"])
    return int(exp.geometry["scenes"])


def _print_notes(lines: list[str]) -> None:
    for line in lines:  # arrangements that may be deliberate: one line each, on stderr
        print(line, file=sys.stderr)


def _geometry_outcome(dicts: list[dict]) -> tuple[int, list[str]]:
    """``(distinct scenes, warning lines)``; raise StudyUnusable naming the first case that fails."""
    import json

    seen: set[str] = set()
    notes: dict[str, list[str]] = {}  # arrangement warning -> labels of the cases it concerns
    for d in dicts:
        key = json.dumps([d["scene"], d["frequency_Hz"]], sort_keys=True, default=str)
        if key in seen:
            continue
        seen.add(key)
        try:
            model = _build_model(d)
        except (ValueError, KeyError, TypeError) as exc:
            raise StudyUnusable(f"case {d['case_id']} ({d.get('label', '')}): geometry: {' '.join(str(exc).split())}") from None
        _note_arrangement(d, notes)
        plane = (d.get("solver") or {}).get("mirror_plane")
        if plane:  # a half-domain solve needs a mirror-symmetric scene: refuse before any job starts
            from .solver.mirror import check_symmetric

            try:
                check_symmetric(model, plane)
            except ValueError as exc:
                raise StudyUnusable(f"case {d['case_id']} ({d.get('label', '')}): solver.mirror_plane: "
                                    f"{' '.join(str(exc).split())}") from None
    lines = []
    for text, labels in notes.items():
        more = f" and {len(labels) - 2} more" if len(labels) > 2 else ""
        lines.append(f"warning: {text} (case {', '.join(labels[:2])}{more})")
    return len(seen), lines
