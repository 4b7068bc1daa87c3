"""Access to the openEMS / CSXCAD Python modules (the only module that imports them directly).

The modules come from Debian's ``python3-openems`` and are placed in ``.engine/py`` by the set-up
script; a ``.pth`` file in the virtual environment puts that folder on ``sys.path``.
Debian's ``openEMS/ports.py`` helper is never imported (it uses the removed ``np.float``).
"""
from __future__ import annotations

import importlib
import importlib.util
import json
import re
import sys
import types
from pathlib import Path


class _DeferredPylab(types.ModuleType):
    """Stand-in for ``pylab`` that imports the real module on the first attribute asked for."""

    def __getattr__(self, name):
        real = self.__dict__.get("_real")
        if real is None:
            if sys.modules.get("pylab") is self:
                del sys.modules["pylab"]
            real = importlib.import_module("pylab")
            self.__dict__["_real"] = real
        return getattr(real, name)


def _defer_pylab() -> None:
    """Make ``import pylab`` cheap until pylab is really used.

    CSXCAD's ``SmoothMeshLines`` (imported by ``import CSXCAD``) does ``import pylab`` for plotting
    helpers that bodysweep never calls; importing matplotlib's pyplot there costs about 0.5 s in every
    solve job. The stand-in imports the real module on first use, so code that plots still works.
    """
    if "pylab" not in sys.modules and importlib.util.find_spec("pylab") is not None:
        sys.modules["pylab"] = _DeferredPylab("pylab")


def load():
    """Return ``(ContinuousStructure, openEMS)`` classes, with a set-up hint if they are missing."""
    _defer_pylab()
    try:
        from CSXCAD import ContinuousStructure
        from openEMS import openEMS
    except ImportError as exc:  # pragma: no cover - depends on machine set-up
        raise ImportError(
            f"openEMS Python modules not importable ({exc}); run `bash tasks.sh setup` from the repository root"
        ) from exc
    return ContinuousStructure, openEMS


def engine_versions() -> dict[str, str]:
    """Versions of the openEMS engine and CSXCAD as installed by the set-up script."""
    # located without importing CSXCAD (its import pulls in matplotlib: ~0.7 s in every finish job)
    spec = importlib.util.find_spec("CSXCAD")
    if spec is None or not spec.submodule_search_locations:
        return {"openEMS": "unknown", "CSXCAD": "unknown"}
    f = Path(list(spec.submodule_search_locations)[0]).resolve().parent / "bodysweep_engine_versions.json"
    if f.exists():
        return json.loads(f.read_text())
    return {"openEMS": "unknown", "CSXCAD": "unknown"}


def boundary_conditions(boundary: str, pml_cells: int) -> list[str]:
    """openEMS boundary names for all six faces: ``"pml"`` -> ``PML_<n>``, ``"mur"`` -> ``MUR``."""
    if boundary == "pml":
        return [f"PML_{int(pml_cells)}"] * 6
    if boundary == "mur":
        return ["MUR"] * 6
    raise ValueError(f"boundary must be 'pml' or 'mur', got {boundary!r}")


def parallel_plate_boundaries(e_axis: int, h_axis: int, absorber: str = "pml", pml_cells: int = 8) -> list[str]:
    """Boundary names for a TEM plane wave between walls: PEC normal to E, PMC normal to H, absorber
    (``"pml"`` or ``"mur"``) on the two faces normal to the third (propagation) axis.

    Order as openEMS wants it: ``[x_min, x_max, y_min, y_max, z_min, z_max]``; axes 0, 1, 2 = x, y, z.
    """
    if sorted((int(e_axis), int(h_axis))) not in ([0, 1], [0, 2], [1, 2]):
        raise ValueError(f"plane wave: E and H axes must be two different axes of 0, 1, 2, got {e_axis}, {h_axis}")
    names = boundary_conditions(absorber, pml_cells)
    names[2 * e_axis:2 * e_axis + 2] = ["PEC", "PEC"]
    names[2 * h_axis:2 * h_axis + 2] = ["PMC", "PMC"]
    return names


def pml_sizes_first(names: list[str]) -> list[str] | None:
    """The boundary list to give the engine *before* ``names`` when a PML face has a non-PML opposite.

    openEMS 0.0.35 keeps a PML thickness for every face, 8 cells unless the face was set as a PML,
    and uses the *lower* face's thickness in two places that concern the upper PML of the same axis
    (``Operator_Ext_UPML::Create_UPML``: the end of the y and z layers' x range is
    ``N - 1 - (size[x-min] + 1)``; ``CalcGradingKappa``: the upper layer's grading step is
    ``width / size[lower]``). With a wall (PEC, a half-domain solve) on x-min and ``PML_10`` on x-max
    the y and z layers then reach two lines into the x-max layer: those corner cells get both
    layers' updates and the fields diverge (NaN energy within a few hundred timesteps, measured).
    Setting every face as a PML of the same thickness first and then the wanted list leaves each
    non-PML face with that thickness stored, so both uses see the right number.

    Returns None when no face needs it (all faces PML of one thickness, or no PML).
    """
    sizes = {int(n[4:]) for n in names if str(n).startswith("PML_")}
    if not sizes:
        return None
    if len(sizes) > 1:
        raise ValueError(f"boundaries: PML faces must all have the same thickness, got {names}")
    if all(str(n).startswith("PML_") for n in names):
        return None
    return [f"PML_{sizes.pop()}"] * 6


def set_boundaries(fdtd, names: list[str]) -> None:
    """Give the engine its six boundary names, with the PML thickness fix of :func:`pml_sizes_first`."""
    first = pml_sizes_first(names)
    if first is not None:
        fdtd.SetBoundaryCond(first)
    fdtd.SetBoundaryCond(list(names))


def new_simulation(f0_Hz: float, fc_Hz: float, end_criterion: float, max_timesteps: int,
                   boundary: str = "pml", pml_cells: int = 8, boundaries: list[str] | None = None):
    """A fresh ``(fdtd, csx)`` pair: Gaussian pulse, stop criterion, absorbing boundary.

    Parameters
    ----------
    f0_Hz, fc_Hz : float
        Centre frequency and -20 dB half-bandwidth of the Gaussian pulse (openEMS convention: the
        spectrum covers ``f0 - fc ... f0 + fc``); ``fc_Hz < f0_Hz`` keeps DC out.
    end_criterion : float
        Energy ratio (linear, e.g. ``1e-5`` for -50 dB) at which the run stops.
    max_timesteps : int
        Hard cap on timesteps.
    boundaries : list of str, optional
        All six openEMS boundary names (e.g. from :func:`parallel_plate_boundaries`); replaces
        ``boundary`` / ``pml_cells`` when given.
    """
    if not (0 < fc_Hz < f0_Hz):
        raise ValueError(f"excitation: need 0 < fc < f0, got f0={f0_Hz} Hz, fc={fc_Hz} Hz")
    ContinuousStructure, openEMS = load()
    # One material per cell, probed at its centre (openEMS's CellConstantMaterial), the same material the SAR
    # dump reports for the cell (its conductivity and density are probed at the centre too). With openEMS's
    # default averaging over the quarter cells around each edge, a cell cut by a curved tissue surface got
    # edges of mixed material whose field is nearly the air side's, while the cell kept the tissue's
    # conductivity: those surface cells read up to 12 times high in local SAR (demo wrist-loop case on the
    # standard mesh: peak 1 g SAR +61 % against the mesh at twice the resolution). Interfaces on mesh lines
    # (slabs, boxes, voxel volumes) are modelled as before.
    fdtd = openEMS(NrTS=int(max_timesteps), EndCriteria=float(end_criterion), CellConstantMaterial=1)
    fdtd.SetGaussExcite(float(f0_Hz), float(fc_Hz))
    set_boundaries(fdtd, list(boundaries) if boundaries is not None else boundary_conditions(boundary, pml_cells))
    csx = ContinuousStructure()
    fdtd.SetCSX(csx)
    return fdtd, csx


def run(fdtd, sim_dir, threads: int = 0, verbose: int = 1) -> None:
    """Run a set-up simulation in ``sim_dir`` (the engine changes the working directory while running)."""
    import os

    cwd = os.getcwd()
    try:
        fdtd.Run(str(sim_dir), cleanup=False, verbose=int(verbose), numThreads=int(threads))
    finally:
        os.chdir(cwd)


_RE_DONE = re.compile(r"Time for\s+(\d+)\s+iterations with\s+([0-9.eE+]+)\s+cells\s*:\s*([0-9.eE+]+)\s*sec")
_RE_SPEED = re.compile(r"Speed:\s*([0-9.eE+]+)\s*MCells/s")
_NUM = r"[-+]?(?:nan|inf|[0-9.]+(?:[eE][-+]?[0-9]+)?)"
# one progress line: "[@ 4s] Timestep: 1234 || Speed: ... || Energy: ~1.2e-15 (- 12.34dB)"
_RE_PROGRESS = re.compile(r"Timestep:\s*(\d+)[^\n]*?Energy:\s*~?\s*(" + _NUM + r")\s*\(\s*-?\s*(" + _NUM + r")\s*dB\)",
                          re.IGNORECASE)
_RE_CELLS = re.compile(r"-->\s*(\d+)\s*FDTD cells")
_RE_DT = re.compile(r"FDTD timestep is:\s*(" + _NUM + r")\s*s")
_RE_EXCITE = re.compile(r"Excitation signal length is:\s*(\d+)\s*timesteps")


def parse_engine_log(text: str) -> dict:
    """Facts from an openEMS console log (verbose >= 1).

    Returns
    -------
    dict
        ``timesteps`` (int or None), ``cells`` (int or None), ``engine_runtime_s``, ``speed_MC_per_s``,
        ``max_timesteps_reached`` (the engine's warning was printed), ``last_energy_dB`` (last energy
        figure of the progress lines, negative, or None; NaN when the engine printed one that is not a
        number), ``finished`` (the closing summary was printed), ``timestep_s`` (the engine's FDTD
        timestep or None), ``excitation_timesteps`` (length of the engine's excitation signal or
        None) and ``energy_trace``: ``[(timestep, energy, dB below the peak)]`` of every progress
        line, in order, with ``float('nan')`` / ``inf`` where the engine printed them.

    The engine (0.0.35) prints a progress line every 4 s of wall time and tests its end criterion
    only there: a field energy that became NaN ends the run like a reached criterion (NaN compares
    false) and without the max-timesteps warning, so ``finished`` alone says nothing about decay.
    """
    out: dict = {"timesteps": None, "cells": None, "engine_runtime_s": None, "speed_MC_per_s": None,
                 "max_timesteps_reached": False, "last_energy_dB": None, "finished": False,
                 "timestep_s": None, "excitation_timesteps": None, "energy_trace": []}
    m = _RE_CELLS.search(text)
    if m:
        out["cells"] = int(m.group(1))
    m = _RE_DONE.search(text)
    if m:
        out["timesteps"] = int(m.group(1))
        out["engine_runtime_s"] = float(m.group(3))
        out["finished"] = True
    m = _RE_SPEED.findall(text)
    if m:
        out["speed_MC_per_s"] = float(m[-1])
    m = _RE_DT.search(text)
    if m:
        out["timestep_s"] = float(m.group(1))
    m = _RE_EXCITE.search(text)
    if m:
        out["excitation_timesteps"] = int(m.group(1))
    trace = [(int(ts), float(e), float(db)) for ts, e, db in _RE_PROGRESS.findall(text)]
    out["energy_trace"] = trace
    if trace:
        out["last_energy_dB"] = -abs(trace[-1][2])
    out["max_timesteps_reached"] = "Max. number of timesteps was reached" in text
    return out
