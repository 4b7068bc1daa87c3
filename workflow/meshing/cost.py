"""Cost estimate of one case before it runs: cells, timestep, timesteps, memory, CPU time (pure numpy).

Calibration (2026-12-02, this project's 2-core shared development machine, openEMS 0.0.35 Debian,
one engine thread, load average about 4-6 from other users): ``throughput_probe`` runs of 29 791 ...
753 571 engine cells gave 70-86 MCells/s (Mur). Re-measure with :func:`calibrate`
(``benchmarks/solver_throughput.py``).

Memory (refit 2026-12-02 from the peak RSS of real case children, port 1 with its SAR dump, which is
the largest of a case's runs): Mur, 31 500 ... 1 128 600 cells: 78 MB + 164 B per cell (least squares);
the model is rounded up to 90 MB + 165 B per cell, +6 ... +14 % over every measured run. PML runs
(110 044 ... 1 785 616 cells, 79 k ... 624 k of them in the 8-cell layers) need up to 85 B more per
layer cell than that; ``MEMORY_PER_PML_CELL_B`` = 130 B keeps them +6 ... +15 % over the measurement.

CPU work: one PML-layer cell costs 3.1 ... 3.4 interior cells per timestep (child CPU seconds of the
PML runs against the Mur rate, same day), ``PML_WORK_FACTOR`` = 3.4.

Timesteps: openEMS' Gaussian excitation (``SetGaussExcite(f0, fc)``) has the envelope
``exp(-((t - t0) / tau)^2)`` with ``t0 = 9 / (2 pi fc)`` and ``tau = 3 / (2 pi fc)``; the field energy,
quadratic in the fields, follows the envelope squared, so a field that only follows the source falls to
the end criterion ``10^(dB/10)`` of its peak at ``t0 + tau sqrt(ln(10^(-dB/10)) / 2)``, before the end of
the pulse (``2 t0``). What the domain stores decays slower, by ``RING_DOWN_DB_PER_TRANSIT`` dB per light
transit of the domain diagonal (lower for Mur, which reflects a few per cent, than for PML; fitted to the
energy the solver logs at each test: Mur 14 dB at -30 dB (262 k cells), >= 10 dB at -50 dB; PML 26 dB at
-30 and -50 dB (243 k cells); rounded down, so more steps). The run ends
at the first end-criterion test after the later of the two: openEMS tests the energy only when more
than ``ENERGY_CHECK_INTERVAL_S`` = 4 s of wall time have passed since its last test (``if (t_diff>4)``
in ``openEMS::RunFDTD``), so a run lasts at least one 4 s interval (a small case takes
``4 s x rate / cells`` steps however short its physics) and otherwise overshoots by half an interval on
average (machine-speed dependent).
"""
from __future__ import annotations

import math
import re
import subprocess
import sys
from dataclasses import dataclass, fields
from typing import Any, Mapping

import numpy as np

C0 = 299_792_458.0  # m/s (SI definition)
#: openEMS' default timestep factor (Operator::m_TimeStepFactor = 1)
TIMESTEP_FACTOR = 1.0
#: single-thread engine throughput, engine cells x timesteps per second (measured 2026-12-02, see above)
CALIBRATED_CELLS_PER_S = 75e6
CALIBRATION_NOTE = "2026-12-02, bodysweep dev machine (2 shared cores), openEMS 0.0.35, 1 thread"
#: peak memory model: base + per engine cell + per cell of the PML layers (see the module docstring)
MEMORY_BASE_B = 90e6  # case child: Python, numpy, CSXCAD, openEMS; fit 78 MB, rounded up
MEMORY_PER_CELL_B = 165.0  # fields, operator, the port-1 SAR dump; fit 164 B
MEMORY_PER_PML_CELL_B = 130.0  # UPML extension arrays; the largest measured need 85 B
#: openEMS tests its energy end criterion when more than this wall time has passed since the last test
ENERGY_CHECK_INTERVAL_S = 4.0
#: ring-down of the energy the domain stores, dB per light transit of the domain diagonal, per boundary
RING_DOWN_DB_PER_TRANSIT = {"mur": 12.0, "pml": 24.0}
#: CPU work of one PML cell per timestep relative to an interior cell (openEMS' UPML extension)
PML_WORK_FACTOR = 3.4


NAN = float("nan")
_NUMBER = (int, float)


@dataclass(frozen=True)
class CostEstimate:
    """Estimated cost of one case: the one estimate type of plan, the cost store and cluster sizing.

    Parameters
    ----------
    cells : int
        Engine cells as openEMS counts them (product of the numbers of mesh lines), >= 1.
    memory_bytes : float
        Peak memory of one excitation's engine process, bytes (> 0).
    cpu_seconds : float
        Single-thread CPU time of the whole case: every excited port (plus the repeated port-1 run of
        ``engine_sar_average``), seconds (> 0).
    n_excitations : int
        Excited ports (solve jobs) of the case, >= 1.
    mesh_cells, timestep_s, pulse_timesteps, timesteps : optional
        Cells between mesh lines, the Courant timestep (s), the excitation pulse's and the whole run's
        timesteps (per excitation); NaN when not known.
    disk_bytes, scratch_bytes : float, optional
        Disk the case's results keep and the scratch its jobs need at most
        (:func:`bodysweep.workflow.budget.case_disk_estimate`); NaN when not known.
    """

    cells: int
    memory_bytes: float
    cpu_seconds: float
    n_excitations: int = 1
    mesh_cells: float = NAN
    timestep_s: float = NAN
    pulse_timesteps: float = NAN
    timesteps: float = NAN
    disk_bytes: float = NAN
    scratch_bytes: float = NAN

    def __post_init__(self):  # written out field by field: 10,000 estimates are read back per plan
        for name, v in (("cells", self.cells), ("n_excitations", self.n_excitations)):
            if not (isinstance(v, int) and v is not True and v is not False and v >= 1):
                raise ValueError(f"cost estimate: {name} must be a positive integer, got {v!r}")
        for name, v in (("memory_bytes", self.memory_bytes), ("cpu_seconds", self.cpu_seconds)):
            if not (isinstance(v, _NUMBER) and v is not True and v is not False and 0 < v < math.inf):
                raise ValueError(f"cost estimate: {name} must be a positive finite number, got {v!r}")
        for name, v in (("mesh_cells", self.mesh_cells), ("timestep_s", self.timestep_s),
                        ("pulse_timesteps", self.pulse_timesteps), ("timesteps", self.timesteps),
                        ("disk_bytes", self.disk_bytes), ("scratch_bytes", self.scratch_bytes)):
            if not (isinstance(v, _NUMBER) and v is not True and v is not False and not v < 0):
                raise ValueError(f"cost estimate: {name} must be a number >= 0 or NaN (unknown), got {v!r}")

    @property
    def memory_B(self) -> float:
        return self.memory_bytes

    @property
    def cpu_s(self) -> float:
        return self.cpu_seconds

    @property
    def cpu_seconds_per_excitation(self) -> float:
        """Single-thread CPU time of one solve job (one excited port), seconds."""
        return self.cpu_seconds / self.n_excitations

    def as_row(self) -> dict[str, float]:
        """The figures of a plan row: ``cells, timestep_s, timesteps, memory_B, cpu_s, disk_B, scratch_B``."""
        return {"cells": float(self.cells), "timestep_s": float(self.timestep_s), "timesteps": float(self.timesteps),
                "memory_B": float(self.memory_bytes), "cpu_s": float(self.cpu_seconds),
                "disk_B": float(self.disk_bytes), "scratch_B": float(self.scratch_bytes)}

    def to_dict(self) -> dict[str, float | int | None]:
        """Plain JSON data (NaN written as ``None``)."""
        return {k: (None if v != v else v) for k, v in self.__dict__.items()}

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> "CostEstimate":
        """Inverse of :meth:`to_dict`; ``ValueError`` naming what is missing or wrong."""
        missing = [k for k in ("cells", "memory_bytes", "cpu_seconds") if d.get(k) is None]
        if missing:
            raise ValueError(f"cost estimate: {', '.join(missing)} missing (it needs cells, memory_bytes, cpu_seconds)")
        if not _FIELDS.issuperset(d):
            raise ValueError(f"cost estimate: unknown fields {sorted(set(d) - _FIELDS)}")
        kw = {k: (NAN if v is None else v) for k, v in d.items()}
        kw["cells"] = int(kw["cells"])
        kw["n_excitations"] = int(kw.get("n_excitations", 1))
        return cls(**kw)


_FIELDS = frozenset(f.name for f in fields(CostEstimate))


def courant_timestep(dx_min: float, dy_min: float, dz_min: float) -> float:
    """3-D FDTD Courant limit ``1 / (c0 sqrt(1/dx^2 + 1/dy^2 + 1/dz^2))`` in seconds (vacuum)."""
    return 1.0 / (C0 * math.sqrt(dx_min ** -2 + dy_min ** -2 + dz_min ** -2))


def gaussian_pulse_length_s(fc_Hz: float) -> float:
    """Length of openEMS' Gaussian excitation, ``9 / (pi fc)`` seconds (checked against its log)."""
    return 9.0 / (math.pi * fc_Hz)


def memory_estimate(cells: int, pml_cells: int = 0) -> float:
    """Peak resident memory of one engine run (the case child process), bytes; an upper bound."""
    return MEMORY_BASE_B + MEMORY_PER_CELL_B * cells + MEMORY_PER_PML_CELL_B * pml_cells


def source_decay_s(fc_Hz: float, end_criterion_dB: float) -> float:
    """Time after the pulse start at which the squared Gaussian envelope has fallen to the end criterion.

    ``t0 + tau sqrt(ln(10^(-dB/10)) / 2)`` with ``t0 = 9 / (2 pi fc)``, ``tau = 3 / (2 pi fc)`` (openEMS'
    Gaussian excitation, see the module docstring).
    """
    w = 2.0 * math.pi * fc_Hz
    return 9.0 / w + 3.0 / w * math.sqrt(abs(end_criterion_dB) / 10.0 * math.log(10.0) / 2.0)


def stop_timestep(physical_steps: int, steps_per_check: float, max_timesteps: int) -> int:
    """Expected timestep at which openEMS stops, from the steps the physics needs and the test interval.

    Tests fall every ``steps_per_check`` steps (4 s of wall time at the engine's rate): a run lasts at
    least one interval, and beyond that it overshoots the physical end by a fraction of an interval that
    depends on the machine's speed of the day (known to some 30 %, so the phase is as good as random):
    half an interval on average. The cap ``max_timesteps`` ends the run regardless.
    """
    steps = max(steps_per_check, physical_steps + 0.5 * steps_per_check)
    return int(min(max_timesteps, math.ceil(steps)))


def excitation_pulse(frequency_Hz: float, band_fraction: float) -> tuple[float, float]:
    """Centre and -20 dB half-bandwidth ``(f0, fc)`` of the Gaussian pulse for a case.

    The pulse is centred on the case frequency and covers at least the S-parameter band
    ``f (1 +- band_fraction / 2)`` as far as DC allows: ``fc = f clip(band_fraction, 0.5, 0.6)``. Half a band
    of at least ``0.5 f`` keeps the pulse short (few timesteps). The spectrum falls as ``-20 (df / fc)^2`` dB
    (Gaussian), so DC lies ``20 / 0.6^2 = 56`` dB down: with ``fc = 0.9 f`` it was only 25 dB down, and a
    grounded board with a shorting pin (a static field the absorbing boundary cannot remove) then held
    -24 dB of energy for 50,000 timesteps and never reached a -30 dB end criterion (measured 2026-12-03).
    Band edges beyond ``f (1 +- 0.6)`` get less drive, not a wrong ratio.
    """
    fc = float(frequency_Hz) * float(np.clip(band_fraction, 0.5, 0.6))
    return float(frequency_Hz), fc



def estimate(plan, model, settings) -> CostEstimate:
    """Cost of one case from its mesh plan, scene and settings (no solver run)."""
    nl = [len(plan.lines(i)) for i in range(3)]
    lines = [np.asarray(getattr(plan, f"lines_{a}"), float) for a in "xyz"]
    cells = int(np.prod([len(v) for v in lines]))
    mesh_cells = int(np.prod([len(v) - 1 for v in lines]))
    dt = courant_timestep(*(float(np.diff(v).min()) for v in lines)) * TIMESTEP_FACTOR
    f0, fc = excitation_pulse(model.frequency_Hz, settings.band_fraction)
    pulse = int(math.ceil(gaussian_pulse_length_s(fc) / dt))
    diag = float(np.sqrt(sum((v[-1] - v[0]) ** 2 for v in lines)))
    db = abs(settings.end_criterion_dB)
    transit_s = diag / C0
    ring_s = 9.0 / (2.0 * math.pi * fc) + db / RING_DOWN_DB_PER_TRANSIT[settings.boundary] * transit_s
    physical = int(math.ceil(max(source_decay_s(fc, settings.end_criterion_dB), ring_s) / dt))
    pml = settings.absorbing_cells
    pml_cells = cells - int(np.prod([max(1, n - 2 * pml) for n in nl])) if pml else 0
    work = cells + (PML_WORK_FACTOR - 1.0) * pml_cells  # interior-cell updates per timestep
    steps = stop_timestep(physical, ENERGY_CHECK_INTERVAL_S * CALIBRATED_CELLS_PER_S / work, settings.max_timesteps)
    mem = memory_estimate(cells, pml_cells)
    n_exc = len(settings.excite_ports)
    # the engine's own SAR averaging (opt-in) repeats the run of port 1
    runs = n_exc + int(bool(settings.engine_sar_average) and 1 in settings.excite_ports)
    cpu = runs * work * steps / CALIBRATED_CELLS_PER_S
    return CostEstimate(cells=cells, mesh_cells=mesh_cells, timestep_s=dt, pulse_timesteps=pulse, timesteps=steps,
                        memory_bytes=float(mem), cpu_seconds=float(cpu), n_excitations=max(1, n_exc))


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
