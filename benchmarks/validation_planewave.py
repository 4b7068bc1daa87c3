"""Mesh refinement of the plane-wave validation case (openEMS against the analytic layered solution).

A normally incident plane wave on skin 2 mm / fat 5 mm / muscle 40 mm (Gabriel 1996 Cole-Cole values at
the frequency; air above and below), the case of ``tests/validation/test_planewave_fdtd.py``, solved at
several mesh densities given in cells per wavelength in muscle (each layer gets ``lambda_layer / N``,
at least 4 cells across). For every run it prints the cell count, the wall time of the two engine runs
(stack and incident), the largest SAR error per layer (one cell left out at each interface) and the
error of the surface reflection coefficient against
:mod:`bodysweep.workflow.reference.layered_planewave`.

    .venv/bin/python benchmarks/validation_planewave.py [--densities 10 20 40 80] [--frequencies-MHz 915 2450]
"""
from __future__ import annotations

import argparse
import tempfile

import numpy as np

from bodysweep.workflow.reference.planewave_fdtd import (PlaneWaveSetup, plane_wave_mesh, reference_solution,
                                                        sar_comparison, solve_plane_wave, tissue_layer)

STACK = (("skin_dry", 0.002), ("fat_not_infiltrated", 0.005), ("muscle", 0.040))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--densities", type=float, nargs="+", default=[10, 20, 40, 80])
    ap.add_argument("--frequencies-MHz", type=float, nargs="+", default=[915, 2450])
    ap.add_argument("--threads", type=int, default=1)
    a = ap.parse_args()
    names = [n for n, _ in STACK]
    head = (f"{'f_MHz':>6} {'cells/lambda':>12} {'cells':>6} {'dz_mm skin/fat/muscle':>22} {'timesteps':>9} "
            f"{'runtime_s':>9} " + " ".join(f"{'SAR_err_' + n.split('_')[0] + '_%':>15}" for n in names)
            + f" {'|Gamma|_err':>11} {'phase_err_deg':>13} {'tail':>8}")
    print(head)
    with tempfile.TemporaryDirectory() as tmp:
        for f_MHz in a.frequencies_MHz:
            f = f_MHz * 1e6
            layers = tuple(tissue_layer(n, f, d) for n, d in STACK)
            ref = reference_solution(PlaneWaveSetup(f, layers))
            for n in a.densities:
                setup = PlaneWaveSetup(f, layers, cells_per_wavelength=n)
                r = solve_plane_wave(setup, f"{tmp}/{f_MHz:g}_{n:g}", threads=a.threads)
                cmp = sar_comparison(setup, r, exclude_cells=1)
                dz = "/".join(f"{c * 1e3:.2f}" for c in plane_wave_mesh(setup)["cell_z_m"])
                g_err = abs(r.gamma) - abs(ref.gamma_surface)
                p_err = np.degrees(np.angle(r.gamma / ref.gamma_surface))
                errs = " ".join(f"{100 * cmp['max_error'][nm]:15.2f}" for nm in names)
                print(f"{f_MHz:6g} {n:12g} {r.cells:6d} {dz:>22} {r.timesteps:9d} {r.runtime_s:9.1f} {errs} "
                      f"{g_err:11.4f} {p_err:13.3f} {r.tail_ratio:8.1e}", flush=True)
    print("SAR_err: largest |FDTD / analytic - 1| of the local SAR per layer; |Gamma|_err: FDTD - analytic "
          "magnitude of the surface reflection coefficient; tail: largest |E| of the last 10 % of the run / peak")


if __name__ == "__main__":
    main()
