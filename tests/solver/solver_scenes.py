"""Hand-built scenes and a plain uniform mesh for the solver tests.

Until the scene builder and the automatic mesher are used here, the tests build their
SceneModels from geometry.primitives and mesh them with :func:`uniform_plan`: uniform cells,
fixed lines at every port end, wire end and box face, and ``pml_cells`` extra cells outside the
interior for the absorbing boundary. Material values are plain round numbers of our own (not
references): the checks compare the solver against physics, not against these inputs.
"""
from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from bodysweep.geometry.model import SceneModel
from bodysweep.geometry.primitives import Box, Material, Port, Wire

PEC = Material("wire_metal", kind="pec")


@dataclass(frozen=True)
class UniformPlan:
    lines_x: np.ndarray
    lines_y: np.ndarray
    lines_z: np.ndarray
    interior_bounds: tuple

    def to_dict(self) -> dict:
        return {"lines_x": self.lines_x.tolist(), "lines_y": self.lines_y.tolist(),
                "lines_z": self.lines_z.tolist(), "interior_bounds": [list(self.interior_bounds[0]),
                                                                      list(self.interior_bounds[1])]}


def _segment(a, b, cell):
    n = max(1, int(np.ceil((b - a) / cell - 1e-9)))
    return np.linspace(a, b, n + 1)


def _axis_lines(lo, hi, cell, fixed, n_outside, fine=None):
    if fine is None:
        base = _segment(lo, hi, cell)
    else:
        f_lo, f_hi, f_cell = fine
        base = np.unique(np.r_[_segment(lo, f_lo, cell), _segment(f_lo, f_hi, f_cell), _segment(f_hi, hi, cell)])
        fixed = list(fixed) + [f_lo, f_hi]
    merge = 0.3 * (min(cell, fine[2]) if fine is not None else cell)
    fixed = sorted(set(np.round(fixed, 12)))
    keep = [v for v in base if all(abs(v - f) > merge for f in fixed)]
    lines = np.unique(np.r_[keep, fixed])
    lines = lines[(lines >= lo - 1e-12) & (lines <= hi + 1e-12)]
    lines = np.unique(np.r_[lo, lines, hi])
    lines = np.r_[lo - cell * np.arange(n_outside, 0, -1), lines, hi + cell * np.arange(1, n_outside + 1)]
    return np.round(lines, 12)


def uniform_plan(model: SceneModel, lo, hi, cell, pml_cells=8, fine=None) -> UniformPlan:
    """Uniform mesh of the interior box [lo, hi] plus fixed lines from the geometry.

    ``fine = (fine_lo, fine_hi, fine_cell)`` meshes that box (inside [lo, hi]) with ``fine_cell``.
    """
    fixed = [[], [], []]
    for p in model.ports:
        for i in range(3):
            fixed[i] += [p.start[i], p.stop[i]]
    for prim in model.primitives:
        if isinstance(prim, Wire):
            for pt in prim.points:
                for i in range(3):
                    fixed[i].append(pt[i])
        elif isinstance(prim, Box):
            blo, bhi = prim.bounds()
            for i in range(3):
                fixed[i] += [v for v in (blo[i], bhi[i]) if lo[i] < v < hi[i]]
    ls = [_axis_lines(lo[i], hi[i], cell, fixed[i], pml_cells,
                      None if fine is None else (fine[0][i], fine[1][i], fine[2])) for i in range(3)]
    return UniformPlan(ls[0], ls[1], ls[2], (tuple(lo), tuple(hi)))


def dipole(name, number, centre, length, gap, axis="z"):
    """Straight thin-wire dipole (two PEC arms, lumped port across the centre gap)."""
    i = "xyz".index(axis)
    c = np.array(centre, float)

    def at(s):
        p = c.copy()
        p[i] += s
        return tuple(p)

    arms = (Wire(f"{name}_arm_lo", PEC.name, (at(-length / 2), at(-gap / 2))),
            Wire(f"{name}_arm_hi", PEC.name, (at(gap / 2), at(length / 2))))
    port = Port(f"{name}_feed", number, at(-gap / 2), at(gap / 2), axis, 50.0)
    return arms, port


def write_case(case_dir: Path, model: SceneModel, plan: UniformPlan, frequency_Hz: float, solver: dict,
               sar: dict | None = None) -> Path:
    """A case folder as the pipeline would leave it, with the scene already built and a hand mesh."""
    case_dir = Path(case_dir)
    case_dir.mkdir(parents=True, exist_ok=True)
    case = {"case_id": case_dir.name, "label": "test", "study": "tests", "parameters": {},
            "frequency_Hz": frequency_Hz, "scene": {}, "solver": solver,
            "sar": sar or {"masses_kg": [0.001, 0.01]}, "versions": {}}
    (case_dir / "case.json").write_text(json.dumps(case))
    (case_dir / "scene.json").write_text(json.dumps(model.to_dict()))
    (case_dir / "mesh_plan.json").write_text(json.dumps(plan.to_dict()))
    return case_dir


def lossy_slab_scene(f0, with_implant=False, sigma=1.0):
    """External dipole 15 mm above a lossy box (our own round numbers); optional implant dipole inside."""
    tissue = Material("phantom_liquid", eps_r=40.0, sigma_S_per_m=sigma, density_kg_m3=1000.0, is_tissue=True)
    box = Box("phantom", tissue.name, (-0.03, -0.03, -0.03), (0.03, 0.03, 0.0))
    arms, p1 = dipole("ext", 1, (0.0, 0.0, 0.015), 0.05, 0.002, axis="x")
    prims, ports = list(arms) + [box], [p1]
    if with_implant:
        arms2, p2 = dipole("imp", 2, (0.0, 0.0, -0.012), 0.016, 0.002, axis="x")
        prims += list(arms2)
        ports.append(p2)
    return SceneModel(f0, (PEC, tissue), tuple(prims), tuple(ports),
                      body_bounds=((-0.03, -0.03, -0.03), (0.03, 0.03, 0.0)))


def poynting_flux_run(model, plan, f0, flux_lo, flux_hi, sim_dir, band_fraction=0.5, end_dB=-50.0):
    """Run port 1 directly with the adapter's pieces plus E/H frequency-domain dumps on the six faces
    of the box [flux_lo, flux_hi]; return accepted power, outward Poynting flux and the raw dump arrays.

    Meant to be called in a spawned child process (the engine changes the working directory).
    """
    from bodysweep.workflow.post.sparams import accepted_power
    from bodysweep.workflow.solver import build, engine, ports, run

    import h5py

    f_c = run.excitation_pulse(f0, band_fraction)
    fdtd, csx = engine.new_simulation(*f_c, 10 ** (end_dB / 10), 100000, "pml", 8)
    csx, _ = build.build_csx(model, plan, None, csx)
    pr = ports.add_lumped_port(csx, model.port(1), excite=True)
    dump = csx.AddDump(run.SAR_DUMP_NAME, dump_type=29, file_type=1, frequency=[f0])
    dump.AddBox(list(plan.interior_bounds[0]), list(plan.interior_bounds[1]))
    faces = []
    for i in range(3):
        for side, val in ((-1, flux_lo[i]), (1, flux_hi[i])):
            lo, hi = list(flux_lo), list(flux_hi)
            lo[i] = hi[i] = val
            name = f"face{i}{'m' if side < 0 else 'p'}"
            for kind, dt in (("E", 10), ("H", 11)):
                d = csx.AddDump(f"{name}_{kind}", dump_type=dt, file_type=1, frequency=[f0], dump_mode=1)
                d.AddBox(lo, hi)
            faces.append((name, i, side))
    engine.run(fdtd, sim_dir, threads=1, verbose=1)
    sig = ports.probe_signals(Path(sim_dir), pr)
    V, I = ports.signals2phasors(sig["t_voltage_s"], sig["voltage_V"], sig["t_current_s"], sig["current_A"], [f0])
    p_acc = float(accepted_power(V, I)[0])
    flux = 0.0
    for name, i, side in faces:
        with h5py.File(Path(sim_dir) / f"{name}_E.h5") as he, h5py.File(Path(sim_dir) / f"{name}_H.h5") as hh:
            E = he["FieldData/FD/f0_real"][()] + 1j * he["FieldData/FD/f0_imag"][()]
            H = hh["FieldData/FD/f0_real"][()] + 1j * hh["FieldData/FD/f0_imag"][()]
            mesh = [he[f"Mesh/{a}"][()].astype(float) for a in "xyz"]
        # arrays are (3, nz, ny, nx); S_n = 0.5 Re{(E x H*)_n}
        j, k = (i + 1) % 3, (i + 2) % 3
        Sn = 0.5 * np.real(E[j] * np.conj(H[k]) - E[k] * np.conj(H[j]))  # (nz, ny, nx)
        Sn = np.transpose(Sn, (2, 1, 0)).squeeze(axis=i)  # plane in the remaining two axes (j<k order)
        a, b = sorted((j, k))
        flux += side * np.trapezoid(np.trapezoid(Sn, mesh[b], axis=1), mesh[a], axis=0)
    raw = run._raw_dump2arrays(Path(sim_dir) / f"{run.SAR_DUMP_NAME}.h5")
    e2 = np.sum(np.abs(raw["E_V_per_m"]) ** 2, axis=0)
    absorbed = float(np.sum(0.5 * raw["sigma_S_per_m"] * e2 * raw["volume_m3"]))
    return {"accepted_W": p_acc, "radiated_W": float(flux), "absorbed_W": absorbed}
