"""Cost estimate: Courant timestep against the analytic 3-D CFL limit, the source decay against the
Gaussian envelope found numerically, the end-criterion test interval, the memory model against measured
peaks, and basic consistency."""
import math

import numpy as np
import pytest
from scipy.constants import c as C0_SCIPY

from scipy.optimize import brentq
from scipy.signal import hilbert

from bodysweep.workflow.meshing.cost import (
    CALIBRATED_CELLS_PER_S, ENERGY_CHECK_INTERVAL_S, courant_timestep, estimate, gaussian_pulse_length_s,
    memory_estimate, source_decay_s, stop_timestep,
)
from bodysweep.workflow.meshing.mesh import auto_mesh
from bodysweep.workflow.meshing.settings import SolverSettings
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
    assert 0 < est.timesteps <= s.max_timesteps
    # the run is at least the field's decay after the source and at least one 4 s end-criterion interval
    assert est.timesteps >= source_decay_s(915e6 * 0.5, s.end_criterion_dB) / est.timestep_s
    assert est.cpu_seconds >= ENERGY_CHECK_INTERVAL_S * (1 - 1e-9)
    assert est.memory_bytes == pytest.approx(memory_estimate(est.cells, est.cells - int(np.prod(
        [len(plan.lines(i)) - 2 * s.pml_cells for i in range(3)]))))


@pytest.mark.parametrize("fc, db", [(0.5e9, -30.0), (457.5e6, -50.0), (1e9, -60.0)])
def test_source_decay_is_where_the_squared_envelope_meets_the_end_criterion(fc, db):
    # openEMS' Gaussian excitation (from memory; its length 9/(pi fc) is checked against the log above):
    # exp(-(2 pi fc (t - t0) / 3)^2) cos(2 pi f0 (t - t0)), t0 = 9 / (2 pi fc), here f0 = 2 fc.
    # The envelope is taken numerically (analytic signal, scipy.signal.hilbert), its square (the energy)
    # is compared with 10^(dB/10) of its peak, and the last crossing found by scipy.optimize.brentq.
    # Tolerance 0.5 %: the sampled analytic signal of a pulse with a bandwidth of half its carrier.
    f0, t0 = 2 * fc, 9 / (2 * math.pi * fc)
    t = np.linspace(0, 2 * t0, 200_001)
    sig = np.exp(-(2 * math.pi * fc * (t - t0) / 3) ** 2) * np.cos(2 * math.pi * f0 * (t - t0))
    energy = np.abs(hilbert(sig)) ** 2
    rel = energy / energy.max() - 10 ** (db / 10)
    i = np.nonzero(rel > 0)[0][-1]
    t_cross = brentq(lambda x: np.interp(x, t, rel), t[i], t[i + 1])
    assert source_decay_s(fc, db) == pytest.approx(t_cross, rel=5e-3)
    assert source_decay_s(fc, db) < gaussian_pulse_length_s(fc)  # the energy criterion can end a run early


def test_a_run_lasts_one_energy_test_interval_at_least_and_half_a_one_past_its_physics():
    # openEMS 0.0.35 openems.cpp, RunFDTD: the energy is tested only "if (t_diff>4)" seconds of wall time
    # passed since the last test (from memory; our solver logs print "[@ 4s] Timestep: 15400 ..." for a
    # 31 500-cell case whose field had long decayed): the first test ends even a case without physics to
    # wait for; later the stop falls at a random phase of the interval, half an interval on average
    per_check = ENERGY_CHECK_INTERVAL_S * CALIBRATED_CELLS_PER_S / 31_500
    assert stop_timestep(10, per_check, 10 ** 6) == math.ceil(per_check)
    assert stop_timestep(int(2 * per_check), per_check, 10 ** 6) == math.ceil(int(2 * per_check) + per_check / 2)
    assert stop_timestep(int(per_check) + 5, per_check, 100) == 100  # the cap ends the run regardless


# Peak RSS of real case children (port 1 with its SAR dump), cost_model_check sizes and two finer ones,
# measured 2026-12-02 (openEMS 0.0.35, getrusage of the child): (engine cells, of them in PML layers, MB)
MEASURED_PEAKS = [(31_500, 0, 84.9), (96_492, 0, 93.2), (261_630, 0, 123.1), (512_265, 0, 159.3),
                  (1_128_600, 0, 264.6), (110_044, 78_544, 102.6), (242_844, 146_352, 133.4),
                  (518_446, 256_816, 197.3), (1_785_616, 623_728, 435.7)]  # last: the plan's cells


@pytest.mark.parametrize("cells, pml_cells, mb", MEASURED_PEAKS)
def test_memory_estimate_bounds_the_measured_peak_within_30_percent(cells, pml_cells, mb):
    # an upper bound (a batch job over its memory request is killed) that is not wasteful: <= +30 %
    est = memory_estimate(cells, pml_cells) / 1e6
    assert mb <= est <= 1.3 * mb
