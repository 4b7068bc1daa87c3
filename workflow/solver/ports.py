"""Lumped ports on the core CSXCAD / openEMS API: source, termination and the two port probes.

A lumped port sits across an antenna's feed gap (a :class:`~bodysweep.geometry.primitives.Port`
from ``start`` to ``stop`` along ``axis``). In openEMS it is made of four parts:

* a lumped resistor ``R = Z0`` filling the gap (``AddLumpedElement`` with ``caps=True``, which adds
  small metal caps at both ends so that the resistor touches the wire even on a coarse mesh);
* for the driven port only, an E-field excitation in the same box (``exc_type=0``, the *soft*
  source that openEMS uses for lumped ports: the field is added to the update, so together with
  the resistor it is a Thevenin source of internal resistance ``Z0``);
* a voltage probe (``p_type=0``): the line integral of E along the gap, through the gap centre;
* current probes (``p_type=1``): the loop integral of H around the gap, one in the middle of each
  mesh cell across the gap; the port current is their mean. (With an even number of gap cells the
  gap's mid-plane is a mesh line, and a single probe would sit in one half of the gap: it would
  count a current mode that is odd about the gap centre, e.g. induced by a field that is symmetric
  about the feed, which carries no port voltage and gives a spurious transmission.)

Sign convention (the same as :mod:`bodysweep.workflow.post.sparams`): ``V`` is the potential of
the ``stop`` terminal minus that of the ``start`` terminal; ``I`` is the current flowing *into* the
antenna at the ``stop`` terminal, i.e. through the gap in the ``start -> stop`` direction. Then
``0.5 Re{V conj(I)} > 0`` is the power the antenna accepts. openEMS's voltage probe integrates E
from the lower to the higher coordinate, so its weight is ``-d`` with ``d = sign(stop - start)``
(``V = -int E.dl``); the current probe counts current along the positive axis, weight ``+d``;
the source field points from ``stop`` to ``start`` (``-d``) so that it drives ``V > 0``.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from bodysweep.geometry.primitives import PRIORITY_PORT, Port, axis_index
from bodysweep.workflow.post import sparams

__all__ = ["PortProbes", "add_lumped_port", "read_probe", "probe_signals", "signals2phasors"]


@dataclass(frozen=True)
class PortProbes:
    """Where the probe files of one lumped port are, and how the port is oriented.

    Attributes
    ----------
    number : int
        Port number (1 external antenna, 2 implant).
    impedance_ohm : float
        Port reference impedance and termination resistance.
    axis : int
        0, 1, 2 for x, y, z.
    direction : int
        ``sign(stop - start)`` along ``axis``.
    voltage_file : str
        Name of the voltage probe file openEMS writes into the simulation folder.
    current_files : tuple of str
        Names of the current probe files, one per mesh cell across the gap (see
        :func:`add_lumped_port`).
    excited : bool
        Whether this port carries the source in this run.
    """

    number: int
    impedance_ohm: float
    axis: int
    direction: int
    voltage_file: str
    current_files: tuple[str, ...]
    excited: bool

    def __post_init__(self):
        object.__setattr__(self, "current_files", tuple(self.current_files))


def add_lumped_port(csx, port: Port, excite: bool, priority: int = PRIORITY_PORT) -> PortProbes:
    """Add a lumped port (resistor, optional source, V and I probes) to a CSXCAD structure.

    Parameters
    ----------
    csx : CSXCAD.ContinuousStructure
        Structure whose grid already holds mesh lines at ``port.start`` and ``port.stop``
        along the port axis (and through the port centre across it).
    port : Port
        The feed gap, its axis and its impedance.
    excite : bool
        True for the driven port of this run (unit-amplitude Gaussian source field).
    priority : int
        Priority of the resistor and source boxes (above all metal, so that the gap stays open).

    Returns
    -------
    PortProbes
    """
    ax = axis_index(port.axis)
    start = np.array(port.start, dtype=float)
    stop = np.array(port.stop, dtype=float)
    d = int(np.sign(stop[ax] - start[ax]))
    tag = f"port{port.number}"
    resistor = csx.AddLumpedElement(f"{tag}_resistor", ny=ax, caps=True, R=float(port.impedance_ohm))
    resistor.AddBox(start, stop, priority=priority)
    if excite:
        field = np.zeros(3)
        field[ax] = -d
        src = csx.AddExcitation(f"{tag}_source", exc_type=0, exc_val=field)
        src.AddBox(start, stop, priority=priority)
    centre = 0.5 * (start + stop)
    u_start, u_stop = centre.copy(), centre.copy()
    u_start[ax], u_stop[ax] = start[ax], stop[ax]
    u_name = f"{tag}_ut"
    u_probe = csx.AddProbe(u_name, p_type=0, weight=-d)
    u_probe.AddBox(u_start, u_stop)
    lines = np.asarray(csx.GetGrid().GetLines(ax), dtype=float)
    g_lo, g_hi = min(start[ax], stop[ax]), max(start[ax], stop[ax])
    inside = lines[(lines >= g_lo - 1e-12 * max(1.0, abs(g_lo))) & (lines <= g_hi + 1e-12 * max(1.0, abs(g_hi)))]
    if inside.size < 2:
        raise ValueError(f"port {port.name!r}: the mesh has {inside.size} line(s) in the feed gap "
                         f"[{g_lo}, {g_hi}] m along {port.axis}; it needs lines at both gap ends")
    i_names = []
    for k, mid in enumerate(0.5 * (inside[1:] + inside[:-1])):
        name = f"{tag}_it{k}"
        i_start, i_stop = start.copy(), stop.copy()
        i_start[ax] = i_stop[ax] = mid
        i_probe = csx.AddProbe(name, p_type=1, weight=d, norm_dir=ax)
        i_probe.AddBox(i_start, i_stop)
        i_names.append(name)
    return PortProbes(number=port.number, impedance_ohm=float(port.impedance_ohm), axis=ax, direction=d,
                      voltage_file=u_name, current_files=tuple(i_names), excited=bool(excite))


def read_probe(path) -> tuple[np.ndarray, np.ndarray]:
    """Read an openEMS text probe file (``%`` comment lines, columns time / value).

    Returns
    -------
    t_s, value : numpy.ndarray, shape (nt,)
    """
    path = Path(path)
    try:
        data = np.loadtxt(path, comments="%", ndmin=2)
    except (OSError, ValueError) as exc:
        raise ValueError(f"probe file {path.name}: cannot be read ({exc})") from None
    if data.shape[0] < 2 or data.shape[1] < 2:
        raise ValueError(f"probe file {path.name}: needs at least two rows of (time, value), got shape {data.shape}")
    return data[:, 0].copy(), data[:, 1].copy()


def probe_signals(sim_dir, probes: PortProbes) -> dict[str, np.ndarray]:
    """Time signals of one port from the probe files of a finished run.

    Returns
    -------
    dict with ``t_voltage_s``, ``voltage_V``, ``t_current_s``, ``current_A``, each shape (nt,)
        The current record is sampled half a timestep after the voltage (see :func:`signals2phasors`).
    """
    sim_dir = Path(sim_dir)
    tu, u = read_probe(sim_dir / probes.voltage_file)
    currents = [read_probe(sim_dir / name) for name in probes.current_files]
    ti = currents[0][0]
    n = min(c[1].size for c in currents)
    i = np.mean([c[1][:n] for c in currents], axis=0)
    return {"t_voltage_s": tu, "voltage_V": u, "t_current_s": ti[:n], "current_A": i}


def signals2phasors(t_voltage_s, voltage_V, t_current_s, current_A, f_Hz) -> tuple[np.ndarray, np.ndarray]:
    """Peak phasors ``V(f)``, ``I(f)`` of a port from its time signals.

    Parameters
    ----------
    t_voltage_s, voltage_V : array_like, shape (nt_v,)
    t_current_s, current_A : array_like, shape (nt_i,)
    f_Hz : array_like, shape (nf,)

    Returns
    -------
    V, I : numpy.ndarray, complex, shape (nf,)
        Single-sided spectra (``2 x`` the Fourier integral), the scaling openEMS uses for its
        frequency-domain field dumps, so that ``0.5 Re{V conj(I)}`` and ``0.5 sigma |E|^2`` refer to
        the same excitation.

    Notes
    -----
    In the leap-frog (Yee) scheme E is updated at whole timesteps ``n dt`` and H at ``(n + 1/2) dt``.
    openEMS writes each probe with its own sample times: the voltage file at ``n dt`` and the current
    file at ``(n + 1/2) dt``. Transforming each signal with its *own* time column (kernel
    ``exp(-j w t_n)`` on absolute times) puts both phasors on the same time origin; using ``n dt`` for
    the current would rotate ``I`` by ``w dt / 2`` and bias the port impedance at high frequency.
    """
    f = np.atleast_1d(np.asarray(f_Hz, dtype=float))
    V = sparams.dft(np.asarray(voltage_V, dtype=float), t_voltage_s, f, one_sided=True)
    I = sparams.dft(np.asarray(current_A, dtype=float), t_current_s, f, one_sided=True)
    return V, I
