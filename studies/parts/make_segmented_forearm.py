"""Write ``segmented_forearm.npy``: a synthetic segmented forearm of our own, drawn from simple shapes.

An elliptical limb along y (60 mm wide in x, 48 mm high in z, 80 mm long) with skin (2.5 mm), fat
(4 mm), muscle and two bones (cortical shell around marrow-free cores, invented demo dimensions), on a
2 mm voxel grid. Labels: 0 air, 1 skin, 2 fat, 3 muscle, 4 bone. The array's axes are x, y, z; the
limb's top (the skin nearest the external antenna) is the highest z.

    python studies/parts/make_segmented_forearm.py    # rewrites the .npy beside this script
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

VOXEL_MM = 2.0
SHAPE = (36, 40, 30)  # x, y, z voxels: 72 x 80 x 60 mm, the limb with air around it
HALF_WIDTH_MM, HALF_HEIGHT_MM = 30.0, 24.0
SKIN_MM, FAT_MM = 2.5, 4.0  # skin thicker than a voxel, so that every column crossing it holds some
BONES = ((-11.0, -6.0, 7.0), (10.0, -8.0, 6.0))  # (x, z relative to the limb's axis, radius), mm
AIR, SKIN, FAT, MUSCLE, BONE = 0, 1, 2, 3, 4


def forearm_labels() -> np.ndarray:
    """Labels (nx, ny, nz) uint8, sampled at the voxel centres."""
    c = [(np.arange(n) + 0.5) * VOXEL_MM - n * VOXEL_MM / 2 for n in SHAPE]
    x, _, z = np.meshgrid(*c, indexing="ij")

    def inside(inset_mm: float) -> np.ndarray:  # ellipse shrunk by inset (approximately a constant thickness)
        a, b = HALF_WIDTH_MM - inset_mm, HALF_HEIGHT_MM - inset_mm
        return (x / a) ** 2 + (z / b) ** 2 <= 1.0

    out = np.full(SHAPE, AIR, dtype=np.uint8)
    out[inside(0.0)] = SKIN
    out[inside(SKIN_MM)] = FAT
    out[inside(SKIN_MM + FAT_MM)] = MUSCLE
    for bx, bz, r in BONES:
        out[(x - bx) ** 2 + (z - bz) ** 2 <= r * r] = BONE
    return out


if __name__ == "__main__":
    path = Path(__file__).with_name("segmented_forearm.npy")
    np.save(path, forearm_labels())
    print(f"wrote {path}")
