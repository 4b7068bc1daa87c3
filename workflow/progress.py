"""Within-case progress of a running study: timesteps done, field energy decay so far, time left.

While an excitation runs, the engine writes its console to ``excite_<p>/.engine_run/console.log`` of the
case's solve folder (see
:mod:`bodysweep.workflow.solver.run`); each progress line there reads

``[@  17s] Timestep:  420 || Speed: 10.2 MC/s (4.044e-02 s/TS) || Energy: ~1.75e-22 (- 0.76dB)``.

:func:`running_progress` reads the last such line of every running excitation and sets it against the
case's cost estimate (``cost_estimates.json``: timesteps per excitation) and its end criterion
(``case.json``), for the lines ``bodysweep run`` prints and appends to ``logs/progress.log``.
"""
from __future__ import annotations

import json
import re
from pathlib import Path

from .casefolder import CaseFolder
from .layout import StudyLayout

_RE_LINE = re.compile(r"\[@\s*([0-9.]+)s\]\s*Timestep:\s*(\d+).*?Energy:\s*~?\s*[0-9.eE+-]+\s*\(\s*-?\s*([0-9.]+)\s*dB\)")
#: bytes read from the end of a console log (the last progress line is there)
TAIL_BYTES = 4096


def last_progress(console_log: Path) -> dict | None:
    """``{elapsed_s, timestep, energy_dB}`` of the last progress line of an engine console log, or None."""
    try:
        with open(console_log, "rb") as fh:
            fh.seek(0, 2)
            size = fh.tell()
            fh.seek(max(0, size - TAIL_BYTES))
            text = fh.read().decode("utf-8", errors="replace")
    except OSError:
        return None
    found = _RE_LINE.findall(text)
    if not found:
        return None
    el, step, db = found[-1]
    return {"elapsed_s": float(el), "timestep": int(step), "energy_dB": -abs(float(db))}


def _estimates(layout: StudyLayout) -> dict:
    try:
        return json.loads(layout.cost_file.read_text()).get("cases") or {}
    except (OSError, ValueError):
        return {}


def _end_dB(case_dir: Path) -> float | None:
    try:
        v = CaseFolder(case_dir).read_case_strict()["solver"].get("end_criterion_dB")
        return float(v) if v is not None else None
    except (OSError, ValueError, KeyError, TypeError):
        return None


def format_seconds(s: float) -> str:
    s = max(0, int(round(s)))
    h, r = divmod(s, 3600)
    m, sec = divmod(r, 60)
    return f"{h}h{m:02d}m{sec:02d}s" if h else (f"{m}m{sec:02d}s" if m else f"{sec}s")


def running_progress(layout: StudyLayout, entries: list[dict]) -> list[str]:
    """One line per excitation that is running now (a console log and no ``status.json`` yet).

    The time left is the estimated timesteps still to go at the rate seen so far; past the estimate it
    says so (the run then ends at its energy end criterion or its timestep cap).
    """
    est = _estimates(layout)
    out = []
    for e in entries:
        cid = e["case_id"]
        case = CaseFolder(layout.case_dir(cid))
        cdir = case.dir
        if case.has_metrics():
            continue
        for p in e.get("ports", [1]):
            # the excitation runs in the case's solve folder of the store (link ``solve``)
            x = case.solve_folder().excitation(p)
            if x.status_file.exists():
                continue
            prog = last_progress(x.scratch / "console.log")
            if prog is None:
                continue
            total = (est.get(cid) or {}).get("timesteps")
            end = _end_dB(cdir)
            step, el = prog["timestep"], prog["elapsed_s"]
            steps = f"{step:,} of ~{int(total):,} timesteps" if total else f"{step:,} timesteps"
            decay = f"energy {prog['energy_dB']:.1f} dB" + (f" (ends at {end:g} dB)" if end is not None else "")
            if total and step and el > 0:
                left = (total - step) / (step / el)
                eta = f"about {format_seconds(left)} left" if left > 0 else "past the estimate"
            else:
                eta = "time left not known yet"
            out.append(f"    {cid} port {p}: {steps}, {decay}, {format_seconds(el)} in, {eta}")
    return out
