"""Smoke test: a tiny real openEMS run through the private modules, read back with h5py.

A lossy dielectric box (eps_r 40, sigma 0.8 S/m, muscle-like; values common practice) in a
small air domain, excited by a soft E-field source, a few hundred timesteps.
"""
import h5py
import numpy as np
import pytest

from bodysweep.workflow.solver import engine

pytestmark = pytest.mark.solver


def test_tiny_openems_run_writes_readable_hdf5(tmp_path):
    ContinuousStructure, openEMS = engine.load()
    f0, fc = 433e6, 300e6
    fdtd = openEMS(NrTS=300, EndCriteria=1e-6)
    fdtd.SetGaussExcite(f0, fc)
    fdtd.SetBoundaryCond(["MUR"] * 6)
    csx = ContinuousStructure()
    fdtd.SetCSX(csx)
    grid = csx.GetGrid()
    grid.SetDeltaUnit(1.0)
    lines = np.linspace(-0.06, 0.06, 17)
    for ax in "xyz":
        grid.SetLines(ax, lines)
    n_cells = np.prod([len(lines) - 1] * 3)
    assert 3000 <= n_cells <= 5000  # "a few thousand cells"
    box = csx.AddMaterial("lossy_box", epsilon=40.0, kappa=0.8)
    box.AddBox([-0.03, -0.03, -0.03], [0.03, 0.03, 0.0], priority=10)
    exc = csx.AddExcitation("src", exc_type=0, exc_val=[0, 0, 1])
    exc.AddBox([0, 0, 0.0225], [0, 0, 0.0300])
    dump = csx.AddDump("Et", dump_type=0, file_type=1)
    dump.AddBox([-0.06, -0.06, -0.01], [0.06, 0.06, -0.01])
    fdtd.Run(str(tmp_path), cleanup=True, verbose=0)

    with h5py.File(tmp_path / "Et.h5", "r") as h5:
        steps = list(h5["FieldData/TD"].keys())
        assert len(steps) > 10
        last = h5["FieldData/TD"][steps[len(steps) // 2]][()]
        mesh_x = h5["Mesh/x"][()]
    assert last.shape[0] == 3  # field components first
    assert np.all(np.isfinite(last))
    assert np.max(np.abs(last)) > 0.0  # the pulse reached the plane inside the lossy box
    assert np.isclose(mesh_x[0], -0.06) and np.isclose(mesh_x[-1], 0.06)
