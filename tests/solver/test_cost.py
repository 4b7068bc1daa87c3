"""Cost estimate: Courant timestep against the analytic 3-D CFL limit, and basic consistency."""
import math

import numpy as np
import pytest
from scipy.constants import c as C0_SCIPY

from bodysweep.workflow.solver.cost import courant_timestep, estimate, gaussian_pulse_length_s
from bodysweep.workflow.solver.mesh import auto_mesh
from bodysweep.workflow.solver.settings import SolverSettings
from test_mesh import muscle_block


def test_courant_uniform_cube_is_dx_over_c_sqrt3():
    # Taflove & Hagness, Computational Electrodynamics, 3rd ed., eq. 4.92: dt <= 1/(c sqrt(1/dx^2+1/dy^2+1/dz^2))
    dx = 1e-3
    assert courant_timestep(dx, dx, dx) == pytest.approx(dx / (C0_SCIPY * math.sqrt(3)), rel=1e-12)
    # 1-D limit when two axes are very coarse (analytic)
    assert courant_timestep(1e-3, 1e3, 1e3) == pytest.approx(1e-3 / C0_SCIPY, rel=1e-9)


def test_gaussian_length_matches_the_engine_log():
    # openEMS 0.0.35 log (throughput probe, fc = 0.5 GHz): "pulse would be ... 5.73386e-09 s long"
    assert gaussian_pulse_length_s(0.5e9) == pytest.approx(5.73386e-9, rel=1e-3)  # log rounds to whole steps


def test_estimate_is_consistent_with_its_mesh():
    model, s = muscle_block(915e6), SolverSettings(excite_ports=(1,))
    plan = auto_mesh(model, s)
    est = estimate(plan, model, s)
    assert est.cells == int(np.prod([len(plan.lines(i)) for i in range(3)]))
    assert est.timestep_s == pytest.approx(courant_timestep(*plan.smallest_cell))
    assert est.pulse_timesteps < est.timesteps <= s.max_timesteps
    assert est.memory_bytes > 0 and est.cpu_seconds > 0
