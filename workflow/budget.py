"""Disk use of a case's results, estimated before it runs from its cell count, and the disk budget.

What a finished case keeps (the case folder contract in DEVELOPERS.md), per FDTD cell:

* ``excite_1/fields_raw.h5``: the complex field phasor ``E`` (3 x complex128 = 48 B), conductivity,
  density and cell volume (3 x float64 = 24 B): 72 B.
* ``result.h5``: density (float64, 8 B) and the local SAR plus one averaged SAR volume per averaging
  mass (float32, 4 B each).
* a fixed part per excitation: port signals, logs, status, scene, preview, Touchstone, metrics
  (measured about 0.1 MB on the tiny test study, taken as 0.25 MB).

While port 1 is solved the engine's own raw SAR dump (float32 field and material values, about 40 B
per cell) sits in the scratch folder until the solve step has read it; that is the transient part.

The sizes are those of the uncompressed arrays; the files are gzip-compressed, so the estimate is an
upper bound (measured 2-3 times the real size on the tiny study, more where much of the box is air).
Cells are the engine's cell count (product of the numbers of mesh lines), itself a little above the
number of cells the arrays hold.
"""
from __future__ import annotations

import math
import os
import shutil
from pathlib import Path

#: bytes per cell of ``fields_raw.h5`` (E: 3 complex128; sigma, density, volume: float64)
FIELDS_RAW_B_PER_CELL = 3 * 16 + 3 * 8
#: bytes per cell of ``result.h5``: density float64 plus float32 volumes (local SAR + one per mass)
RESULT_DENSITY_B_PER_CELL = 8
RESULT_VOLUME_B_PER_CELL = 4
#: fixed bytes per excitation (signals, logs, JSON, preview, Touchstone)
FIXED_B_PER_EXCITATION = 0.25e6
#: bytes per cell of the engine's raw SAR dump in the scratch folder while port 1 is solved
SCRATCH_B_PER_CELL = 40


def case_disk_bytes(cells: float, n_masses: int = 2, n_excitations: int = 1) -> dict[str, float]:
    """Estimated disk use of one case from its cell count.

    Parameters
    ----------
    cells : float
        FDTD cells of the case (NaN when unknown gives NaN).
    n_masses : int
        Number of SAR averaging masses (one averaged volume each in ``result.h5``).
    n_excitations : int
        Number of excited ports (one solve, one set of signals each).

    Returns
    -------
    dict
        ``disk_B`` what the case keeps once finished, ``scratch_B`` the extra space while its port-1
        solve runs.
    """
    cells = float(cells)
    if not math.isfinite(cells):
        return {"disk_B": float("nan"), "scratch_B": float("nan")}
    per_cell = FIELDS_RAW_B_PER_CELL + RESULT_DENSITY_B_PER_CELL + RESULT_VOLUME_B_PER_CELL * (1 + int(n_masses))
    return {"disk_B": cells * per_cell + FIXED_B_PER_EXCITATION * max(1, int(n_excitations)),
            "scratch_B": cells * SCRATCH_B_PER_CELL}


def case_disk_estimate(case: dict, cells: float) -> dict[str, float]:
    """:func:`case_disk_bytes` for a case dict (``case.json`` content): masses and ports from the case."""
    sar = case.get("sar") or {}
    masses = sar.get("masses_kg") or sar.get("masses_g") or [0.001, 0.01]
    ports = case.get("excite_ports") or (case.get("solver") or {}).get("excite_ports") or [1]
    out = case_disk_bytes(cells, len(masses), len(ports))
    if (case.get("solver") or {}).get("mirror_plane"):
        # a half-domain run solves ``cells`` but keeps its fields unfolded onto the full grid
        out["disk_B"] = case_disk_bytes(2.0 * float(cells), len(masses), len(ports))["disk_B"]
    return out


def free_disk_GB(path: str | Path) -> float:
    """Free space (GB, 1e9 B) of the file system that holds ``path`` (its nearest existing parent)."""
    p = Path(path).resolve()
    while not p.exists() and p != p.parent:
        p = p.parent
    return shutil.disk_usage(p).free / 1e9


def disk_budget_GB(study, given: float | None, results_dir: str | Path) -> tuple[float, str]:
    """The disk budget and where it comes from.

    The command line's ``--max-disk-GB``, else the study file's ``budget.max_disk_GB``, else 90 % of the
    free space where the results go.
    """
    if given is not None:
        return float(given), "--max-disk-GB"
    try:
        v = study.budget.get("max_disk_GB")
    except (AttributeError, KeyError, TypeError):
        v = None
    if v:
        return float(v), "the study's budget.max_disk_GB"
    return 0.9 * free_disk_GB(results_dir), f"90% of the free space in {results_dir}"


def disk_problem(rows: list[dict], budget_GB: float, source: str) -> str | None:
    """The refusal text when the cases to run would need more disk than ``budget_GB``, else None.

    The need is what the cases to run keep plus the largest scratch of one of them.
    """
    todo = [r for r in rows if r.get("state") in ("to solve", "to finish")]  # an upper bound for "to finish"
    kept = [r.get("disk_B", float("nan")) for r in todo]
    kept = [v for v in kept if v == v]
    scratch = [v for v in (r.get("scratch_B", float("nan")) for r in todo) if v == v]
    need = sum(kept) + (max(scratch) if scratch else 0.0)
    if need <= budget_GB * 1e9:
        return None
    return (f"estimated disk use {need / 1e9:.3g} GB for {len(todo)} cases (results kept "
            f"{sum(kept) / 1e9:.3g} GB + solver scratch {max(scratch, default=0.0) / 1e9:.3g} GB) is over the "
            f"budget of {budget_GB:.3g} GB ({source})")


# -- the budget of the cases to run (plan and run refuse over it) ------------------------------------------
def fmt_bytes(b: float) -> str:
    if b != b:
        return "-"
    for unit, f in (("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if b >= f:
            return f"{b / f:.1f} {unit}"
    return f"{b:.0f} B"


def fmt_cpu(s: float) -> str:
    from .pipeline import format_duration

    return "-" if s != s else format_duration(s)


def study_cpu_budget_hours(study, given: float | None) -> float:
    """The CPU-time budget: the command line's, else the study file's ``budget.max_cpu_hours``, else 24 h."""
    if given is not None:
        return float(given)
    try:
        v = study.budget.get("max_cpu_hours")
    except (AttributeError, KeyError, TypeError):
        v = None
    return float(v) if v else 24.0


def budget_problems(rows: list[dict], max_cpu_hours: float, max_memory_GB: float,
                    disk: tuple[float, str] | None = None) -> list[str]:
    """Why the cases to run are over budget (empty: within). ``disk``: ``(budget GB, where it comes from)``."""
    todo = [r for r in rows if r["state"] == "to solve"]  # a finish step costs no FDTD time
    cpu = sum(r.get("cpu_s", 0.0) for r in todo if r.get("cpu_s", 0.0) == r.get("cpu_s", 0.0))
    out = []
    if cpu > max_cpu_hours * 3600.0:
        out.append(f"estimated CPU time {cpu / 3600.0:.3g} h for {len(todo)} cases is over the budget of "
                   f"{max_cpu_hours:g} h (--max-cpu-hours)")
    big = [r for r in todo if r.get("memory_B", 0.0) == r.get("memory_B", 0.0) and r.get("memory_B", 0.0) > max_memory_GB * 1e9]
    if big:
        worst = max(big, key=lambda r: r["memory_B"])
        out.append(f"{len(big)} cases need more memory than {max_memory_GB:g} GB (--max-memory-GB), the largest "
                   f"{fmt_bytes(worst['memory_B'])} ({worst['case_id']}, {worst['cells']:.0f} cells)")
    if disk is not None:
        p = disk_problem(rows, *disk)
        if p:
            out.append(p)
    return out


def machine_memory_GB() -> float:
    try:
        return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES") / 1e9
    except (ValueError, OSError, AttributeError):
        return 8.0
