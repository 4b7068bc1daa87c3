"""1 g / 10 g cube-averaged SAR: bodysweep's averaging against the engine's own, on one real openEMS case.

Case (our own scenario, round numbers): a half-wave-ish thin-wire dipole (50 mm, x-directed, 2 mm gap)
15 mm above a lossy block phantom (eps_r 40, sigma 1 S/m, 1050 kg/m^3, 230 x 230 x 60 mm) at 2.45 GHz,
uniform 2 mm cells, the SAR dump box is the whole interior (about 1.07 M voxels, 0.4 M of them tissue).
Not 1000 kg/m^3: then the 1 g cube is exactly 10 mm = 5 cells, its faces fall exactly on grid lines and
whether a surface voxel lies "entirely inside" a valid cube is a tie decided by rounding (ours with a
tolerance says enclosed, the brute force says face-centred: 68 voxels differing by up to 28 % on the
1 g sub-grid in a run at 1000 kg/m^3).
The solve is kept short: end criterion -30 dB, band_fraction 0.3 (pulse as in workflow/solver/run.py).

Measured side by side in one run:

(a) ``average_sar`` (workflow/post/sar_average.py) for 1 g and 10 g on the local SAR of ``fields_raw.h5``
    (:func:`workflow.finish.sar_per_watt`, per W accepted at port 1), as finish_case does;
(b) the engine's built-in averaged SAR (dump types 21 / 22, ``SAR_Method`` IEEE_62704) of the same case:
    the same child process as :func:`workflow.solver.run.solve_solver_sar` (mode ``solver_sar``), but
    started here with its console output read line by line and time-stamped on arrival. openEMS 0.0.35
    prints no averaging time, only one ``CalcAveragedSAR: Stats`` line at the end of each mass's averaging
    (checked in the log below); the engine's averaging time per mass is therefore the time between the
    arrival of the engine's closing loop summary (``Time for ... iterations``) and the first Stats line
    (1 g), and between the two Stats lines (10 g). Each span also holds the engine's local-SAR pass and the
    HDF5 write of that mass (small next to the averaging). As a cross-check the script also prints the
    extra run's post-loop time minus the plain run's post-loop time (the plain run writes the raw dump).
(c) ``exact_cube_average_bruteforce`` (the literal definition, slow) on small sub-grids around the local
    SAR peak, against ``average_sar`` on the same sub-grids: largest relative difference over all tissue
    voxels and whether the voxel statuses agree.

The machine is a shared 2-core box, loaded by other jobs: absolute times vary, the ratios are measured in
the same run. Engine threads: ``--threads`` (default 1); our averaging is single-process numpy.

    .venv/bin/python benchmarks/sar_averaging_vs_engine.py [--cell-mm 2] [--threads 1]

Measured on 2026-12-02 (shared 2-core machine, loaded by other openEMS jobs, load average ~3; openEMS
0.0.35; ``--threads 2``), full output::

    plain run: 1641804 cells, 1856 timesteps, engine loop 40.9 s, whole solve 48.5 s
    engine averaged-SAR run: exit code 0, engine loop 41.69 s, child wall 184.5 s
    engine log, averaging lines:
       [   55.6 s] SAR_Calculation::CalcAveragedSAR: Stats: Valid=323232 Used=37464 Unused=39504 Air-Voxel=671934
       [  184.3 s] SAR_Calculation::CalcAveragedSAR: Stats: Valid=222600 Used=138096 Unused=39504 Air-Voxel=671934
       loop summary arrived at 46.620657700000265 s; lines naming a time other than the loop's: ['Creation time for operator: 4.69928 s']
    ours 1 g: 4.26 s, peak 16.63 W/kg per W, counts {'valid': 323232, 'enclosed': 37464, 'face': 39504, 'unresolved': 0}
    ours 10 g: 4.22 s, peak 9.327 W/kg per W, counts {'valid': 222600, 'enclosed': 138096, 'face': 39504, 'unresolved': 0}
    brute force 1 g on (9, 10, 13) sub-grid (990 tissue voxels): 8.9 s, statuses equal True, counts {'valid': 210, 'enclosed': 294, 'face': 486, 'unresolved': 0}
    brute force 10 g on (13, 13, 17) sub-grid (2535 tissue voxels): 23.4 s, statuses equal True, counts {'valid': 30, 'enclosed': 1543, 'face': 962, 'unresolved': 0}

    machine: 2 cores, shared with other jobs (loaded); engine threads 2
    dump grid (126, 127, 67) = 1072134 voxels (400200 tissue), 2 mm cells
     mass    voxels  ours (s)  engine (s)  engine/ours  ours vs brute  engine vs ours peak
    --------------------------------------------------------------------------------------
      1 g   1072134      4.26        8.99         2.1x        3.3e-13                +9.0%
     10 g   1072134      4.22      128.71        30.5x        1.2e-11               +14.2%
     both   1072134      8.48      137.70        16.2x
    cross-check: post-loop time of the engine's averaging run 142.8 s minus the plain run's 7.6 s (raw dump, reading, fields_raw.h5) = 135.2 s
    brute force: 1 g on 1170 voxels (9 s), 10 g on 2873 voxels (23 s); statuses equal: True / True
    voxel classes 1 g: engine {'Valid': 323232, 'Used': 37464, 'Unused': 39504}, ours valid/enclosed/face 323232/37464/39504 -> identical
    voxel classes 10 g: engine {'Valid': 222600, 'Used': 138096, 'Unused': 39504}, ours valid/enclosed/face 222600/138096/39504 -> identical
    targets (issue 9), 1 g: ours >= 5x faster than the engine -> NOT met (2.1x); within 1 % of the exact search -> met
    targets (issue 9), 10 g: ours >= 5x faster than the engine -> met (30.5x); within 1 % of the exact search -> met

Reading: the 10 g target (>= 5x) is met by far, the 1 g one is not on this grid (2.1x; 2.3x in an earlier
run): the engine's time grows steeply with the cells per cube (1 g, ~5 cells per side: 9 s; 10 g, ~11: 129 s),
ours stays near 4 s for both, so on finer grids the 1 g ratio should rise too (not measured here). Both give the same voxel classes for both masses; their
peaks differ (+9 % / +14 %) through the face-centred cubes of the surface voxels (see
tests/validation/test_sar_real_case.py). Timesteps vary from run to run (openEMS tests its end criterion
every few seconds of wall time).
"""
from __future__ import annotations

import argparse
import json
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "tests" / "solver"))

F0 = 2.45e9
MASSES = (0.001, 0.01)


def build_case(case_dir: Path, cell: float, threads: int) -> Path:
    """Write the case folder (scene, hand mesh, settings) of the benchmark scene."""
    from solver_scenes import PEC, dipole, uniform_plan, write_case

    from bodysweep.geometry.model import SceneModel
    from bodysweep.geometry.primitives import Box, Material

    tissue = Material("phantom_liquid", eps_r=40.0, sigma_S_per_m=1.0, density_kg_m3=1050.0, is_tissue=True)
    lo_b, hi_b = (-0.115, -0.115, -0.06), (0.115, 0.115, 0.0)
    box = Box("phantom", tissue.name, lo_b, hi_b)
    arms, p1 = dipole("ext", 1, (0.0, 0.0, 0.015), 0.05, 0.002, axis="x")
    model = SceneModel(F0, (PEC, tissue), tuple(arms) + (box,), (p1,), body_bounds=(lo_b, hi_b))
    plan = uniform_plan(model, (-0.125, -0.125, -0.08), (0.125, 0.125, 0.05), cell)
    return write_case(case_dir, model, plan, F0,
                      {"threads": threads, "n_band_points": 21, "end_criterion_dB": -30.0, "band_fraction": 0.3,
                       "max_timesteps": 100_000},
                      {"masses_kg": list(MASSES), "max_air_fraction": 0.1})


def run_engine_sar(case_dir: Path, threads: int, work: Path) -> dict:
    """The engine's averaged-SAR run (child mode ``solver_sar``), console lines time-stamped on arrival."""
    from bodysweep.workflow.solver import run

    work.mkdir(parents=True)
    cmd = [sys.executable, "-m", "bodysweep.workflow.solver.run", "child", str(case_dir), "--port", "1",
           "--threads", str(threads), "--work", str(work), "--mode", "solver_sar"]
    t0 = time.monotonic()
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
                            env={**os.environ, "PYTHONUNBUFFERED": "1"}, text=True, errors="replace")
    stamped = [(time.monotonic() - t0, line.rstrip("\n")) for line in proc.stdout]
    rc = proc.wait()
    wall = time.monotonic() - t0
    text = "\n".join(s for _, s in stamped)
    (case_dir / "excite_1" / "solver_sar.log").write_text(text)
    setup = json.loads((work / "child_setup.json").read_text())
    loop_end = [t for t, s in stamped if re.search(r"Time for \d+ iterations", s)]
    stats = [(t, s) for t, s in stamped if "CalcAveragedSAR: Stats" in s]
    timing_lines = [s for _, s in stamped if re.search(r"(?i)\b(time|took|elapsed)\b", s)
                    and "iterations" not in s]
    dumps = {}
    for m in MASSES:
        src = work / "sim" / f"{run.SOLVER_SAR_NAMES[m]}.h5"
        dumps[m] = run._read_solver_sar_dump(src, setup["lines_m"])["sar"] if src.exists() else None
    return {"rc": rc, "wall_s": wall, "info": run_engine_log(text), "loop_end_s": loop_end[0] if loop_end else None,
            "stats": stats, "timing_lines": timing_lines, "dumps": dumps}


def run_engine_log(text: str) -> dict:
    from bodysweep.workflow.solver.engine import parse_engine_log

    return parse_engine_log(text)


def sub_grid(sar, rho, edges, half_width_m, z_low_m, z_high_m):
    """Cells within ``half_width_m`` (x, y) of the local SAR peak and with centres in (z_low_m, z_high_m)."""
    peak = np.unravel_index(np.argmax(np.where(rho > 0, sar, -1.0)), rho.shape)
    c = [0.5 * (e[1:] + e[:-1]) for e in edges]
    sel = [np.flatnonzero(np.abs(c[0] - c[0][peak[0]]) < half_width_m),
           np.flatnonzero(np.abs(c[1] - c[1][peak[1]]) < half_width_m),
           np.flatnonzero((c[2] > z_low_m) & (c[2] < z_high_m))]
    sl = tuple(slice(s[0], s[-1] + 1) for s in sel)
    return sar[sl], rho[sl], [e[s[0]:s[-1] + 2] for e, s in zip(edges, sel)]


def main(argv=None) -> int:
    from bodysweep.workflow.post import sparams
    from bodysweep.workflow.post.sar_average import average_sar
    from bodysweep.workflow.reference.sar_bruteforce import exact_cube_average_bruteforce
    from bodysweep.workflow.finish import read_excitation, read_raw_fields, sar_per_watt
    from bodysweep.workflow.solver.run import solve_excitation

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cell-mm", type=float, default=2.0, help="uniform cell size (default 2 mm: ~1.06 M voxels)")
    ap.add_argument("--threads", type=int, default=1, help="engine threads (default 1)")
    ap.add_argument("--keep", default=None, help="keep the case folder here")
    a = ap.parse_args(argv)

    tmp = Path(a.keep) if a.keep else Path(tempfile.mkdtemp(prefix="sar_vs_engine_"))
    try:
        case_dir = build_case(tmp / "case", a.cell_mm * 1e-3, a.threads)

        # plain run: the pipeline's solve of port 1 (raw SAR dump -> fields_raw.h5)
        t0 = time.monotonic()
        st = solve_excitation(case_dir, 1, threads=a.threads)
        plain_wall = time.monotonic() - t0
        if st["status"] != "ok":
            print(f"plain run failed: {st['reason']}", file=sys.stderr)
            return 1
        print(f"plain run: {st['cells']} cells, {st['timesteps']} timesteps, engine loop {st['engine_runtime_s']:.1f} s, "
              f"whole solve {plain_wall:.1f} s", flush=True)

        # (b) the engine's own averaging, second run of the same case
        eng = run_engine_sar(case_dir, a.threads, tmp / "engine_run")
        print(f"engine averaged-SAR run: exit code {eng['rc']}, engine loop {eng['info']['engine_runtime_s']} s, "
              f"child wall {eng['wall_s']:.1f} s", flush=True)
        print("engine log, averaging lines:")
        for t, s in eng["stats"]:
            print(f"   [{t:7.1f} s] {s.strip()}")
        print(f"   loop summary arrived at {eng['loop_end_s']} s; lines naming a time other than the loop's: "
              f"{eng['timing_lines'] or 'none'}")
        if eng["loop_end_s"] is None or len(eng["stats"]) < len(MASSES):
            print("the engine did not finish both averaging masses; see the log above", file=sys.stderr)
        eng_t = {}
        marks = [eng["loop_end_s"]] + [t for t, _ in eng["stats"]]
        for i, m in enumerate(MASSES):
            eng_t[m] = marks[i + 1] - marks[i] if i + 1 < len(marks) and marks[i] is not None else float("nan")

        # (a) ours on the raw dump of the plain run
        e1 = read_excitation(case_dir / "excite_1")
        p_acc = float(sparams.accepted_power(e1["V_f0"][0], e1["I_f0"][0]))
        raw = read_raw_fields(case_dir / "excite_1" / "fields_raw.h5")
        local = sar_per_watt(raw, p_acc)["local"]
        rho = raw["density_kg_m3"]
        edges = [raw[f"{x}_edges_m"] for x in "xyz"]
        ours, our_t = {}, {}
        for m in MASSES:
            t0 = time.perf_counter()
            ours[m] = average_sar(local, rho, *edges, m, max_air_fraction=0.1)
            our_t[m] = time.perf_counter() - t0
            print(f"ours {m * 1e3:g} g: {our_t[m]:.2f} s, peak {ours[m].peak:.4g} W/kg per W, "
                  f"counts {ours[m].counts()}", flush=True)
        peak_diff = {}
        for m in MASSES:
            d = eng["dumps"][m]
            peak_diff[m] = (float(np.nanmax(d)) / p_acc - ours[m].peak) / ours[m].peak if d is not None else np.nan

        # (c) brute force on sub-grids at the peak (1 g: 9.8 mm cube, 10 g: 21.2 mm cube at 1050 kg/m^3)
        brute = {}
        for m, hw, zlo in ((0.001, 0.009, -0.021), (0.01, 0.0125, -0.031)):
            s, r, e = sub_grid(local, rho, edges, hw, zlo, 0.005)
            fast = average_sar(s, r, *e, m, max_air_fraction=0.1)
            t0 = time.perf_counter()
            ref = exact_cube_average_bruteforce(s, r, *e, m, max_air_fraction=0.1)
            tb = time.perf_counter() - t0
            t = r > 0
            both = t & np.isfinite(fast.avg) & np.isfinite(ref.avg)
            same = bool(np.array_equal(fast.status, ref.status)
                        and np.array_equal(np.isfinite(fast.avg), np.isfinite(ref.avg)))
            brute[m] = {"voxels": r.size, "tissue": int(t.sum()), "time_s": tb,
                        "max_rel": float(np.max(np.abs(fast.avg[both] / ref.avg[both] - 1.0))),
                        "same_status": same, "counts": fast.counts()}
            print(f"brute force {m * 1e3:g} g on {r.shape} sub-grid ({t.sum()} tissue voxels): {tb:.1f} s, "
                  f"statuses equal {brute[m]['same_status']}, counts {fast.counts()}", flush=True)

        post_plain = plain_wall - st["engine_runtime_s"]
        post_extra = eng["wall_s"] - (eng["info"]["engine_runtime_s"] or np.nan)
        print()
        print(f"machine: {os.cpu_count()} cores, shared with other jobs (loaded); engine threads {a.threads}")
        print(f"dump grid {rho.shape} = {rho.size} voxels ({int((rho > 0).sum())} tissue), {a.cell_mm:g} mm cells")
        hdr = (f"{'mass':>5} {'voxels':>9} {'ours (s)':>9} {'engine (s)':>11} {'engine/ours':>12} "
               f"{'ours vs brute':>14} {'engine vs ours peak':>20}")
        print(hdr)
        print("-" * len(hdr))
        for m in MASSES:
            print(f"{m * 1e3:>3g} g {rho.size:>9d} {our_t[m]:>9.2f} {eng_t[m]:>11.2f} {eng_t[m] / our_t[m]:>11.1f}x "
                  f"{brute[m]['max_rel']:>14.1e} {100 * peak_diff[m]:>+19.1f}%")
        tot_o, tot_e = sum(our_t.values()), sum(eng_t.values())
        print(f"{'both':>5} {rho.size:>9d} {tot_o:>9.2f} {tot_e:>11.2f} {tot_e / tot_o:>11.1f}x")
        print(f"cross-check: post-loop time of the engine's averaging run {post_extra:.1f} s minus the plain run's "
              f"{post_plain:.1f} s (raw dump, reading, fields_raw.h5) = {post_extra - post_plain:.1f} s")
        print(f"brute force: 1 g on {brute[0.001]['voxels']} voxels ({brute[0.001]['time_s']:.0f} s), "
              f"10 g on {brute[0.01]['voxels']} voxels ({brute[0.01]['time_s']:.0f} s); statuses equal: "
              f"{brute[0.001]['same_status']} / {brute[0.01]['same_status']}")
        for (t, line), m in zip(eng["stats"], MASSES):  # engine: Valid / Used / Unused = ours: valid / enclosed / face
            got = {k: int(v) for k, v in re.findall(r"(Valid|Used|Unused)=(\d+)", line)}
            c = ours[m].counts()
            same = got == {"Valid": c["valid"], "Used": c["enclosed"], "Unused": c["face"]}
            print(f"voxel classes {m * 1e3:g} g: engine {got}, ours valid/enclosed/face "
                  f"{c['valid']}/{c['enclosed']}/{c['face']} -> {'identical' if same else 'DIFFERENT'}")
        for m in MASSES:
            print(f"targets (issue 9), {m * 1e3:g} g: ours >= 5x faster than the engine -> "
                  f"{'met' if eng_t[m] / our_t[m] >= 5 else 'NOT met'} ({eng_t[m] / our_t[m]:.1f}x); "
                  f"within 1 % of the exact search -> {'met' if brute[m]['max_rel'] <= 0.01 else 'NOT met'}")
    finally:
        if not a.keep:
            shutil.rmtree(tmp, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
