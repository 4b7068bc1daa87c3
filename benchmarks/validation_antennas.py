"""The free-space dipole validation cases at three mesh densities, through ``bodysweep run``.

Runs the half-wave dipole (one port) and the two-dipole Friis link (both ports excited) of
``tests/validation/test_dipoles.py`` at the densities of ``dipole_cases.DENSITIES`` (air cells per
wavelength, cells across the 3 mm feed gap) and prints one table:

* ``lam/cell``: free-space wavelength over the largest air cell, and over the cell beside the wire;
* ``cells``, ``runtime``: FDTD cells and the summed solver wall time of the case (busy machines inflate it);
* ``R_res err``: resistance at resonance vs NEC-2 for the wire's equivalent radius (0.199-0.230 x cell,
  the middle value), in per cent; ``f_res err`` the resonance frequency likewise;
* ``R(l/2) err``, ``X(l/2) err``: impedance at L = lambda / 2 vs NEC-2 (per cent, ohm), and
  ``vs Balanis`` the same against 73.1 + j42.5 ohm (infinitely thin wire, Balanis eq. 4-93);
* ``S21-Friis``: |S21| minus Friis (G = 1.64, both mismatch factors) at L = lambda / 2, and the largest
  |difference| over the 0.85-1.15 f band.

    .venv/bin/python benchmarks/validation_antennas.py [--densities coarse medium fine] [--cores 2] [--keep DIR]
"""
from __future__ import annotations

import argparse
import shutil
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests" / "validation"))

from dipole_cases import (DENSITIES, F_HALF_WAVE_HZ, dipole_figures, dipole_study, friis_figures,  # noqa: E402
                          friis_study, run_study, solver_section)
from dipole_reference import C0  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--densities", nargs="+", default=list(DENSITIES), choices=list(DENSITIES))
    ap.add_argument("--cores", type=int, default=2)
    ap.add_argument("--keep", default=None, help="keep the results in this folder (default: a temporary one)")
    a = ap.parse_args(argv)
    work = Path(a.keep) if a.keep else Path(tempfile.mkdtemp(prefix="validation_antennas_"))
    lam = C0 / F_HALF_WAVE_HZ
    rows = []
    try:
        for name in a.densities:
            d = dipole_figures(run_study(work, dipole_study(f"bench_dipole_{name}", name), a.cores))
            r = friis_figures(run_study(work, friis_study(f"bench_friis_{name}", name), a.cores))
            n_air = solver_section(*DENSITIES[name])["cells_per_wavelength"]
            mid = d["nec"][sorted(d["nec"])[0]], d["nec"][sorted(d["nec"])[-1]]
            R_nec = np.mean([m["R_res_ohm"] for m in mid])
            f_nec = np.mean([m["f_res_Hz"] for m in mid])
            Z_nec = np.mean([m["Z_half_ohm"] for m in mid])
            Zh = d["Z_half_ohm"]
            rows.append((name, n_air, lam / d["wire_cell_m"], d["cells"], d["runtime_s"],
                         100 * (d["R_res_ohm"] / R_nec - 1), 100 * (d["f_res_Hz"] / f_nec - 1),
                         100 * (Zh.real / Z_nec.real - 1), Zh.imag - Z_nec.imag,
                         100 * (Zh.real / 73.1 - 1), Zh.imag - 42.5, d["R_res_ohm"], R_nec, d["emf_R_res_ohm"],
                         r["cells"], r["runtime_s"], r["diff_f0_dB"], float(np.max(np.abs(r["diff_dB"])))))
    finally:
        if not a.keep:
            shutil.rmtree(work, ignore_errors=True)
    print(f"\nhalf-wave dipole, thin wire L = 150 mm, gap 3 mm, {F_HALF_WAVE_HZ / 1e6:.1f} MHz; Friis pair 2 lambda apart")
    head = (f"{'density':8} {'lam/cell':>13} {'cells':>7} {'runtime':>8} {'R_res err':>9} {'f_res err':>9} "
            f"{'R(l/2) err':>10} {'X(l/2) err':>10} {'vs Balanis':>16} {'R_res/NEC/EMF ohm':>20} | "
            f"{'cells':>7} {'runtime':>8} {'S21-Friis':>9} {'max band':>8}")
    print(head)
    print("-" * len(head))
    for (name, n_air, n_wire, cells, rt, eR, ef, eRh, eXh, bR, bX, R, Rn, Re, fc, frt, df, dmax) in rows:
        print(f"{name:8} {n_air:5.0f} /{n_wire:6.0f} {cells:7d} {rt:7.1f}s {eR:+8.2f}% {ef:+8.2f}% "
              f"{eRh:+9.1f}% {eXh:+7.1f} ohm {bR:+6.1f}% {bX:+5.1f} ohm {R:6.2f}/{Rn:5.2f}/{Re:5.2f}  | "
              f"{fc:7d} {frt:7.1f}s {df:+7.2f}dB {dmax:6.2f}dB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
