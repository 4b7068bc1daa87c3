"""Normally incident plane wave on a planar tissue stack, solved by openEMS (a 1-D FDTD validation case).

Geometry (project convention: body surface at ``z = 0``, tissue at ``z < 0``): the layers lie one below
the other from ``z = 0`` down; air above and below. The wave travels in ``-z`` with ``E`` along ``x`` and
``H`` along ``y``. The domain is a few cells wide laterally and closed by PEC walls on the faces normal
to ``E`` (``x``) and PMC walls on the faces normal to ``H`` (``y``): the field of a TEM plane wave
satisfies both, so the few-cell column is an exact cut of an infinite plane wave. Both ``z`` faces are
absorbing (PML in air, so no lossy tissue reaches the absorber and the energy decays cleanly).

The source is a soft E-field sheet (``exc_type=0``, along ``x``) across the whole cross-section at
``z = z_source`` in the air above the stack. It radiates both ways; the upward half goes into the top
absorber.

Two runs on the same mesh:

``stack``
    with the layers: total field ``E_tot``.
``incident``
    all air: the incident field ``E_inc`` alone (same source, same numerical dispersion).

Both runs write openEMS's raw SAR dump (``dump_type=29``: the frequency-domain E field at cell centres,
with each cell's conductivity, density and volume), read by the same reader as the case runs
(:mod:`bodysweep.workflow.solver.run`). From them:

* the local SAR depth profile ``sigma |E|^2 / (2 rho)`` (:func:`bodysweep.workflow.post.sar.local_sar`),
  given per unit incident power density ``S_inc = |E_inc|^2 / (2 eta0)`` (W/kg per W/m^2);
* the surface reflection coefficient: in every air cell between source and surface
  ``Gamma_i = (E_tot - E_inc) / E_inc * exp(2 j k z_i)`` (incident ``~exp(+j k z)``, reflected
  ``~exp(-j k z)``, ``exp(+j w t)`` convention as openEMS's DFT ``int f(t) exp(-j w t) dt``); the
  wavenumber ``k`` is the grid's own numerical wavenumber in air from the Yee dispersion relation
  along one axis, ``sin(k dz / 2) / dz = sin(w dt / 2) / (c dt)`` (Taflove & Hagness, Computational
  Electrodynamics, 3rd ed., ch. 4, chapter from memory; the air between surface and source is meshed
  uniformly), so the transfer to ``z = 0`` carries no dispersion error. ``Gamma`` is their mean,
  their spread a check; the wavenumber measured from the phase of ``E_inc`` is kept as a check too.

Timestep. Both runs are forced to the same timestep, 0.99 of the vacuum Courant limit of the mesh
(stable in any medium with ``eps_r >= 1``). openEMS otherwise picks a material-dependent step (its
default method allows a longer one when the smallest cells hold tissue), and the soft source's
launched amplitude scales with ``1 / dt`` (the source adds its value to ``E`` once per step): the
incident run would then be off by the ratio of the two steps (4 % in E, seen on a 40 cells/lambda
mesh before this was fixed; forcing 0.7 instead of 0.99 of the Courant step raised the launched
amplitude by 1.4142, the ratio of the steps).

Run length. openEMS checks its energy-decay criterion only when it prints progress (every few seconds
of wall time), so a run of this size (a few thousand cells, about a second) would never stop on it.
The run length is therefore set from the physics: the Gaussian pulse plus ``ring_down_transits``
passes of the whole domain at the slowest speed (its optical length ``sum dz sqrt(eps_r)``), turned
into timesteps with the forced timestep. Two time-domain probes of ``E_x`` (in air just above the
surface, in the middle of the last layer) check that the field has rung down:
:attr:`PlaneWaveResult.tail_ratio` is the largest ``|E|`` over the last 10 % of the record relative to
the peak.

The engine runs in a child process (``python -m bodysweep.workflow.reference.planewave_fdtd SPEC.json SIM_DIR``)
like every case run: the engine changes the working directory and may call ``exit()``.
"""
from __future__ import annotations

import json
import subprocess
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

__all__ = ["Layer", "tissue_layer", "PlaneWaveSetup", "PlaneWaveResult", "plane_wave_mesh", "timestep_s",
           "run_timesteps", "solve_plane_wave", "reference_solution", "sar_comparison"]

C0 = 299792458.0  # m/s, exact (SI)
ETA0 = 376.730313668  # ohm, CODATA 2018 (mu0 / eps0 with their CODATA values)
SAR_DUMP = "sar_raw"


@dataclass(frozen=True)
class Layer:
    """One homogeneous tissue layer at the case frequency (SI units)."""

    name: str
    eps_r: float
    sigma_S_per_m: float
    density_kg_m3: float
    thickness_m: float

    def __post_init__(self):
        if not (self.eps_r >= 1.0 and self.sigma_S_per_m >= 0.0 and self.density_kg_m3 > 0.0
                and self.thickness_m > 0.0):
            raise ValueError(f"layer {self.name!r}: need eps_r >= 1, sigma >= 0 S/m, density > 0 kg/m^3 and "
                             f"thickness > 0 m, got {self.eps_r}, {self.sigma_S_per_m}, {self.density_kg_m3}, "
                             f"{self.thickness_m}")

    def wavelength_m(self, f_Hz: float) -> float:
        """Wavelength ``2 pi / beta`` in the lossy medium."""
        eps_c = complex(self.eps_r, -self.sigma_S_per_m / (2 * np.pi * f_Hz * 8.8541878128e-12))
        beta = (2 * np.pi * f_Hz / C0 * np.sqrt(eps_c)).real
        return float(2 * np.pi / beta)


def tissue_layer(name: str, f_Hz: float, thickness_m: float) -> Layer:
    """A layer of a built-in Gabriel (1996) Cole-Cole tissue evaluated at ``f_Hz``."""
    from bodysweep.geometry.tissues import tissue_density, tissue_properties

    eps_r, sigma = tissue_properties(name, float(f_Hz))
    return Layer(name, float(eps_r), float(sigma), tissue_density(name), float(thickness_m))


@dataclass(frozen=True)
class PlaneWaveSetup:
    """A plane-wave case.

    Parameters
    ----------
    f_Hz : float
        Frequency of the evaluation (pulse centre).
    layers : tuple of Layer
        From the surface (``z = 0``) inward; air below the last one.
    cells_per_wavelength : float
        Mesh density: each layer (and the air, with the neighbouring layer's cell) gets cells of
        ``lambda_layer / cells_per_wavelength`` ...
    min_cells_per_layer : int
        ... but at least this many cells across each layer.
    air_above_m : float
        Air between the surface and the source sheet.
    air_gap_top_m, air_below_m : float
        Air between the source and the top absorber, and below the last layer.
    lateral_cells : int
        Cells across ``x`` and ``y`` (the field is uniform across; 2 is enough).
    lateral_cell_m : float
        Their size (large cells keep the Courant timestep near ``dz / c``).
    pml_cells : int
        PML cells on each ``z`` face (outside the interior).
    ring_down_transits : float
        Run length after the pulse, in passes of the domain's optical length (see the module notes).
    end_criterion_dB : float
        Energy-decay stop (only effective on long runs).
    """

    f_Hz: float
    layers: tuple
    cells_per_wavelength: float = 20.0
    min_cells_per_layer: int = 4
    air_above_m: float = 0.03
    air_gap_top_m: float = 0.01
    air_below_m: float = 0.01
    lateral_cells: int = 2
    lateral_cell_m: float = 0.005
    pml_cells: int = 8
    ring_down_transits: float = 12.0
    end_criterion_dB: float = -50.0

    def __post_init__(self):
        object.__setattr__(self, "layers", tuple(self.layers))
        if not self.layers:
            raise ValueError("plane wave: need at least one layer")
        if not (self.f_Hz > 0 and self.cells_per_wavelength >= 4 and self.min_cells_per_layer >= 1):
            raise ValueError(f"plane wave: need f > 0 Hz, cells_per_wavelength >= 4 and min_cells_per_layer >= 1, "
                             f"got {self.f_Hz}, {self.cells_per_wavelength}, {self.min_cells_per_layer}")
        if min(self.air_above_m, self.air_gap_top_m, self.air_below_m, self.lateral_cell_m) <= 0:
            raise ValueError("plane wave: air spaces and the lateral cell must be > 0 m")


def _uniform(a: float, b: float, cell: float) -> np.ndarray:
    n = max(1, int(np.ceil((b - a) / cell - 1e-9)))
    return np.linspace(a, b, n + 1)


def plane_wave_mesh(setup: PlaneWaveSetup) -> dict:
    """Mesh lines (metres) and the places the case needs.

    Returns
    -------
    dict
        ``lines_x``, ``lines_y``, ``lines_z`` (increasing arrays), ``interfaces_z_m`` (surface and layer
        bottoms, ``(n_layers + 1,)``, on mesh lines), ``z_source_m``, ``interior_z_m`` (lowest and highest
        line inside the PML), ``cell_z_m`` per layer (list).
    """
    f = setup.f_Hz
    cells = []
    for L in setup.layers:
        c = L.wavelength_m(f) / setup.cells_per_wavelength
        cells.append(min(c, L.thickness_m / setup.min_cells_per_layer))
    tops = -np.concatenate([[0.0], np.cumsum([L.thickness_m for L in setup.layers])])
    parts = [_uniform(tops[i + 1], tops[i], cells[i]) for i in range(len(setup.layers))]
    dz_top, dz_bot = cells[0], cells[-1]
    z_src = setup.air_above_m
    above = _uniform(0.0, z_src, dz_top)
    above = np.r_[above, above[-1] + dz_top * np.arange(1, int(np.ceil(setup.air_gap_top_m / dz_top)) + 1)]
    below = _uniform(tops[-1] - setup.air_below_m, tops[-1], dz_bot)
    z = np.unique(np.round(np.concatenate([below] + parts + [above]), 13))
    z_src = float(above[int(np.argmin(np.abs(above - setup.air_above_m)))])
    interior = (float(z[0]), float(z[-1]))
    n = setup.pml_cells
    z = np.r_[z[0] - dz_bot * np.arange(n, 0, -1), z, z[-1] + dz_top * np.arange(1, n + 1)]
    w = setup.lateral_cells * setup.lateral_cell_m
    lat = np.linspace(-w / 2, w / 2, setup.lateral_cells + 1)
    return {"lines_x": lat, "lines_y": lat.copy(), "lines_z": z, "interfaces_z_m": tops, "z_source_m": z_src,
            "interior_z_m": interior, "cell_z_m": cells}


#: forced timestep as a fraction of the vacuum Courant limit (module notes)
TIMESTEP_FRACTION = 0.99


def timestep_s(setup: PlaneWaveSetup) -> float:
    """The forced timestep of both runs (s): :data:`TIMESTEP_FRACTION` of the vacuum Courant limit."""
    from ..meshing.cost import courant_timestep

    m = plane_wave_mesh(setup)
    return TIMESTEP_FRACTION * courant_timestep(*(float(np.diff(m[f"lines_{a}"]).min()) for a in "xyz"))


def run_timesteps(setup: PlaneWaveSetup) -> int:
    """Timesteps of a run: pulse plus ring-down (module notes) at :func:`timestep_s`."""
    from ..meshing.cost import gaussian_pulse_length_s

    m = plane_wave_mesh(setup)
    dt = timestep_s(setup)
    z = m["lines_z"]
    zc = 0.5 * (z[1:] + z[:-1])
    eps = np.ones(zc.shape)
    tops = m["interfaces_z_m"]
    for i, L in enumerate(setup.layers):
        eps[(zc < tops[i]) & (zc > tops[i + 1])] = L.eps_r
    optical_m = float(np.sum(np.diff(z) * np.sqrt(eps)))
    t = gaussian_pulse_length_s(0.5 * setup.f_Hz) + setup.ring_down_transits * optical_m / C0
    return int(np.ceil(t / dt))


def _probe_lines(setup: PlaneWaveSetup) -> dict:
    """z of the two decay probes (mesh lines): two cells above the surface, middle of the last layer."""
    m = plane_wave_mesh(setup)
    z = m["lines_z"]
    above = float(z[np.flatnonzero(z > 0)[1]])
    mid = 0.5 * (m["interfaces_z_m"][-2] + m["interfaces_z_m"][-1])
    return {"probe_air": above, "probe_deep": float(z[int(np.argmin(np.abs(z - mid)))])}


def _child_spec(setup: PlaneWaveSetup, with_stack: bool) -> dict:
    m = plane_wave_mesh(setup)
    layers = []
    if with_stack:
        for i, L in enumerate(setup.layers):
            layers.append({"name": L.name, "eps_r": L.eps_r, "sigma": L.sigma_S_per_m, "rho": L.density_kg_m3,
                           "z_lo": float(m["interfaces_z_m"][i + 1]), "z_hi": float(m["interfaces_z_m"][i])})
    return {"f_Hz": setup.f_Hz, "lines": [m["lines_x"].tolist(), m["lines_y"].tolist(), m["lines_z"].tolist()],
            "z_source_m": m["z_source_m"], "interior_z_m": list(m["interior_z_m"]), "layers": layers,
            "pml_cells": setup.pml_cells, "end_criterion": 10 ** (setup.end_criterion_dB / 10),
            "max_timesteps": run_timesteps(setup), "timestep_s": timestep_s(setup), "probes": _probe_lines(setup)}


def _child(spec_file: str, sim_dir: str, threads: int) -> int:
    """Build and run one plane-wave run (child process side)."""
    from ..solver import engine

    spec = json.loads(Path(spec_file).read_text())
    f0 = float(spec["f_Hz"])
    # Gaussian pulse centred on f0, -20 dB at f0 +- f0/2 (keeps DC out, short pulse)
    fdtd, csx = engine.new_simulation(f0, 0.5 * f0, spec["end_criterion"], spec["max_timesteps"],
                                      boundaries=engine.parallel_plate_boundaries(0, 1, "pml", spec["pml_cells"]))
    fdtd.SetTimeStep(float(spec["timestep_s"]))  # the same step in both runs (module notes)
    grid = csx.GetGrid()
    grid.SetDeltaUnit(1.0)
    for a, lines in zip("xyz", spec["lines"]):
        grid.SetLines(a, np.asarray(lines, float))
    x, y, z = (np.asarray(v, float) for v in spec["lines"])
    for i, L in enumerate(spec["layers"]):
        mat = csx.AddMaterial(f"layer{i}_{L['name']}", epsilon=float(L["eps_r"]), kappa=float(L["sigma"]),
                              density=float(L["rho"]))
        mat.AddBox([x[0], y[0], L["z_lo"]], [x[-1], y[-1], L["z_hi"]], priority=10)
    src = csx.AddExcitation("plane_wave_sheet", exc_type=0, exc_val=[1.0, 0.0, 0.0])
    zs = float(spec["z_source_m"])
    src.AddBox([x[0], y[0], zs], [x[-1], y[-1], zs], priority=20)
    for name, zp in spec["probes"].items():
        probe = csx.AddProbe(name, p_type=0)  # line integral of E along x across the column
        probe.AddBox([x[0], 0.0, zp], [x[-1], 0.0, zp])
    lo, hi = spec["interior_z_m"]
    dump = csx.AddDump(SAR_DUMP, dump_type=29, file_type=1, frequency=[f0])
    dump.AddBox([x[0], y[0], lo], [x[-1], y[-1], hi])
    engine.run(fdtd, sim_dir, threads=threads, verbose=1)
    return 0


@dataclass
class PlaneWaveResult:
    """What :func:`solve_plane_wave` measured.

    Attributes
    ----------
    z_m : ndarray, shape (nz,)
        Cell centres along ``z`` of the dumped cells.
    z_edges_m : ndarray, shape (nz + 1,)
        Their edges.
    layer_index : ndarray of int, shape (nz,)
        Layer of each cell (0 = top layer), -1 in air.
    e_total, e_incident : ndarray of complex, shape (nz,)
        ``E_x`` peak phasors (V/m) at the cell centres, mean over the cross-section.
    sar_per_incident_W_m2 : ndarray, shape (nz,)
        Local SAR per unit incident power density (W/kg per W/m^2), 0 in air.
    gamma : complex
        Surface reflection coefficient of E.
    gamma_spread : float
        Largest ``|Gamma_i - Gamma|`` over the air cells used.
    k_air_per_m : float
        Numerical wavenumber in air used for the transfer of Gamma (Yee dispersion relation).
    k_air_measured_per_m : float
        The same, measured from the phase progression of ``E_inc`` (least-squares slope).
    cells, timesteps : int
        Cells of the mesh; timesteps of the stack run.
    runtime_s : float
        Wall time of both runs.
    lateral_spread : float
        Largest ``(max - min) / mean`` of ``|E_x|`` across the cross-section, over all depths (0 for a TEM
        wave between the walls).
    cross_polar_ratio : float
        Largest ``|E_y|, |E_z|`` relative to the largest ``|E_x|`` (0 for the TEM wave).
    tail_ratio : float
        Largest ``|E|`` of the decay probes over the last 10 % of the stack run relative to their peak
        (module notes); ``< 1e-3`` means the field has rung down.
    """

    z_m: np.ndarray
    z_edges_m: np.ndarray
    layer_index: np.ndarray
    e_total: np.ndarray
    e_incident: np.ndarray
    sar_per_incident_W_m2: np.ndarray
    gamma: complex
    gamma_spread: float
    k_air_per_m: float
    k_air_measured_per_m: float
    cells: int
    timesteps: int
    runtime_s: float
    lateral_spread: float
    cross_polar_ratio: float
    tail_ratio: float
    logs: dict = field(default_factory=dict)


def _run_child(spec: dict, work: Path, threads: int, timeout_s: float | None) -> tuple[dict, dict]:
    from ..solver import engine
    from ..solver.run import _raw_dump2arrays, _trim_to_mesh

    work.mkdir(parents=True, exist_ok=True)
    (work / "spec.json").write_text(json.dumps(spec))
    cmd = [sys.executable, "-m", "bodysweep.workflow.reference.planewave_fdtd", str(work / "spec.json"), str(work / "sim"),
           "--threads", str(threads)]
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout_s)
    log = proc.stdout + proc.stderr
    (work / "console.log").write_text(log)
    info = engine.parse_engine_log(log)
    raw = work / "sim" / f"{SAR_DUMP}.h5"
    if proc.returncode != 0 or not info["finished"] or not raw.exists():
        tail = " | ".join([ln for ln in log.strip().splitlines() if ln.strip()][-3:])
        raise RuntimeError(f"plane-wave run in {work} failed (exit code {proc.returncode}): {tail}")
    arrays = _trim_to_mesh(_raw_dump2arrays(raw), spec["lines"])
    from ..solver.ports import read_probe

    tails = []
    for name in spec["probes"]:
        _, v = read_probe(work / "sim" / name)
        n = max(1, v.size // 10)
        tails.append(float(np.max(np.abs(v[-n:])) / np.max(np.abs(v))))
    info["tail_ratio"] = max(tails)
    return arrays, info


def solve_plane_wave(setup: PlaneWaveSetup, work_dir, threads: int = 1,
                     timeout_s: float | None = 600) -> PlaneWaveResult:
    """Run the ``stack`` and ``incident`` runs of ``setup`` in ``work_dir`` and evaluate them.

    Raises
    ------
    RuntimeError
        An engine run failed or left no field dump.
    """
    from bodysweep.workflow.post.sar import local_sar

    work = Path(work_dir).resolve()
    t0 = time.monotonic()
    tot, info_t = _run_child(_child_spec(setup, True), work / "stack", threads, timeout_s)
    inc, info_i = _run_child(_child_spec(setup, False), work / "incident", threads, timeout_s)
    runtime = time.monotonic() - t0
    m = plane_wave_mesh(setup)
    z = tot["z_m"]
    ex_t = tot["E_V_per_m"][0].mean(axis=(0, 1))
    ex_i = inc["E_V_per_m"][0].mean(axis=(0, 1))
    mag = np.abs(tot["E_V_per_m"][0])
    lateral = float(np.max((mag.max(axis=(0, 1)) - mag.min(axis=(0, 1))) / mag.mean(axis=(0, 1))))
    cross = float(np.max(np.abs(tot["E_V_per_m"][1:])) / np.max(mag))
    sar = local_sar(tot["E_V_per_m"], tot["sigma_S_per_m"], tot["density_kg_m3"]).mean(axis=(0, 1))
    tops = m["interfaces_z_m"]
    layer = np.full(z.shape, -1, dtype=int)
    for i in range(len(setup.layers)):
        layer[(z < tops[i]) & (z > tops[i + 1])] = i
    # air cells between the surface and the source, two cells clear of both
    zs = m["z_source_m"]
    air = np.flatnonzero((z > 0) & (z < zs))[2:-2]
    if air.size < 4:
        raise ValueError(f"plane wave: only {air.size} air cells between surface and source; raise air_above_m")
    dz = float(np.mean(np.diff(z[air])))
    dt = timestep_s(setup)
    k = float(2 / dz * np.arcsin(dz / (C0 * dt) * np.sin(np.pi * setup.f_Hz * dt)))
    k_meas = float(np.polyfit(z[air], np.unwrap(np.angle(ex_i[air])), 1)[0])
    g_i = (ex_t[air] - ex_i[air]) / ex_i[air] * np.exp(2j * k * z[air])
    gamma = complex(np.mean(g_i))
    s_inc = float(np.mean(np.abs(ex_i[air]) ** 2)) / (2 * ETA0)
    from ..solver.run import centres2edges

    return PlaneWaveResult(z_m=z, z_edges_m=centres2edges(z, m["lines_z"]), layer_index=layer, e_total=ex_t,
                           e_incident=ex_i,
                           sar_per_incident_W_m2=sar / s_inc, gamma=gamma,
                           gamma_spread=float(np.max(np.abs(g_i - gamma))), k_air_per_m=k,
                           k_air_measured_per_m=k_meas,
                           cells=int(info_t["cells"] or 0), timesteps=int(info_t["timesteps"] or 0),
                           runtime_s=runtime, lateral_spread=lateral, cross_polar_ratio=cross,
                           tail_ratio=max(info_t["tail_ratio"], info_i["tail_ratio"]),
                           logs={"stack": str(work / "stack" / "console.log"),
                                 "incident": str(work / "incident" / "console.log")})


if __name__ == "__main__":
    import argparse

    ap = argparse.ArgumentParser(description="one plane-wave engine run (child process)")
    ap.add_argument("spec")
    ap.add_argument("sim_dir")
    ap.add_argument("--threads", type=int, default=1)
    a = ap.parse_args()
    sys.exit(_child(a.spec, a.sim_dir, a.threads))


def reference_solution(setup: PlaneWaveSetup):
    """The analytic transmission-line solution of the same stack (air above and below), from
    :func:`bodysweep.workflow.reference.layered_planewave.solve_layers`."""
    from bodysweep.workflow.reference.layered_planewave import solve_layers

    return solve_layers(setup.f_Hz, [(L.eps_r, L.sigma_S_per_m, L.thickness_m) for L in setup.layers],
                        below=(1.0, 0.0))


def sar_comparison(setup: PlaneWaveSetup, result: PlaneWaveResult, exclude_cells: int = 1) -> dict:
    """FDTD SAR profile against the analytic one at the same cell centres.

    Parameters
    ----------
    exclude_cells : int
        Cells left out on each side of every interface (the FDTD material averaging there).

    Returns
    -------
    dict
        ``ratio`` (nz,) FDTD / analytic SAR (NaN outside the compared cells); ``max_error`` per layer
        name: largest ``|ratio - 1|``; ``cells`` per layer name: number of compared cells;
        ``analytic`` (nz,) the analytic SAR per unit incident power density (W/kg per W/m^2, 0 in air).
    """
    from bodysweep.workflow.reference.layered_planewave import ETA0 as ETA0_REF, sar_profile

    sol = reference_solution(setup)
    stack = [(L.eps_r, L.sigma_S_per_m, L.thickness_m) for L in setup.layers]
    rho = [L.density_kg_m3 for L in setup.layers]
    z, idx = result.z_m, result.layer_index
    analytic = np.zeros(z.shape)
    t = idx >= 0
    analytic[t] = sar_profile(sol, -z[t], stack, rho) / (0.5 / ETA0_REF)  # unit incident E -> per W/m^2
    ratio = np.full(z.shape, np.nan)
    max_err, cells = {}, {}
    for i, L in enumerate(setup.layers):
        k = np.flatnonzero(idx == i)
        k = k[exclude_cells:k.size - exclude_cells] if exclude_cells else k
        ratio[k] = result.sar_per_incident_W_m2[k] / analytic[k]
        max_err[L.name] = float(np.max(np.abs(ratio[k] - 1))) if k.size else float("nan")
        cells[L.name] = int(k.size)
    return {"ratio": ratio, "max_error": max_err, "cells": cells, "analytic": analytic}
