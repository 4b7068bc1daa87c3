"""Time 1 g and 10 g cube-averaged SAR on a synthetic grid of about one million voxels.

Synthetic scene (invented for timing only): a flat tissue half-space z < 0 with a denser
cylindrical inclusion, a graded non-uniform mesh (fine near the centre), and a local SAR
decaying with depth and lateral distance. Prints the timings, voxel counts per status, the
peak, the search for the best surface-flush cube, and a spot comparison of centred-cube averages
against the brute-force search.

    .venv/bin/python benchmarks/sar_averaging.py [--n 100]
"""
from __future__ import annotations

import argparse
import time

import numpy as np

from bodysweep.workflow.post.sar_average import VALID, average_sar
from bodysweep.workflow.post.sar_flush import flush_cube_peak
from bodysweep.workflow.reference.sar_bruteforce import exact_cube_average_bruteforce


def graded_edges(n, fine, coarse, centre=0.0):
    """n cells, width growing from ``fine`` at the centre to ``coarse`` at the ends."""
    s = np.linspace(-1, 1, n)
    w = fine + (coarse - fine) * s**2
    e = np.concatenate([[0.0], np.cumsum(w)])
    return e - e[-1] / 2 + centre


def scene(n):
    x = graded_edges(n + 4, 0.5e-3, 2.0e-3)
    y = graded_edges(n, 0.5e-3, 2.0e-3)
    z = graded_edges(n, 0.5e-3, 2.0e-3)
    z = z - z[int(0.8 * n)]  # surface at a grid line 80 % up
    xc, yc, zc = (0.5 * (e[1:] + e[:-1]) for e in (x, y, z))
    X, Y, Z = np.meshgrid(xc, yc, zc, indexing="ij")
    rho = np.where(Z < 0, 1040.0, 0.0)
    rho[(Z < -0.015) & (X**2 + Y**2 < 0.008**2)] = 1900.0
    sar = np.where(Z < 0, np.exp(Z / 0.012) * np.exp(-(X**2 + (Y - 0.004) ** 2) / 0.02**2), 0.0)
    return sar, rho, x, y, z


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=100, help="cells per axis (default 100: about 1.04 M voxels)")
    ap.add_argument("--spots", type=int, default=6, help="voxels checked against the brute force per mass")
    args = ap.parse_args()
    sar, rho, x, y, z = scene(args.n)
    print(f"grid {rho.shape} = {rho.size / 1e6:.2f} M voxels, {np.count_nonzero(rho) / 1e6:.2f} M tissue, "
          f"cell widths {np.diff(x).min() * 1e3:.2f}..{np.diff(x).max() * 1e3:.2f} mm")
    rng = np.random.default_rng(0)
    for mass in (1e-3, 1e-2):
        t0 = time.perf_counter()
        r = average_sar(sar, rho, x, y, z, mass)
        dt = time.perf_counter() - t0
        c = r.counts()
        print(f"{mass * 1e3:g} g: {dt:.1f} s; peak {r.peak:.6g} W/kg at index {r.peak_index} "
              f"(status {r.peak_status}); counts {c}")
        t0 = time.perf_counter()
        f = flush_cube_peak(sar, rho, x, y, z, mass)
        print(f"   best surface-flush cube: {time.perf_counter() - t0:.1f} s over {f.n_surface_faces} surface faces; "
              f"{f.peak:.6g} W/kg on face {f.face} ({f.peak / r.peak - 1:+.2%} against the voxel-grid peak)")
        valid = np.argwhere(r.status == VALID)
        near = valid[np.argsort(-r.avg[tuple(valid.T)])[: args.spots // 2]]
        far = valid[rng.choice(valid.shape[0], args.spots - near.shape[0], replace=False)]
        picks = [tuple(v) for v in np.concatenate([near, far])]
        t0 = time.perf_counter()
        b = exact_cube_average_bruteforce(sar, rho, x, y, z, mass, centres=picks)
        dtb = time.perf_counter() - t0
        rel = max(abs(r.avg[p] - b.avg[p]) / b.avg[p] for p in picks)
        print(f"   brute force on {len(picks)} centred cubes: {dtb:.1f} s, "
              f"largest relative difference {rel:.2e}")


if __name__ == "__main__":
    main()
