"""Mirror symmetry: full domain against half domain with a symmetry wall, side by side in one run.

Run: ``.venv/bin/python benchmarks/mirror_symmetry.py`` (about a minute on 2 cores).

Case: the tiny test study (``tests/pipeline/data/tiny.yaml``, depth 6 mm): a layered slab, an
external strip dipole and an implant thin-wire dipole, both along x at (0, 0). The scene is symmetric
about two planes through the ports:

* ``y = 0`` contains both dipole axes: the matching wall is magnetic (PMC, tangential H = 0);
* ``x = 0`` cuts both feed gaps in the middle: the matching wall is electric (PEC, tangential E = 0;
  image theory, Balanis, Advanced Engineering Electromagnetics, 2nd ed., §7.4).

Part 1 (engine pieces called directly) tries the PMC on ``y = 0``; part 2 runs the pipeline's own
solve and finish steps with ``solver.mirror_plane: x`` (PEC on ``x = 0``, see
:mod:`bodysweep.workflow.solver.mirror`) against the plain full run.

Findings (printed by this script on the 2-core machine, openEMS 0.0.35, 2026-12-02)
-------------------------------------------------------------------------------------
Part 1, PMC on y = 0 (y lines ..., -1, 0, 1, ... mm; half domain from the line y = 0)::

    full  port 1 V = 3.47e-12+3.37e-12j  I = -4.39e-15+4.55e-15j   port 2 V = -3.6e-16-3.2e-16j
    half  port 1 V = 3.94e-12+4.34e-12j  I = 0                     port 2 V = 0, I = 0

The half run is dead: openEMS zeroes the tangential H of the *first dual plane* for a lower PMC face
(``Operator::ApplyMagneticBC``, position 0 of every H component), so its magnetic wall sits half a cell
inside the domain, and the E edges on the boundary line get no curl update at all. A thin wire or
lumped port lying in the face is cut off (port 2 reads exactly 0; port 1 only sees its own source).
Moving the face half a cell out (first cell straddling y = 0) does not help either: then nothing can
lie *on* the plane, and the implant's thin wire at y = 0 would have to move by half a cell.

Part 2, PEC on x = 0 through the feeds (setting ``mirror_plane: x``; engine cell counts)::

    (a1) study settings (Mur, -30 dB): full 31500 cells, half 16100
         S11 -0.0037 dB: diff -1.3e-06 dB, +2e-04 deg; S21 -74.04 dB: diff -2.6e-04 dB, -3e-05 deg
         accepted power +0.04 %; peak 1 g SAR per W 101.26 -> 101.21 (-0.04 %), 10 g -0.04 %
         (an earlier run under heavier load, full stopped at 12500 steps: SAR +0.49 %)
    (a2) PML 8 cells, -60 dB: full 110044 cells, half 55924
         S11 diff -4e-05 dB; S21 diff +0.015 dB, +0.05 deg; accepted power +0.95 %; SAR 1 g -0.96 %, 10 g -0.92 %
    (b)  fixed 30000 steps: engine time 6.22 s -> 2.95 s (ratio 0.475), wall time ratio 0.507, cells ratio 0.511

The SAR differences follow the accepted-power differences one to one: this tiny antenna is strongly
reactive (|S11| = 0.9996, 1 - |S11|^2 = 9e-4), so its accepted power is a small difference that moves
with where the run stops, while S11 itself agrees to 1e-4 dB. With the Mur boundary the half run's
energy tail decays more slowly (-46.8 dB after 33150 steps against -52.7 dB after 15450 in the full
run; with a PML both decay fast): it meets the study's -30 dB, but a stricter criterion costs steps.

Side finding: openEMS evaluates its end criterion only when it prints progress, every 4 s of wall
time; a run shorter than that always goes to ``max_timesteps`` (and is then reported as not decayed).
"""
from __future__ import annotations

import json
import multiprocessing as mp
import shutil
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path
from types import SimpleNamespace

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
TINY = ROOT / "tests" / "pipeline" / "data" / "tiny.yaml"


def _tiny_case():
    from bodysweep.workflow.study import expand, load_study

    return expand(load_study(TINY))[0]


# ------------------------------------------------------------------------------------------------
# part 1: magnetic wall on y = 0 (engine pieces, one spawned child per run)
def _pmc_child(model_d, lines, interior, walls, z_factor, sim_dir, q):
    from bodysweep.geometry.model import SceneModel
    from bodysweep.workflow.solver import build, engine, ports, run

    model = SceneModel.from_dict(model_d)
    plan = SimpleNamespace(lines_x=np.asarray(lines[0]), lines_y=np.asarray(lines[1]),
                           lines_z=np.asarray(lines[2]), interior_bounds=interior)
    f0 = model.frequency_Hz
    fdtd, csx = engine.new_simulation(*run.excitation_pulse(f0, 0.3), 1e-3, 20000, boundaries=walls)
    csx, report = build.build_csx(model, plan, None, csx)
    probes = [ports.add_lumped_port(csx, replace(p, impedance_ohm=z_factor * p.impedance_ohm), excite=p.number == 1)
              for p in model.ports]
    t0 = time.perf_counter()
    engine.run(fdtd, sim_dir, threads=1, verbose=0)
    out = {"cells": report.cells, "runtime_s": time.perf_counter() - t0, "ports": []}
    for pr in probes:
        sig = ports.probe_signals(Path(sim_dir), pr)
        V, I = ports.signals2phasors(sig["t_voltage_s"], sig["voltage_V"], sig["t_current_s"], sig["current_A"], [f0])
        out["ports"].append((pr.number, complex(V[0]), complex(I[0])))
    q.put(out)


def _pmc_run(model, lines, interior, walls, z_factor, sim_dir):
    ctx = mp.get_context("spawn")
    q = ctx.Queue()
    p = ctx.Process(target=_pmc_child, args=(model.to_dict(), [np.asarray(v).tolist() for v in lines], interior,
                                              walls, z_factor, str(sim_dir), q))
    p.start()
    out = q.get()
    p.join()
    return out


def part1_pmc(work: Path) -> None:
    from bodysweep.geometry.scene import Scene
    from bodysweep.workflow.solver import engine
    from bodysweep.workflow.meshing.mesh import auto_mesh
    from bodysweep.workflow.meshing.settings import settings_from_dict

    case = _tiny_case()
    model = Scene.from_dict(case.scene).build(case.frequency_Hz)
    s = settings_from_dict(case.solver)
    plan = auto_mesh(model, s)
    ly = plan.lines_y
    assert np.any(ly == 0.0), "the tiny mesh has a line at y = 0 (thin wire and port 2 lie there)"
    lo, hi = plan.interior_bounds
    walls = engine.boundary_conditions(s.boundary, s.pml_cells)
    full = _pmc_run(model, (plan.lines_x, ly, plan.lines_z), (lo, hi), walls, 1.0, work / "pmc_full")
    half_walls = list(walls)
    half_walls[2] = "PMC"
    half = _pmc_run(model, (plan.lines_x, ly[ly >= 0.0], plan.lines_z), ((lo[0], 0.0, lo[2]), hi), half_walls, 2.0,
                    work / "pmc_half")
    print("Part 1: magnetic wall (PMC) on y = 0, half domain y >= 0, ports at 2 x 50 ohm")
    for name, r in (("full", full), ("half", half)):
        print(f"  {name}: {r['cells']:6d} cells  " + "  ".join(
            f"port {n}: V = {v:.3g}  I = {i:.3g}" for n, v, i in r["ports"]))
    dead = [n for n, v, i in half["ports"] if i == 0]
    print(f"  ports with exactly zero current in the half run: {dead or 'none'}"
          " (openEMS's PMC sits on the first dual plane; E edges on the face are not updated)\n")


# ------------------------------------------------------------------------------------------------
# part 2: electric wall on x = 0 through the feeds (the pipeline's mirror_plane setting)
def _write_case(work: Path, name: str, solver_extra: dict) -> Path:
    d = work / name
    shutil.rmtree(d, ignore_errors=True)
    d.mkdir(parents=True)
    c = _tiny_case().to_dict()
    c["solver"] = {**c["solver"], **solver_extra}
    (d / "case.json").write_text(json.dumps(c))
    return d


def _db(z) -> float:
    return 20 * np.log10(abs(z))


def part2_pec(work: Path) -> None:
    from bodysweep.workflow.finish import finish_case
    from bodysweep.workflow.solver.run import solve_excitation

    print("Part 2: electric wall (PEC) on x = 0 through both feed gaps, half domain x >= 0 (mirror_plane: x)")
    # (a) accuracy: both runs to their end criterion, with the study's Mur boundary and with a PML
    configs = (("(a1) study settings: Mur boundary, end criterion -30 dB", {"max_timesteps": 60000}),
               ("(a2) PML boundary (8 cells), end criterion -60 dB",
                {"max_timesteps": 60000, "boundary": "pml", "end_criterion_dB": -60.0}))
    for title, cfg in configs:
        res = {}
        for name, extra in (("full", {}), ("half", {"mirror_plane": "x"})):
            d = _write_case(work, f"acc_{name}", {**cfg, **extra})
            st = solve_excitation(d, 1, threads=1)
            m = finish_case(d)
            if st["status"] != "ok" or m["status"] != "ok":
                raise SystemExit(f"{title} {name}: {st['reason'] or m['reason']}")
            energy = [ln.split("||")[-1].strip() for ln in (d / "excite_1" / "solver.log").read_text().splitlines()
                      if "Energy" in ln]
            res[name] = (st, m, energy[-1] if energy else "?")
        (sf, mf, ef), (sh, mh, eh) = res["full"], res["half"]
        print(f"  {title}:")
        print(f"    full {sf['cells']} cells, {sf['timesteps']} steps, last energy check {ef}; "
              f"half {sh['cells']} cells, {sh['timesteps']} steps, {eh} (engine cell counts)")
        for key in ("S11", "S21"):
            a, b = complex(*mf[key]), complex(*mh[key])
            print(f"    {key}: full {_db(a):9.4f} dB {np.degrees(np.angle(a)):8.3f} deg   half {_db(b):9.4f} dB "
                  f"{np.degrees(np.angle(b)):8.3f} deg   diff {_db(b) - _db(a):+.2e} dB "
                  f"{np.degrees(np.angle(b / a)):+.2e} deg")
        pa, pb = mf["accepted_power_port1_W"], mh["accepted_power_port1_W"]
        print(f"    accepted power (same source): full {pa:.4e} W, half x 2 {pb:.4e} W ({pb / pa - 1:+.3%})")
        for rf, rh in zip(mf["sar"], mh["sar"]):
            a, b = rf["peak_W_per_kg_per_W"], rh["peak_W_per_kg_per_W"]
            print(f"    peak {rf['mass_kg'] * 1e3:g} g SAR per W: full {a:.4f}, half {b:.4f} W/kg ({b / a - 1:+.3%})")
    # (b) cost: the same 30000 timesteps in both (end criterion -120 dB is never met; only timing is read)
    print("  (b) fixed 30000 timesteps (end criterion out of reach), one engine thread:")
    print(f"    {'':5s} {'cells':>7s} {'steps':>7s} {'engine s':>9s} {'wall s':>7s} {'MC/s':>7s}")
    tim = {}
    for name, extra in (("full", {}), ("half", {"mirror_plane": "x"})):
        d = _write_case(work, f"time_{name}", {"max_timesteps": 30000, "end_criterion_dB": -120.0, **extra})
        st = solve_excitation(d, 1, threads=1)
        if st.get("engine_runtime_s") is None:
            raise SystemExit(f"timing run {name}: {st['reason']}")
        tim[name] = st
        print(f"    {name:5s} {st['cells']:7d} {st['timesteps']:7d} {st['engine_runtime_s']:9.2f} {st['runtime_s']:7.2f} "
              f"{st['speed_MC_per_s'] or float('nan'):7.1f}")
    f, h = tim["full"], tim["half"]
    print(f"    ratio half/full: cells {h['cells'] / f['cells']:.3f}, engine time {h['engine_runtime_s'] / f['engine_runtime_s']:.3f}, "
          f"wall time {h['runtime_s'] / f['runtime_s']:.3f}")


def main() -> int:
    with tempfile.TemporaryDirectory(prefix="bodysweep_mirror_") as tmp:
        work = Path(tmp)
        part1_pmc(work)
        part2_pec(work)
    return 0


if __name__ == "__main__":
    sys.exit(main())
