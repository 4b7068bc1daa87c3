"""Cost of handing a segmented label volume to the engine: boxes, mesh lines, build time (100 x 100 x 100).

    .venv/bin/python benchmarks/label_volume_boxes.py [N]

A synthetic torso of our own (N^3 voxels of 2 mm, default N = 100): an elliptic cylinder along y with
skin, fat and muscle, a spine-like bone column, two lung-like ellipsoids of blood-free fat (invented demo
shapes) and a blood-filled ellipsoid whose cross-section changes along y, so that runs do not simply
extrude. Prints the voxel count, the number of boxes after the merge (per run axis), the time to build
the phantom, to mesh the scene, to build the engine's structure (CSXCAD, no solve) and the preview.
"""
from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from bodysweep.geometry.anatomy import merge_boxes
from bodysweep.geometry.scene import Scene
from bodysweep.geometry.units import from_edge_units
from bodysweep.workflow.solver.build import build_csx
from bodysweep.workflow.meshing.mesh import auto_mesh
from bodysweep.workflow.meshing.settings import settings_from_dict

VOXEL_MM = 2.0


def torso(n: int) -> np.ndarray:
    c = (np.arange(n) + 0.5 - n / 2) * VOXEL_MM
    x, y, z = np.meshgrid(c, c, c, indexing="ij")
    a, b = 0.45 * n * VOXEL_MM, 0.3 * n * VOXEL_MM
    out = np.zeros((n, n, n), np.uint8)

    def ellipse(inset):
        return (x / (a - inset)) ** 2 + (z / (b - inset)) ** 2 <= 1

    out[ellipse(0)] = 1
    out[ellipse(2)] = 2
    out[ellipse(8)] = 3
    out[((x / (0.12 * a)) ** 2 + ((z + 0.6 * b) / (0.12 * b)) ** 2) <= 1] = 4
    for s in (-1, 1):
        out[((x - s * 0.45 * a) / (0.3 * a)) ** 2 + (z / (0.5 * b)) ** 2 + (y / (0.4 * n * VOXEL_MM)) ** 2 <= 1] = 2
    out[((x + 0.1 * a) / (0.15 * a)) ** 2 + ((z - 0.1 * b) / (0.2 * b)) ** 2 + ((y - 0.1 * n) / (0.25 * n * VOXEL_MM)) ** 2
        <= 1] = 5
    return out


def main(n: int = 100) -> None:
    arr = torso(n)
    with tempfile.TemporaryDirectory() as tmp:
        f = Path(tmp) / "torso.npy"
        np.save(f, arr)
        for order in ((0, 1, 2), (1, 2, 0), (2, 0, 1)):
            t = time.perf_counter()
            lo, hi, v = merge_boxes(arr.astype(np.int64), 0, order)
            print(f"runs along {'xyz'[order[0]]}: {v.size} boxes ({time.perf_counter() - t:.2f} s)")
        labels = [{"label": k, "tissue": t} for k, t in
                  ((1, "skin_wet"), (2, "fat_not_infiltrated"), (3, "muscle"), (4, "bone_cortical"), (5, "blood"))]
        scene = {"phantom": {"type": "label_volume", "file": str(f), "voxel_size_mm": [VOXEL_MM] * 3, "labels": labels},
                 "external": {"type": "loop", "shape": "square", "side_mm": 30, "trace_width_mm": 2, "feed_gap_mm": 2,
                              "normal": "z", "standoff_mm": 5},
                 "implant": {"type": "dipole", "length_mm": 16, "feed_gap_mm": 2, "axis": "y", "depth_mm": 15}}
        t = time.perf_counter()
        model = Scene.from_dict(from_edge_units(scene)).build(403e6)
        t_build = time.perf_counter() - t
        boxes = sum(1 for p in model.primitives if p.kind == "voxel_box")
        print(f"{n}^3 = {arr.size} voxels, {np.count_nonzero(arr)} tissue voxels -> {boxes} boxes; "
              f"scene build {t_build:.2f} s")
        settings = settings_from_dict(from_edge_units({"preset": "draft", "cells_per_wavelength": 8}))
        t = time.perf_counter()
        plan = auto_mesh(model, settings)
        print(f"mesh {plan.shape_cells} = {plan.n_cells} cells ({time.perf_counter() - t:.2f} s)")
        t = time.perf_counter()
        _, report = build_csx(model, plan, settings)
        print(f"engine structure (CSXCAD) built in {time.perf_counter() - t:.2f} s, {report.cells} cells")
        from bodysweep.geometry.preview import preview_png

        t = time.perf_counter()
        preview_png(model, Path(tmp) / "preview.png")
        print(f"three-plane preview in {time.perf_counter() - t:.2f} s")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 100)
