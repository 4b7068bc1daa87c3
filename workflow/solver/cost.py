"""Cost estimate of one case before it runs: cells, timestep, timesteps, memory, CPU time (pure numpy).

Calibration (2026-12-02, this project's 2-core shared development machine, openEMS 0.0.35 Debian,
one engine thread, load average about 4-6 from other users): ``throughput_probe`` runs of 29 791 ...
753 571 engine cells gave 70-86 MCells/s and a peak RSS of 116 MB + 102 B per engine cell (Mur).
Re-measure with :func:`calibrate` (``benchmarks/solver_throughput.py``).
"""
from __future__ import annotations

import math
import re
import subprocess
import sys
from dataclasses import dataclass

import numpy as np

C0 = 299_792_458.0  # m/s (SI definition)
#: openEMS' default timestep factor (Operator::m_TimeStepFactor = 1)
TIMESTEP_FACTOR = 1.0
#: single-thread engine throughput, engine cells x timesteps per second (measured 2026-12-02, see above)
CALIBRATED_CELLS_PER_S = 75e6
CALIBRATION_NOTE = "2026-12-02, bodysweep dev machine (2 shared cores), openEMS 0.0.35, 1 thread"
#: peak memory model: base + per engine cell (+ PML cells counted again for the PML extension arrays)
MEMORY_BASE_B = 160e6  # probe fit 116 MB plus the case child's Python imports (rounded up)
MEMORY_PER_CELL_B = 102.0
#: ring-down model: energy decay time constant in domain light-transit times (rounded, to refine)
RING_DOWN_TRANSITS_PER_10DB = 3.0


@dataclass(frozen=True)
class CostEstimate:
    """Estimated cost of one case.

    ``cells`` counts engine cells as openEMS does (product of the numbers of mesh lines);
    ``memory_bytes`` and ``timesteps`` are per excitation; ``cpu_seconds`` is single-thread CPU time
    for all excited ports (plus the repeated port-1 run of ``engine_sar_average``).
    """

    cells: int
    mesh_cells: int
    timestep_s: float
    pulse_timesteps: int
    timesteps: int
    memory_bytes: float
    cpu_seconds: float
    n_excitations: int

    @property
    def memory_B(self) -> float:
        return self.memory_bytes

    @property
    def cpu_s(self) -> float:
        return self.cpu_seconds


def courant_timestep(dx_min: float, dy_min: float, dz_min: float) -> float:
    """3-D FDTD Courant limit ``1 / (c0 sqrt(1/dx^2 + 1/dy^2 + 1/dz^2))`` in seconds (vacuum)."""
    return 1.0 / (C0 * math.sqrt(dx_min ** -2 + dy_min ** -2 + dz_min ** -2))


def gaussian_pulse_length_s(fc_Hz: float) -> float:
    """Length of openEMS' Gaussian excitation, ``9 / (pi fc)`` seconds (checked against its log)."""
    return 9.0 / (math.pi * fc_Hz)


def estimate(plan, model, settings) -> CostEstimate:
    """Cost of one case from its mesh plan, scene and settings (no solver run)."""
    from .run import excitation_pulse

    nl = [len(plan.lines(i)) if hasattr(plan, "lines") else len(getattr(plan, f"lines_{a}"))
          for i, a in enumerate("xyz")]
    lines = [np.asarray(getattr(plan, f"lines_{a}"), float) for a in "xyz"]
    cells = int(np.prod([len(v) for v in lines]))
    mesh_cells = int(np.prod([len(v) - 1 for v in lines]))
    dt = courant_timestep(*(float(np.diff(v).min()) for v in lines)) * TIMESTEP_FACTOR
    f0, fc = excitation_pulse(model.frequency_Hz, settings.band_fraction)
    pulse = int(math.ceil(gaussian_pulse_length_s(fc) / dt))
    diag = float(np.sqrt(sum((v[-1] - v[0]) ** 2 for v in lines)))
    ring_s = RING_DOWN_TRANSITS_PER_10DB * abs(settings.end_criterion_dB) / 10.0 * diag / C0
    steps = min(settings.max_timesteps, pulse + int(math.ceil(ring_s / dt)))
    pml = settings.absorbing_cells
    pml_cells = cells - int(np.prod([max(1, n - 2 * pml) for n in nl])) if pml else 0
    mem = MEMORY_BASE_B + MEMORY_PER_CELL_B * (cells + pml_cells)
    n_exc = len(settings.excite_ports)
    # the engine's own SAR averaging (opt-in) repeats the run of port 1
    runs = n_exc + int(bool(getattr(settings, "engine_sar_average", False)) and 1 in settings.excite_ports)
    cpu = runs * cells * steps / CALIBRATED_CELLS_PER_S
    return CostEstimate(cells=cells, mesh_cells=mesh_cells, timestep_s=dt, pulse_timesteps=pulse, timesteps=steps,
                        memory_bytes=float(mem), cpu_seconds=float(cpu), n_excitations=n_exc)


def calibrate(sizes=(30, 50, 70), cell_steps: float = 3e8) -> list[dict]:
    """Run the throughput probe (separate processes) and return per size the measured figures.

    Each entry: ``cells``, ``timesteps``, ``wall_s``, ``MC_per_s``, ``timestep_s``, ``max_rss_B``.
    """
    out = []
    for n in sizes:
        cells = (n + 1) ** 3
        steps = max(100, int(cell_steps / cells))
        cmd = ["/usr/bin/time", "-v", sys.executable, "-m", "bodysweep.workflow.solver.throughput_probe",
               str(n), str(steps), "0", "mur"]
        res = subprocess.run(cmd, capture_output=True, text=True)
        text = res.stdout + res.stderr
        m = re.search(r"Time for\s+(\d+)\s+iterations with\s+([0-9.eE+]+)\s+cells\s*:\s*([0-9.eE+]+)\s*sec", text)
        dt = re.search(r"Timestep \(s\)\s*:\s*([0-9.eE+-]+)", text)
        rss = re.search(r"Maximum resident set size \(kbytes\):\s*(\d+)", text)
        if not m:
            raise RuntimeError(f"throughput probe of {n}^3 cells gave no timing line:\n{text[-2000:]}")
        ts, c, wall = int(m.group(1)), float(m.group(2)), float(m.group(3))
        out.append({"cells": int(c), "timesteps": ts, "wall_s": wall, "MC_per_s": c * ts / wall / 1e6,
                    "timestep_s": float(dt.group(1)) if dt else float("nan"),
                    "max_rss_B": int(rss.group(1)) * 1024 if rss else None})
    return out
