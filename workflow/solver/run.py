"""Run one excitation of a case in its own child process and record what came out.

:func:`solve_excitation` is what the pipeline's solve step calls. It starts a fresh interpreter
(``python -m bodysweep.workflow.solver.run child ...``) that builds the scene, mesh and CSXCAD
structure and runs openEMS in a scratch folder. The engine changes the working directory and may
call ``exit()`` on some errors, so it never runs in the caller's process. The parent then parses
the engine log, reads the port probes and the raw SAR dump and writes, in ``excite_<port>/``:

``signals.h5``
    per port: voltage and current time signals (each with its own sample times), peak phasors
    ``V(f)``, ``I(f)`` over the band and at the case frequency; attributes timesteps, decay reached.
``fields_raw.h5``
    port 1 only: the raw SAR data at the case frequency, rearranged to ``(nx, ny, nz)`` arrays:
    ``E_V_per_m`` (3, nx, ny, nz) complex peak phasor, ``sigma_S_per_m``, ``density_kg_m3``,
    ``volume_m3`` (nx, ny, nz), cell centres ``x_m``, ``y_m``, ``z_m`` and cell edges ``x_edges_m``
    (nx+1,), ``y_edges_m``, ``z_edges_m``.
``solver.log``
    the engine's console output.
``status.json``
    ``{"status": "ok"|"failed", "reason", "runtime_s", "cells", "timesteps", ...}``.

Every file is written under a temporary name and renamed into place. A problem of the case (scene
or mesh refused, engine error, energy decay not reached, field energy NaN or growing, a run shorter
than its excitation pulse (see :mod:`.health`), NaN in the port signals, child crash or timeout)
gives a ``failed`` status with the reason and does not raise.

Inputs read from the folder (a solve folder of the store, or a case folder), all through
:class:`bodysweep.workflow.casefolder.SolveFolder`: ``solve.json`` if present, else ``case.json``
(``frequency_Hz``, ``solver``, ``scene``; the averaging masses of the engine's own SAR from
``engine_sar_masses_kg``, or ``sar.masses_kg`` of a ``case.json``), ``scene.json`` when present (the
built scene; else the scene is built from the inputs), the stored mesh ``mesh.json``
(:mod:`bodysweep.workflow.meshrecord`; meshed and stored here when missing or stale), and an optional
hand mesh ``mesh_plan.json`` (``lines_x``, ``lines_y``, ``lines_z``, ``interior_bounds``, metres) that
replaces the automatic one (hand meshes, tests).
"""
from __future__ import annotations

import argparse
import json
import os
import shutil
import sys
import time
import traceback
from pathlib import Path
from types import SimpleNamespace

import numpy as np

from bodysweep.workflow.casefolder import SolveFolder

from .child import CHILD_ERROR as _CHILD_ERROR
from ..meshing.cost import excitation_pulse
from .child import DIVERGED_RC as _DIVERGED_RC
from .child import child_reason as _child_reason
from .child import start_child as _start_child

__all__ = ["solve_excitation", "solve_solver_sar", "excitation_pulse", "load_case_inputs", "SAR_DUMP_NAME"]

SAR_DUMP_NAME = "sar_raw"
SOLVER_SAR_NAMES = {0.001: "sar_avg_1g", 0.01: "sar_avg_10g"}
_CHILD_SETUP = "child_setup.json"


# ------------------------------------------------------------------------------------------------
# small helpers
def _one_line(text: str, limit: int = 500) -> str:
    return " ".join(str(text).split())[:limit]


def _inputs(case_dir) -> dict:
    """The folder's inputs: ``solve.json`` (a solve of the store) or ``case.json`` (a case folder)."""
    return SolveFolder(case_dir).read_inputs()


def _engine_sar_masses(case: dict) -> list:
    if case.get("engine_sar_masses_kg") is not None:
        return list(case["engine_sar_masses_kg"])
    return (case.get("sar") or {}).get("masses_kg", [0.001, 0.01])


def load_case_inputs(case_dir) -> tuple[dict, object, object, object]:
    """Read a case folder into ``(case, model, settings, plan)`` (no engine needed).

    Raises
    ------
    ValueError, KeyError, OSError
        Unreadable or inconsistent inputs; the message names the file.
    """
    from bodysweep.geometry.model import SceneModel

    from ..meshing.settings import settings_from_dict

    folder = SolveFolder(case_dir)
    case = folder.read_inputs()
    f0 = float(case["frequency_Hz"])
    if not (np.isfinite(f0) and f0 > 0):
        raise ValueError(f"{folder.inputs_file.name} frequency_Hz must be a positive number, got {case['frequency_Hz']!r}")
    settings = settings_from_dict(case.get("solver") or {})
    if folder.scene_file.exists():
        d = folder.read_scene_strict()
        if d.get("status") == "failed":
            raise ValueError(f"{folder.scene_file.name} is a failure record: {d.get('reason')}")
        model = SceneModel.from_dict(d)
    else:
        from bodysweep.geometry.scene import Scene

        model = Scene.from_dict(case["scene"]).build(f0)
    p = folder.read_hand_mesh()
    if p is not None:
        plan = SimpleNamespace(lines_x=np.asarray(p["lines_x"], float), lines_y=np.asarray(p["lines_y"], float),
                               lines_z=np.asarray(p["lines_z"], float),
                               interior_bounds=(tuple(p["interior_bounds"][0]), tuple(p["interior_bounds"][1])))
    else:  # the solve's stored mesh (meshed and stored now if no stage did it before)
        from bodysweep.workflow.meshrecord import stored_mesh

        from ..meshing.cost import estimate
        from ..meshing.mesh import checked_mesh

        plan = stored_mesh(folder, checked_mesh, estimate, model=model, inputs=case)[0]
    return case, model, settings, plan


# ------------------------------------------------------------------------------------------------
# child side: everything that touches the engine
def _child(case_dir: Path, port: int, threads: int, work: Path, mode: str) -> int:
    try:
        from . import build, engine, ports

        case, model, settings, plan = load_case_inputs(case_dir)
        f0 = float(case["frequency_Hz"])
        numbers = [p.number for p in model.ports]
        if port not in numbers:
            raise ValueError(f"port {port} is not in the scene; ports: {numbers}")
        pulse_f0, pulse_fc = excitation_pulse(f0, settings.band_fraction)
        walls = engine.boundary_conditions(settings.boundary, settings.pml_cells)
        half = settings.mirror_plane  # half domain with an electric wall (see .mirror)
        feeds = list(model.ports)
        if half is not None:
            from . import mirror

            mirror.check_symmetric(model, half)
            first = float(np.asarray(getattr(plan, f"lines_{half}"), float)[0])
            if first != 0.0:  # a hand mesh must end on the wall as auto_mesh does
                raise ValueError(f"mirror_plane {half}: the mesh must start at the wall {half} = 0; its first "
                                 f"{half} line is at {first * 1e3:g} mm")
            walls = mirror.half_boundaries(walls, half)
            feeds = [mirror.half_port(p, half) for p in feeds]
        fdtd, csx = engine.new_simulation(pulse_f0, pulse_fc, settings.end_criterion_linear,
                                          settings.max_timesteps, boundaries=walls)
        csx, report = build.build_csx(model, plan, settings, csx)
        probes = [ports.add_lumped_port(csx, p, excite=(p.number == port)) for p in feeds]
        lo, hi = plan.interior_bounds
        if mode == "main" and port == 1:
            dump = csx.AddDump(SAR_DUMP_NAME, dump_type=29, file_type=1, frequency=[f0])
            dump.AddBox(list(lo), list(hi))
        if mode == "solver_sar":
            masses = _engine_sar_masses(case)
            for m in masses:
                dt = {0.001: 21, 0.01: 22}.get(round(float(m), 6))
                if dt is None:
                    continue
                dump = csx.AddDump(SOLVER_SAR_NAMES[round(float(m), 6)], dump_type=dt, file_type=1, frequency=[f0])
                dump.AddAttribute("SAR_Method", "IEEE_62704")
                dump.AddBox(list(lo), list(hi))
        setup = {"cells": report.cells, "clipped": report.clipped, "air_slabs": report.air_slabs,
                 "notes": report.notes, "pulse_f0_Hz": pulse_f0, "mirror_plane": half, "pulse_fc_Hz": pulse_fc,
                 "max_timesteps": settings.max_timesteps, "end_criterion_dB": settings.end_criterion_dB,
                 "probes": [vars(p) for p in probes],
                 "lines_m": [np.asarray(getattr(plan, f"lines_{a}"), float).tolist() for a in "xyz"]}
        (work / _CHILD_SETUP).write_text(json.dumps(setup))
        sys.stdout.flush()
        engine.run(fdtd, work / "sim", threads=threads, verbose=1)
        sys.stdout.flush()
        return 0
    except Exception as exc:  # a problem of the case: tell the parent in a file, then exit non-zero
        traceback.print_exc()
        (work / _CHILD_ERROR).write_text(json.dumps({"reason": _one_line(f"{type(exc).__name__}: {exc}")}))
        return 3


# ------------------------------------------------------------------------------------------------
# parent side
def _raw_dump2arrays(path: Path) -> dict[str, np.ndarray]:
    """Read openEMS's raw SAR dump (dump_type 29, HDF5) into ``(nx, ny, nz)``-ordered arrays.

    openEMS stores cell data as (nz, ny, nx) and the field as (3, nz, ny, nx) (C order of its
    Fortran-ordered arrays); ``Mesh/x, y, z`` are the dumped cells' centres.
    """
    import h5py

    with h5py.File(path, "r") as h5:
        x, y, z = (np.asarray(h5[f"Mesh/{a}"][()], float) for a in "xyz")
        fd = h5["FieldData/FD"]
        E = np.asarray(fd["f0_real"][()], np.float64) + 1j * np.asarray(fd["f0_imag"][()], np.float64)
        f = float(np.atleast_1d(fd.attrs["frequency"])[0])
        cell = {k: np.transpose(np.asarray(h5[f"CellData/{k}"][()], np.float64), (2, 1, 0))
                for k in ("Conductivity", "Density", "Volume")}
    E = np.transpose(E, (0, 3, 2, 1))
    shape = (x.size, y.size, z.size)
    if E.shape != (3,) + shape or any(v.shape != shape for v in cell.values()):
        raise ValueError(f"raw SAR dump: unexpected array shapes E {E.shape}, cells "
                         f"{[v.shape for v in cell.values()]} for a mesh of {shape} cells")
    return {"E_V_per_m": E, "sigma_S_per_m": cell["Conductivity"], "density_kg_m3": cell["Density"],
            "volume_m3": cell["Volume"], "x_m": x, "y_m": y, "z_m": z, "frequency_Hz": np.float64(f)}


def _trim_to_mesh(arrays: dict, lines_m) -> dict:
    """Drop dumped cells whose centre lies outside the mesh.

    When the dump box reaches the last mesh line, openEMS also writes the cell "beyond" it (the engine
    counts one cell per mesh line), with a centre past the domain edge and a copied volume. Those cells
    do not exist physically; keep only centres strictly inside the first and last line of each axis.
    """
    keep = []
    for a, lines in zip("xyz", lines_m):
        l = np.asarray(lines, float)
        c = arrays[f"{a}_m"]
        keep.append(np.flatnonzero((c > l[0]) & (c < l[-1])))
    ix, iy, iz = keep
    out = dict(arrays)
    for a, k in zip("xyz", keep):
        out[f"{a}_m"] = arrays[f"{a}_m"][k]
    out["E_V_per_m"] = arrays["E_V_per_m"][:, ix][:, :, iy][:, :, :, iz]
    for name in ("sigma_S_per_m", "density_kg_m3", "volume_m3"):
        out[name] = arrays[name][ix][:, iy][:, :, iz]
    return out


def centres2edges(centres, lines) -> np.ndarray:
    """Cell edges, shape (n+1,), of the ``n`` consecutive mesh cells whose centres are ``centres``.

    Raises ``ValueError`` if the centres are not those of consecutive cells of ``lines``.
    """
    c = np.asarray(centres, float)
    l = np.asarray(lines, float)
    mid = 0.5 * (l[1:] + l[:-1])
    i0 = int(np.argmin(np.abs(mid - c[0])))
    edges = l[i0:i0 + c.size + 1]
    tol = 0.01 * float(np.min(np.diff(l)))  # the dump stores centres in float32
    if edges.size != c.size + 1 or np.max(np.abs(0.5 * (edges[1:] + edges[:-1]) - c)) > tol:
        raise ValueError("raw SAR dump: its cell centres do not match consecutive cells of the mesh")
    return edges


def _wants_engine_sar(case_dir: Path) -> bool:
    """The case's ``solver.engine_sar_average`` setting (False if unreadable)."""
    try:
        from ..meshing.settings import settings_from_dict

        return bool(settings_from_dict(_inputs(case_dir).get("solver") or {})
                    .engine_sar_average)
    except Exception:
        return False


def _settings_threads(case_dir: Path) -> int:
    try:
        from ..meshing.settings import settings_from_dict

        return int(settings_from_dict(_inputs(case_dir).get("solver") or {}).threads)
    except Exception:
        return 0


def solve_excitation(case_dir, port: int, threads: int | None = None, timeout_s: float | None = None,
                     keep_scratch: bool = False) -> dict:
    """Run the excitation of ``port`` for one case; always leaves ``excite_<port>/status.json``.

    Parameters
    ----------
    case_dir : path-like
        The case folder (see the module docstring for what is read).
    port : int
        Port to drive (the others are terminated in their impedance).
    threads : int, optional
        Engine threads (default: the case's ``solver.threads``; 0 lets the engine decide).
    timeout_s : float, optional
        Wall-clock limit for the engine process; exceeded gives a failed status.
    keep_scratch : bool
        Keep the engine's scratch folder (``excite_<port>/.engine_run``) for inspection.

    Returns
    -------
    dict
        The status written to ``status.json``.
    """
    from . import engine
    from .health import judge_run
    from .ports import PortProbes, probe_signals, signals2phasors

    t0 = time.monotonic()
    case_dir = Path(case_dir).resolve()
    port = int(port)
    exc = SolveFolder(case_dir).excitation(port)
    exc.dir.mkdir(parents=True, exist_ok=True)
    work = exc.scratch
    shutil.rmtree(work, ignore_errors=True)
    work.mkdir(parents=True)
    if port == 1:  # results of the engine's own averaging belong to the previous run of port 1
        for f in exc.engine_sar_files():
            f.unlink(missing_ok=True)
    if threads is None:
        threads = _settings_threads(case_dir)
    status: dict = {"status": "failed", "reason": None, "port": port, "runtime_s": None, "cells": None,
                    "timesteps": None, "threads": int(threads)}
    if os.environ.get("SLURM_JOB_ID"):
        status["slurm_job_id"] = os.environ["SLURM_JOB_ID"]
    log_text = ""
    try:
        rc, log_text = _start_child(case_dir, port, int(threads), work, "main", timeout_s)
        info = engine.parse_engine_log(log_text)
        setup = json.loads((work / _CHILD_SETUP).read_text()) if (work / _CHILD_SETUP).exists() else {}
        status.update(cells=info["cells"] or setup.get("cells"), timesteps=info["timesteps"],
                      engine_runtime_s=info["engine_runtime_s"], speed_MC_per_s=info["speed_MC_per_s"],
                      max_timesteps=setup.get("max_timesteps"), end_criterion_dB=setup.get("end_criterion_dB"),
                      build_notes=setup.get("notes", []) + [f"clipped to interior: {c}" for c in setup.get("clipped", [])])
        reason = _child_reason(rc, work, log_text, timeout_s)
        verdict = judge_run(info, setup.get("pulse_fc_Hz"), setup.get("end_criterion_dB"))
        decay = bool(info["finished"] and verdict["decay_reached"])
        status.update(decay_reached=decay, timestep_s=info["timestep_s"],
                      excitation_timesteps=verdict["excitation_timesteps"],
                      excitation_passed_timesteps=verdict["excitation_passed_timesteps"])
        if verdict.get("pulse_tail_dB") is not None:
            status["pulse_tail_dB"] = verdict["pulse_tail_dB"]
        if reason is None and rc == _DIVERGED_RC:  # stopped by us mid-write: the probe files may be cut
            reason = verdict["reason"] or "engine stopped at a non-finite field energy"
        if reason is None and not info["finished"]:
            reason = "engine log has no closing summary; the run did not finish"
        if reason is None:
            case = _inputs(case_dir)
            from ..meshing.settings import settings_from_dict

            settings = settings_from_dict(case.get("solver") or {})
            f0 = float(case["frequency_Hz"])
            f_band = settings.band_frequencies_Hz(f0)
            port_data = []
            for pd in setup["probes"]:
                pr = PortProbes(**pd)
                sig = probe_signals(work / "sim", pr)
                z_port = pr.impedance_ohm
                if setup.get("mirror_plane"):  # the full structure: twice the half gap's voltage, Z0
                    sig["voltage_V"] = 2.0 * sig["voltage_V"]
                    z_port = 2.0 * pr.impedance_ohm
                Vb, Ib = signals2phasors(sig["t_voltage_s"], sig["voltage_V"], sig["t_current_s"],
                                         sig["current_A"], f_band)
                V0, I0 = signals2phasors(sig["t_voltage_s"], sig["voltage_V"], sig["t_current_s"],
                                         sig["current_A"], [f0])
                port_data.append({**sig, "number": pr.number, "V_band": Vb, "I_band": Ib, "V_f0": V0[0],
                                  "I_f0": I0[0], "impedance_ohm": z_port, "excited": pr.excited})
            finite = all(np.all(np.isfinite(d[k])) for d in port_data for k in ("voltage_V", "current_A"))
            attrs = {"timesteps": int(info["timesteps"] or 0), "decay_reached": decay, "excited_port": port,
                     "pulse_f0_Hz": setup["pulse_f0_Hz"], "pulse_fc_Hz": setup["pulse_fc_Hz"]}
            exc.write_signals(port_data, f_band, f0, attrs)
            if verdict["reason"]:  # diverged, grew or truncated: the signals stay for inspection only
                reason = verdict["reason"]
            elif not finite:
                reason = "port signals contain NaN or infinity (unstable run or bad material values)"
            elif not decay:
                reason = (f"energy decay to {setup.get('end_criterion_dB')} dB not reached within "
                          f"{info['timesteps']} timesteps (max_timesteps {setup.get('max_timesteps')}; last "
                          f"reported energy {info['last_energy_dB']} dB)")
            if reason is None and port == 1:
                raw = work / "sim" / f"{SAR_DUMP_NAME}.h5"
                if not raw.exists():
                    reason = "raw SAR dump missing after the run"
                else:
                    arrays = _trim_to_mesh(_raw_dump2arrays(raw), setup["lines_m"])
                    for a, lines in zip("xyz", setup["lines_m"]):
                        arrays[f"{a}_edges_m"] = centres2edges(arrays[f"{a}_m"], lines)
                    if setup.get("mirror_plane"):  # unfold onto the full grid (cubes straddle the wall)
                        from .mirror import mirror_fields

                        arrays = mirror_fields(arrays, setup["mirror_plane"])
                    if not np.all(np.isfinite(arrays["E_V_per_m"])):
                        reason = "raw SAR dump contains NaN or infinity"
                    else:
                        exc.write_fields(arrays, {"excited_port": port})
        status["reason"] = reason
        status["status"] = "ok" if reason is None else "failed"
    except Exception as err:  # an unexpected problem while reading results: record it, do not raise
        traceback.print_exc()
        status["status"] = "failed"
        status["reason"] = _one_line(f"reading results: {type(err).__name__}: {err}")
    finally:
        try:
            exc.write_log(log_text)
        except Exception:  # pragma: no cover - disk full etc.
            pass
        status["runtime_s"] = time.monotonic() - t0
        exc.write_status(status)
        if not keep_scratch:
            shutil.rmtree(work, ignore_errors=True)
    if status["status"] == "ok" and port == 1 and _wants_engine_sar(case_dir):
        try:
            solve_solver_sar(case_dir, threads=threads, timeout_s=timeout_s)
        except Exception:  # pragma: no cover - solve_solver_sar records its own failures
            traceback.print_exc()
    return status


def _read_solver_sar_dump(path: Path, lines_m) -> dict:
    """One averaged-SAR dump of the engine (dump type 21 / 22, HDF5) as ``(nx, ny, nz)`` arrays.

    Same cell order and trimming as the raw dump (:func:`_raw_dump2arrays`, :func:`_trim_to_mesh`), so
    the values sit on the cells of ``fields_raw.h5``. Raises ``ValueError`` for a dump without data
    or with NaN (a dump left unfinished when the engine ended the process).
    """
    import h5py

    with h5py.File(path, "r") as h5:
        x, y, z = (np.asarray(h5[f"Mesh/{a}"][()], float) for a in "xyz")
        fd = h5["FieldData/FD"]
        keys = [k for k in fd.keys() if not k.endswith("_imag")]
        if not keys:
            raise ValueError(f"{path.name}: no field data (dump not finished)")
        data = np.transpose(np.asarray(fd[keys[0]][()], np.float64), (2, 1, 0))
    if data.shape != (x.size, y.size, z.size):
        raise ValueError(f"{path.name}: data shape {data.shape} does not match its mesh {(x.size, y.size, z.size)}")
    if not np.all(np.isfinite(data)):
        raise ValueError(f"{path.name}: data contain NaN or infinity")
    keep = [np.flatnonzero((c > np.min(l)) & (c < np.max(l))) for c, l in zip((x, y, z), lines_m)]
    return {"sar": data[np.ix_(*keep)], "x_m": x[keep[0]], "y_m": y[keep[1]], "z_m": z[keep[2]]}


def solve_solver_sar(case_dir, threads: int | None = None, timeout_s: float | None = None) -> dict:
    """Optional extra: the engine's own 1 g / 10 g averaged SAR for port 1, in a separate run.

    One more engine run of port 1 with the engine's averaged-SAR dumps (``SAR_Method`` IEEE_62704),
    one per averaging mass of the case (1 g and 10 g; other masses are not offered by the engine). In
    this openEMS version (0.0.35) the engine's averaging can end its process (``exit()`` after
    "invalid averaging box size"; seen for 10 g when a face-centred cube of an outer one-cell tissue
    layer cannot reach the target mass, i.e. that layer holds less), so it runs in its own child process: a crash gives a recorded reason, never an
    exception, and dumps finished before the crash are kept.

    Writes ``excite_1/solver_sar.h5`` (datasets ``sar_avg_1g`` / ``sar_avg_10g``, (nx, ny, nz), W/kg
    at the run's source amplitude, on the cells of ``fields_raw.h5``, plus cell centres ``x_m``,
    ``y_m``, ``z_m``) when at least one mass came out, ``excite_1/solver_sar.log`` (engine output)
    and ``excite_1/solver_sar_status.json``:
    ``{"status": "ok"|"partial"|"failed", "reason", "by_mass": {"<kg>": {"status", "reason",
    "dataset"}}, "runtime_s"}``. Returns that status.
    """
    from bodysweep.workflow.atomic import write_text

    t0 = time.monotonic()
    case_dir = Path(case_dir).resolve()
    exc = SolveFolder(case_dir).excitation(1)
    exc.dir.mkdir(parents=True, exist_ok=True)
    work = exc.dir / f"{exc.scratch.name}_solver_sar"
    shutil.rmtree(work, ignore_errors=True)
    work.mkdir(parents=True)
    if threads is None:
        threads = _settings_threads(case_dir)
    status: dict = {"status": "failed", "reason": None, "by_mass": {}}
    log_text = ""
    try:
        case = _inputs(case_dir)
        masses = [float(m) for m in _engine_sar_masses(case)]
        offered = {m: SOLVER_SAR_NAMES[round(m, 6)] for m in masses if round(m, 6) in SOLVER_SAR_NAMES}
        for m in masses:
            if m not in offered:
                status["by_mass"][repr(m)] = {"status": "failed", "dataset": None,
                                              "reason": "the engine averages over 1 g and 10 g only"}
        if not offered:
            raise ValueError("no averaging mass of the case (1 g or 10 g) that the engine offers")
        rc, log_text = _start_child(case_dir, 1, int(threads), work, "solver_sar", timeout_s)
        crash = _child_reason(rc, work, log_text, timeout_s)
        setup = json.loads((work / _CHILD_SETUP).read_text()) if (work / _CHILD_SETUP).exists() else {}
        got = {}
        for m, name in offered.items():
            src = work / "sim" / f"{name}.h5"
            entry = {"status": "failed", "dataset": None, "reason": None}
            if not src.exists() or "lines_m" not in setup:
                entry["reason"] = crash or f"{name}.h5 missing after the run"
            else:
                try:
                    got[name] = _read_solver_sar_dump(src, setup["lines_m"])
                    entry.update(status="ok", dataset=name)
                except (OSError, KeyError, ValueError) as err:
                    entry["reason"] = _one_line(f"{crash + '; ' if crash else ''}{type(err).__name__}: {err}")
            status["by_mass"][repr(m)] = entry
        if got:
            exc.write_engine_sar(got)
        n_ok = sum(e["status"] == "ok" for e in status["by_mass"].values())
        status["status"] = "ok" if n_ok == len(status["by_mass"]) else ("partial" if n_ok else "failed")
        status["reason"] = crash if crash else (None if n_ok == len(status["by_mass"]) else "see by_mass")
    except Exception as err:
        status["status"] = "failed"
        status["reason"] = _one_line(f"{type(err).__name__}: {err}")
    try:
        write_text(exc.engine_sar_log, log_text)
    except Exception:  # pragma: no cover - disk full etc.
        pass
    status["runtime_s"] = time.monotonic() - t0
    exc.write_engine_sar_status(status)
    shutil.rmtree(work, ignore_errors=True)
    return status


def main(argv: list[str] | None = None) -> int:
    """``python -m bodysweep.workflow.solver.run {solve,child} CASE_DIR --port P ...``."""
    ap = argparse.ArgumentParser(prog="python -m bodysweep.workflow.solver.run", description=main.__doc__)
    ap.add_argument("verb", choices=["solve", "child"])
    ap.add_argument("case_dir")
    ap.add_argument("--port", type=int, default=1)
    ap.add_argument("--threads", type=int, default=None)
    ap.add_argument("--work", default=None)
    ap.add_argument("--mode", default="main", choices=["main", "solver_sar"])
    a = ap.parse_args(argv)
    if a.verb == "child":
        return _child(Path(a.case_dir), a.port, int(a.threads or 0), Path(a.work), a.mode)
    st = solve_excitation(a.case_dir, a.port, a.threads)
    print(json.dumps({"status": st["status"], "reason": st["reason"]}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
