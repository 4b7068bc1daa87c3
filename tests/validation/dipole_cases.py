"""The free-space dipole validation cases as study files, run through ``bodysweep run``, and their figures.

A half-wave dipole alone (one port) and two parallel half-wave dipoles two wavelengths apart, broadside
(port 1 "external" above z = 0, port 2 "implant" below, both in air: phantom ``none``). Each is one
case at the frequency where the tip-to-tip length is half a wavelength; the S-parameter band
(``band_fraction`` 0.3) is the frequency sweep through resonance. Shared by ``test_dipoles.py`` and
``benchmarks/validation_antennas.py``.
"""
from __future__ import annotations

import os
from contextlib import contextmanager
from pathlib import Path

import h5py
import numpy as np
import pandas as pd
import yaml

from dipole_reference import (C0, WIRE_RADIUS_RANGE, friis_s21_squared, induced_emf_impedance, interpolate,
                              nec_impedance, resonance, s2z)

LENGTH_M = 0.150  # tip-to-tip, our own round number
GAP_M = 0.003  # feed gap
F_HALF_WAVE_HZ = C0 / (2 * LENGTH_M)  # 999.3 MHz: L = lambda / 2 here
SEPARATION_WAVELENGTHS = 2.0  # far field: beyond 2 D^2 / lambda = 0.5 lambda (Balanis, 3rd ed., sec. 2.2)
SEPARATION_M = SEPARATION_WAVELENGTHS * C0 / F_HALF_WAVE_HZ
F_CASE_MHZ = round(F_HALF_WAVE_HZ / 1e6, 4)

#: mesh densities: (air cells per wavelength, cells across the 3 mm feed gap = wire cell 3, 1.5, 1 mm)
DENSITIES = {"coarse": (12, 1), "medium": (15, 2), "fine": (20, 3)}


def solver_section(cells_per_wavelength: float, port_cells: int) -> dict:
    return {"preset": "standard", "cells_per_wavelength": cells_per_wavelength, "port_cells": port_cells,
            "air_margin_wavelengths": 0.2, "max_growth_ratio": 1.5, "boundary": "pml", "pml_cells": 8,
            "band_fraction": 0.3, "n_band_points": 61, "end_criterion_dB": -40.0, "threads": 1}


def _dipole(extra: dict) -> dict:
    return {"type": "dipole", "length_mm": LENGTH_M * 1e3, "feed_gap_mm": GAP_M * 1e3, "axis": "x",
            "wire_radius_mm": 0, **extra}


def dipole_study(name: str, density: str = "coarse") -> dict:
    """One thin-wire half-wave dipole in air (one port)."""
    return {"study": name, "frequencies_MHz": [F_CASE_MHZ],
            "scene": {"phantom": {"type": "none"}, "external": _dipole({"standoff_mm": 0})},
            "solver": solver_section(*DENSITIES[density]),
            "sar": {"masses_g": [1], "limits": [{"mass_g": 1, "limit_W_per_kg": 1.6, "source": "47 CFR 1.1310"}]},
            "excite": [1]}


def friis_study(name: str, density: str = "coarse") -> dict:
    """Two parallel thin-wire half-wave dipoles along x, ``SEPARATION_M`` apart along z (broadside)."""
    h = SEPARATION_M / 2 * 1e3
    return {"study": name, "frequencies_MHz": [F_CASE_MHZ],
            "scene": {"phantom": {"type": "none"}, "external": _dipole({"standoff_mm": h}),
                      "implant": _dipole({"depth_mm": h})},
            "solver": solver_section(*DENSITIES[density]),
            "sar": {"masses_g": [1], "limits": [{"mass_g": 1, "limit_W_per_kg": 1.6, "source": "47 CFR 1.1310"}]},
            "excite": [1, 2]}


@contextmanager
def _cwd(path: Path):
    old = os.getcwd()
    os.chdir(path)
    try:
        yield
    finally:
        os.chdir(old)


def run_study(workdir: Path, study: dict, cores: int = 2) -> Path:
    """Write the study file into ``workdir``, ``bodysweep run`` and ``verify`` it; returns the results folder."""
    from bodysweep.workflow import cli

    workdir = Path(workdir)
    workdir.mkdir(parents=True, exist_ok=True)
    path = workdir / f"{study['study']}.yaml"
    path.write_text(yaml.safe_dump(study, sort_keys=False))
    with _cwd(workdir):
        rc = cli.main(["run", str(path), "--cores", str(cores), "--accept-cost"])
        if rc != 0:
            raise RuntimeError(f"bodysweep run {path} ended with exit code {rc}")
        rc = cli.main(["verify", str(path)])  # the case folders and tables are consistent (one-port: .s1p)
        if rc != 0:
            raise RuntimeError(f"bodysweep verify {path} ended with exit code {rc}")
    return workdir / "results" / study["study"]


def _tables(results: Path) -> tuple[pd.DataFrame, pd.DataFrame]:
    summary = pd.read_parquet(results / "tables" / "summary.parquet")
    sp = pd.read_parquet(results / "tables" / "sparams.parquet")
    return summary, sp


def _entry(sp: pd.DataFrame, i: int, j: int) -> tuple[np.ndarray, np.ndarray]:
    g = sp[(sp["i"] == i) & (sp["j"] == j)].sort_values("frequency_MHz")
    return g["frequency_MHz"].to_numpy() * 1e6, g["re"].to_numpy() + 1j * g["im"].to_numpy()


def wire_cell_m(results: Path, case_id: str, y_m: float = 0.0, z_m: float = 0.0) -> float:
    """Mean size of the four mesh cells beside a wire along x at (y, z), from the case's result.h5 grid."""
    with h5py.File(results / "cases" / case_id / "result.h5", "r") as h5:
        sizes = []
        for name, v in (("y_edges_m", y_m), ("z_edges_m", z_m)):
            e = h5["sar"][name][()]
            k = int(np.argmin(np.abs(e - v)))
            if abs(e[k] - v) > 1e-9:
                raise ValueError(f"no mesh line at the wire ({name} {v} m)")
            sizes += [e[k] - e[k - 1], e[k + 1] - e[k]]
    return float(np.mean(sizes))


def dipole_figures(results: Path) -> dict:
    """FDTD input impedance of the dipole case and the references for its effective wire radius."""
    summary, sp = _tables(results)
    row = summary.iloc[0]
    f, s11 = _entry(sp, 1, 1)
    Z = s2z(s11)
    f_res, R_res = resonance(f, Z)
    Z_half = interpolate(f, Z, F_HALF_WAVE_HZ)
    cell = wire_cell_m(results, row["case_id"])
    nec = {}
    for frac in WIRE_RADIUS_RANGE:
        Zn = nec_impedance(LENGTH_M, frac * cell, f)
        nec[frac] = {"f_res_Hz": resonance(f, Zn)[0], "R_res_ohm": resonance(f, Zn)[1],
                     "Z_half_ohm": interpolate(f, Zn, F_HALF_WAVE_HZ)}
    a_mid = float(np.mean(WIRE_RADIUS_RANGE)) * cell
    emf_f, emf_R = resonance(f, induced_emf_impedance(LENGTH_M, a_mid, f))
    return {"f_Hz": f, "Z": Z, "f_res_Hz": f_res, "R_res_ohm": R_res, "Z_half_ohm": Z_half, "wire_cell_m": cell,
            "nec": nec, "emf_R_res_ohm": emf_R, "emf_f_res_Hz": emf_f, "cells": int(row["cells"]),
            "runtime_s": float(row["runtime_s"]), "timesteps": int(row["timesteps"]),
            "decay_reached": bool(row["decay_reached"])}


def friis_figures(results: Path) -> dict:
    """|S21| of the two-dipole case against Friis over the band, and the symmetry of the 2x2 S-matrix."""
    summary, sp = _tables(results)
    row = summary.iloc[0]
    f, s11 = _entry(sp, 1, 1)
    _, s21 = _entry(sp, 2, 1)
    _, s12 = _entry(sp, 1, 2)
    _, s22 = _entry(sp, 2, 2)
    friis = friis_s21_squared(f, SEPARATION_M, s11, s22)
    diff_dB = 20 * np.log10(np.abs(s21)) - 10 * np.log10(friis)
    k0 = int(np.argmin(np.abs(f - F_HALF_WAVE_HZ)))
    return {"f_Hz": f, "S11": s11, "S21": s21, "S12": s12, "S22": s22, "friis_dB": 10 * np.log10(friis),
            "diff_dB": diff_dB, "diff_f0_dB": float(diff_dB[k0]), "S21_f0_dB": float(20 * np.log10(abs(s21[k0]))),
            "cells": int(row["cells"]), "runtime_s": float(row["runtime_s"]), "timesteps": int(row["timesteps"]),
            "decay_reached": bool(row["decay_reached"])}
