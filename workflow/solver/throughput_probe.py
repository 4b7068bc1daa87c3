"""A self-contained openEMS run used to calibrate the cost model (run as a separate process).

``python -m bodysweep.workflow.solver.throughput_probe N_CELLS_PER_AXIS TIMESTEPS [GRADED] [BOUNDARY]``
runs a cube of ``N^3`` cells (uniform, or graded with a fine centre when ``GRADED`` is 1) holding a
lossy dielectric block, excited by a soft E-field source, for exactly ``TIMESTEPS`` steps (the end
criterion is set out of reach), and prints the engine's console log. :func:`bodysweep.workflow.meshing.cost.calibrate`
parses that log (speed, timestep) and the peak memory of the process. Goes through
:func:`bodysweep.workflow.solver.engine.load` like every other engine user.
"""
from __future__ import annotations

import sys
import tempfile

import numpy as np


def probe_lines(n: int, graded: bool) -> np.ndarray:
    """Lines of one axis, shape ``(n + 1,)``: uniform over 0.12 m, or graded (ratio 1.2) around a fine centre."""
    if not graded:
        return np.linspace(-0.06, 0.06, n + 1)
    k = n // 2
    h = 1.2 ** np.arange(k)  # cell sizes growing from the centre outward
    h = h / h.sum() * 0.06
    half = np.concatenate([[0.0], np.cumsum(h)])
    return np.concatenate([-half[::-1], half[1:]])[: n + 1]


def main(argv: list[str]) -> int:
    from bodysweep.workflow.solver import engine

    n, steps = int(argv[0]), int(argv[1])
    graded = len(argv) > 2 and argv[2] == "1"
    boundary = argv[3] if len(argv) > 3 else "mur"
    ContinuousStructure, openEMS = engine.load()
    fdtd = openEMS(NrTS=steps, EndCriteria=1e-30)
    fdtd.SetGaussExcite(1e9, 0.5e9)
    fdtd.SetBoundaryCond(engine.boundary_conditions(boundary, 8))
    csx = ContinuousStructure()
    fdtd.SetCSX(csx)
    grid = csx.GetGrid()
    grid.SetDeltaUnit(1.0)
    lines = probe_lines(n, graded)
    for ax in "xyz":
        grid.SetLines(ax, lines)
    block = csx.AddMaterial("lossy_block", epsilon=40.0, kappa=0.8)
    block.AddBox([-0.03, -0.03, -0.03], [0.03, 0.03, 0.0], priority=10)
    exc = csx.AddExcitation("src", exc_type=0, exc_val=[0, 0, 1])
    exc.AddBox([0, 0, 0.01], [0, 0, 0.02])
    with tempfile.TemporaryDirectory() as d:
        engine.run(fdtd, d, threads=1, verbose=3)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
