"""Can a finished engine run be trusted? Checks of its energy trace and length (pure, no engine import).

openEMS (0.0.35) prints the total field energy every 4 s of wall time and tests its end criterion
only there (``openems.cpp``, ``RunFDTD``): a field energy that became NaN compares false with the
criterion, so the engine stops as if the energy had decayed, prints its closing summary and no
warning. A run is therefore only counted as decayed when its last energy figure is a number at or
below the end criterion, and it fails with a reason when

* an energy figure is not a finite number (the fields diverged),
* the energy grows after the excitation has passed (a passive structure driven by nothing can only
  lose energy: an unstable run), or
* it ended before the excitation pulse had passed (its spectrum, and so every S-parameter and SAR
  figure, would be cut off).
"""
from __future__ import annotations

import math
import re

from ..meshing.cost import gaussian_pulse_length_s

__all__ = ["GROWTH_DB", "DIVERGED_LINE", "PULSE_TAIL_SLACK_DB", "excitation_timesteps", "excitation_passed_timesteps",
           "pulse_tail_dB", "judge_run"]

#: a progress line of the engine whose energy figure is not a finite number
DIVERGED_LINE = re.compile(r"Energy:\s*~?\s*[-+]?(?:nan|inf)", re.IGNORECASE)

#: energy this far (dB) above its lowest value since the whole pulse was fed in counts as growth. A
#: passive structure without source only loses energy (Poynting's theorem); the engine's estimate
#: wobbles by a few dB on resonant fields (3.2 dB measured while the pulse's tail still drives), an
#: instability grows exponentially, so a factor of 10 separates the two.
GROWTH_DB = 10.0
#: slack for the engine's rounding of the printed dB figure (two decimals)
_DB_ROUNDING = 0.01


def excitation_timesteps(fc_Hz: float, timestep_s: float) -> int:
    """Timesteps of the engine's whole Gaussian pulse of -20 dB half-bandwidth ``fc_Hz``.

    openEMS 0.0.35 (``FDTD/excitation.cpp``, ``CalcGaussianPulsExcitation``) samples
    ``cos(2 pi f0 (t - t0)) exp(-(2 pi fc t / 3 - 3)^2)``, ``t0 = 9 / (2 pi fc)``, over ``2 t0``
    (:func:`bodysweep.workflow.meshing.cost.gaussian_pulse_length_s`): ``ceil(9 / (pi fc dt))`` timesteps.
    """
    if not (fc_Hz > 0 and timestep_s > 0):
        raise ValueError(f"excitation length: need fc > 0 and a timestep > 0, got fc={fc_Hz} Hz, dt={timestep_s} s")
    return int(math.ceil(gaussian_pulse_length_s(fc_Hz) / timestep_s - 1e-9))


def _tail_fraction(x: float) -> float:
    """Energy share of a squared Gaussian envelope ``exp(-2 u^2)`` beyond ``u = x``: ``erfc(sqrt(2) x) / 2``."""
    return 0.5 * math.erfc(math.sqrt(2.0) * x)


def excitation_passed_timesteps(fc_Hz: float, timestep_s: float, end_criterion_dB: float) -> int:
    """Timesteps until all but the end criterion's share of the pulse's energy has been fed in.

    The pulse's squared envelope is ``exp(-2 ((t - t0) / tau)^2)``, ``t0 = 9 / (2 pi fc)``,
    ``tau = 3 / (2 pi fc)`` (openEMS' Gaussian excitation, :mod:`bodysweep.workflow.meshing.cost`); the share of its energy after
    ``t0 + x tau`` is ``erfc(sqrt(2) x) / 2`` (Gaussian integral, handbook formula). A run that ends before the
    share still to come has fallen to the end criterion (the same energy ratio the engine's criterion uses)
    was cut while the source still drove it. Never longer than the whole pulse.

    (Until ADAPTER_VERSION 4 the instant at which the squared envelope itself fell to the criterion was
    used; the engine's energy criterion stopped a short dipole's run 1.5 % before that instant, 2.3 dB above
    the criterion's envelope level, with under -30 dB of the pulse's energy still to come.)
    """
    target = 10.0 ** (min(float(end_criterion_dB), 0.0) / 10.0)
    lo, hi = -3.0, 3.0  # the engine's pulse spans t0 +- 3 tau
    if _tail_fraction(hi) > target:
        x = hi
    else:
        for _ in range(80):  # bisection: the tail share falls monotonically with x
            mid = 0.5 * (lo + hi)
            lo, hi = (mid, hi) if _tail_fraction(mid) > target else (lo, mid)
        x = hi
    w = 2.0 * math.pi * fc_Hz
    t = 9.0 / w + x * 3.0 / w
    return min(excitation_timesteps(fc_Hz, timestep_s), int(math.ceil(t / timestep_s - 1e-9)))


#: a run the engine's energy criterion stopped while at most this much (dB) more than the end criterion's share
#: of the pulse's energy was still to come is kept, with the share recorded (``pulse_tail_dB``) and the case
#: flagged (``pulse_tail``); later than that it fails. A boundary run of the demo (more air) stopped at
#: 9639 of 9890 timesteps with -26.5 dB of the pulse still to come against a -30 dB criterion.
PULSE_TAIL_SLACK_DB = 10.0


def pulse_tail_dB(fc_Hz: float, timestep_s: float, timesteps: int) -> float:
    """Share (dB) of the Gaussian pulse's energy still to come after ``timesteps`` (see
    :func:`excitation_passed_timesteps`: ``erfc(sqrt(2) x) / 2`` at ``t = t0 + x tau``)."""
    w = 2.0 * math.pi * fc_Hz
    x = (timesteps * timestep_s * w - 9.0) / 3.0
    return 10.0 * math.log10(max(_tail_fraction(x), 1e-300))


def judge_run(info: dict, pulse_fc_Hz: float | None, end_criterion_dB: float | None) -> dict:
    """Whether a finished run decayed, and the reason it cannot be trusted (or None).

    Parameters
    ----------
    info : dict
        :func:`bodysweep.workflow.solver.engine.parse_engine_log` of the run's console output.
    pulse_fc_Hz : float or None
        The excitation's -20 dB half-bandwidth (:func:`bodysweep.workflow.solver.run.excitation_pulse`).
    end_criterion_dB : float or None
        The run's end criterion (negative dB below the energy peak).

    Returns
    -------
    dict
        ``decay_reached`` (bool), ``reason`` (str or None), ``excitation_timesteps`` (the whole pulse) and
        ``excitation_passed_timesteps`` (:func:`excitation_passed_timesteps`), int or None; and
        ``pulse_tail_dB`` when the energy criterion stopped the run before that, by at most
        :data:`PULSE_TAIL_SLACK_DB` (the run is then kept and its case flagged).
    """
    trace = list(info.get("energy_trace") or [])
    steps = info.get("timesteps")
    dt = info.get("timestep_s")
    n_exc = info.get("excitation_timesteps")  # the engine cuts its signal to max_timesteps: recompute
    n_pass = None
    if pulse_fc_Hz and dt and dt > 0:
        n_exc = excitation_timesteps(pulse_fc_Hz, dt)
        n_pass = excitation_passed_timesteps(pulse_fc_Hz, dt, -50.0 if end_criterion_dB is None else end_criterion_dB)
    out = {"decay_reached": False, "reason": None, "excitation_timesteps": n_exc, "excitation_passed_timesteps": n_pass}
    for ts, energy, db in trace:
        if not (math.isfinite(energy) and math.isfinite(db)):
            out["reason"] = (f"field energy became {energy} at timestep {ts} (the run diverged: unstable "
                             "fields, e.g. absorbing boundary or material values); the run was stopped there")
            return out
    if steps is not None and n_pass and steps < n_pass and dt and pulse_fc_Hz:
        crit = -50.0 if end_criterion_dB is None else float(end_criterion_dB)
        tail_dB = pulse_tail_dB(pulse_fc_Hz, dt, steps)
        if not info.get("max_timesteps_reached") and tail_dB <= crit + PULSE_TAIL_SLACK_DB:
            out["pulse_tail_dB"] = tail_dB  # stopped by the energy criterion a little early: a warning, not a failure
            n_pass = None
    if steps is not None and n_pass and steps < n_pass:
        out["reason"] = (f"run ended after {steps} timesteps ({steps * dt * 1e9:.3g} ns), before the excitation "
                         f"pulse had passed: the part of its energy still to come falls to the end criterion only after {n_pass} timesteps "
                         f"({n_pass * dt * 1e9:.3g} ns); "
                         + ("raise max_timesteps" if info.get("max_timesteps_reached") else
                            "the energy criterion stopped it: give a lower end_criterion_dB"))
        return out
    if n_exc:  # growth: only once the source is silent (the whole pulse has been fed in)
        lowest = None
        for ts, energy, _ in trace:
            if ts < n_exc:
                continue
            if lowest is not None and lowest[1] > 0 and energy > lowest[1] * 10 ** (GROWTH_DB / 10):
                out["reason"] = (f"field energy grew by {10 * math.log10(energy / lowest[1]):.1f} dB between "
                                 f"timestep {lowest[0]} and {ts}, after the excitation had passed (unstable run)")
                return out
            if lowest is None or energy < lowest[1]:
                lowest = (ts, energy)
    if trace and end_criterion_dB is not None and not info.get("max_timesteps_reached"):
        out["decay_reached"] = -abs(trace[-1][2]) <= float(end_criterion_dB) + _DB_ROUNDING
    return out
