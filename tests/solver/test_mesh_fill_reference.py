"""The incremental size envelope of the mesh fill gives exactly the lines of the straightforward fill.

The reference below evaluates the envelope (the lower envelope over *all* limit rows, as its
definition in ``size_envelope`` states) afresh for every gap in every pass, as the fill did before it
kept each gap's envelope. A minimum is exact in floating point, so the lines must be identical
(tolerance: none).
"""
import dataclasses

import numpy as np
import pytest

from bodysweep.workflow.meshing import mesh
from bodysweep.workflow.meshing.settings import PRESETS

from test_mesh import layered_with_dipole  # noqa: E402  (rootdir-relative test module, as solver_scenes)


def reference_axis_lines(fixed, limits, ratio):
    pos = np.array([p for p, _, _ in fixed])
    slope = mesh._GRADING_SLOPE_FRACTION * np.log(ratio)
    gaps = np.diff(pos)
    lim = np.vstack([limits, np.column_stack([pos[:-1], pos[1:], gaps])])
    cap = np.full(len(gaps), np.inf)
    short = mesh._short_gap_cells(ratio)
    for _ in range(200):
        changed = False
        for k, (a, b) in enumerate(zip(pos[:-1], pos[1:])):
            n = max(1, int(np.ceil(mesh.cells_needed(a, b, lim, slope) - 1e-9)))
            if n <= short and gaps[k] / n < cap[k] * (1 - 1e-9):
                cap[k] = gaps[k] / n
                lim = np.vstack([lim, [a, b, cap[k]]])
                changed = True
        if not changed:
            break
    out = [pos[:1]]
    for a, b in zip(pos[:-1], pos[1:]):
        out += [mesh.equidistribute(a, b, lim, slope), np.array([b])]
    return mesh.repair_grading(np.concatenate(out), ratio, fixed=pos)


@pytest.mark.parametrize("preset", sorted(PRESETS))
@pytest.mark.parametrize("ratio", [1.3, 1.5])
def test_fill_equals_straightforward_fill(monkeypatch, preset, ratio):
    model = layered_with_dipole()
    settings = dataclasses.replace(PRESETS[preset], max_growth_ratio=ratio)
    fast = mesh.auto_mesh(model, settings)
    monkeypatch.setattr(mesh, "_axis_lines", reference_axis_lines)
    ref = mesh.auto_mesh(model, settings)
    for a in ("x", "y", "z"):
        assert np.array_equal(getattr(fast, f"lines_{a}"), getattr(ref, f"lines_{a}"))
