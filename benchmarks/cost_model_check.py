"""Cost model check: estimated vs measured cells, timesteps, peak memory and CPU time on three real cases.

    .venv/bin/python benchmarks/cost_model_check.py [--sizes small medium large] [--boundary mur|pml]

The cases are the tiny pipeline test study (layered slab, external dipole, implant dipole in a capsule,
915 MHz) with three mesh densities, about 30 000, 100 000 and 260 000 engine cells. Each case is
expanded through the study layer, estimated with ``workflow.meshing.cost.estimate`` on its automatic
mesh (what ``bodysweep plan`` shows) and then solved for port 1 with one engine thread, each in a fresh
process whose child-process resource usage gives the engine's peak resident memory and CPU time.

Printed per case: estimated and actual engine cells, timestep, timesteps, peak memory, CPU seconds
(the estimate is the time-stepping loop: cells x timesteps / calibrated rate; compared with the
engine's own loop time from its log and with the whole engine child's CPU time including set-up) and
the % error of each, plus the measured throughput in MCells/s against the calibrated rate, per second
of the engine loop (wall clock, as the calibration) and per CPU second of the engine child. The
machine is shared: wall-clock throughput varies with the load of other jobs.

Measured 2026-12-02 (2 shared cores, load average 2-6, openEMS 0.0.35, one thread), % error of the
estimate, small / medium / large (31 500 / 96 492 / 261 630 cells, Mur, -30 dB):

    quantity              before (160 MB + 102 B/cell,       after (90 MB + 165 B/cell; Gaussian
                          pulse + 3 transits per 10 dB)      decay, ring-down, 4 s test interval)
    timestep              -5.4 / -0.2 / -1.5                 -5.4 / -0.2 / -1.5 (unchanged)
    timesteps             -22.9 / +69.8 / +182.3             -16.5 / +37.7 / +3.7
    peak memory           +92.8 / +82.1 / +51.3              +12.1 / +13.2 / +7.9
    CPU s, engine loop    -30.0 / +183.0 / +308.2            -0.5 / +57.0 / -19.5
    CPU s, whole child    -5.7 / +183.6 / +295.4             +28.8 / +108.0 / +11.1
    actual timesteps      8700 / 5220 / 5074                 11400 / 3600 / 5676
    actual engine rate    68 / 125 / 109 MC/s per loop s     89 / 86 / 58 MC/s per loop s

The small and medium cases end at openEMS' first energy test (4 s of wall time): their step count is
the machine's speed of the moment times 4 s, which the model can only know through the calibrated
rate (75 MC/s); the medium case's physics ends (about 3 400 steps) near that first test, so it stops
after one or two tests depending on the load. Memory was refit on these and six more runs (512 k and
1.13 M cells Mur, three to 1.79 M cells PML): +6 ... +15 % over every measured peak (the table in
tests/solver/test_cost.py).

``--boundary pml`` (110 044 / 242 844 / 518 446 cells, 8-cell PML), after: timesteps +13.9 / +0.5 / +16.5,
peak memory +15.2 / +11.7 / +6.0, CPU s engine loop +12.2 / -19.9 / -1.0, whole child +48.2 / +22.0 /
+41.3 % (actual 3050 / 3840 / 4816 steps); the former model gave 11 904 / 15 046 / 23 818 steps
(+284 / +274 / +404 %) and 179 / 200 / 239 MB (+74 / +50 / +21 %) for the same cases.
"""
from __future__ import annotations

import argparse
import copy
import json
import multiprocessing as mp
import re
import sys
import tempfile
import time
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parent.parent
TINY = ROOT / "tests" / "pipeline" / "data" / "tiny.yaml"

#: name -> solver overrides (mesh density) of the tiny study
SIZES = {
    "small": {"cells_per_wavelength": 6, "air_margin_wavelengths": 0.1, "port_cells": 1, "max_growth_ratio": 2.0},
    "medium": {"cells_per_wavelength": 10, "air_margin_wavelengths": 0.15, "port_cells": 2, "max_growth_ratio": 1.5},
    "large": {"cells_per_wavelength": 12, "air_margin_wavelengths": 0.2, "port_cells": 3, "max_growth_ratio": 1.4},
}


def case_dict(overrides: dict, work: Path, boundary: str | None = None) -> dict:
    """The resolved case (as ``case.json`` holds it) of the tiny study at one depth with ``overrides``."""
    from bodysweep.workflow.pipeline import expand_study

    d = yaml.safe_load(TINY.read_text())
    d["study"] = "cost_model_check"
    d["sweep"]["blocks"] = [{"grid": {"depth": [6]}}]
    d["solver"].update(overrides, max_timesteps=200_000, threads=1)
    if boundary:
        d["solver"]["boundary"] = boundary
    p = work / "study.yaml"
    p.write_text(yaml.safe_dump(d, sort_keys=False))
    _, _, _, dicts = expand_study(p, work / "results")
    return dicts[0]


def _solve_measured(case_dir: str) -> dict:
    """Solve port 1 in this (fresh) process; the engine child's peak RSS and CPU time from rusage."""
    import resource

    from bodysweep.workflow.solver.run import solve_excitation

    t0 = time.perf_counter()
    st = solve_excitation(case_dir, 1, threads=1)
    wall = time.perf_counter() - t0
    ru = resource.getrusage(resource.RUSAGE_CHILDREN)
    log = (Path(case_dir) / "excite_1" / "solver.log").read_text(errors="replace")
    m = re.search(r"Timestep \(s\)\s*:\s*([0-9.eE+-]+)", log)
    return {**st, "wall_s": wall, "max_rss_B": ru.ru_maxrss * 1024.0, "child_cpu_s": ru.ru_utime + ru.ru_stime,
            "timestep_s": float(m.group(1)) if m else float("nan")}


def _err(est: float, act: float) -> str:
    if not (act and act == act and est == est):
        return "    -"
    return f"{100.0 * (est - act) / act:+6.1f} %"


def main(argv=None) -> int:
    from bodysweep.workflow.estimate import case_estimate
    from bodysweep.workflow.meshing.cost import CALIBRATED_CELLS_PER_S

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", nargs="+", default=list(SIZES), choices=list(SIZES))
    ap.add_argument("--boundary", choices=["mur", "pml"], default=None,
                    help="absorbing boundary (default: the tiny study's, Mur)")
    a = ap.parse_args(argv)
    ctx = mp.get_context("spawn")
    rows = []
    with tempfile.TemporaryDirectory(prefix="cost_check_") as tmp:
        for name in a.sizes:
            work = Path(tmp) / name
            work.mkdir()
            case = case_dict(SIZES[name], work, a.boundary)
            est = case_estimate(case).as_row()
            case_dir = work / "case"
            case_dir.mkdir()
            (case_dir / "case.json").write_text(json.dumps(case))
            with ctx.Pool(1) as pool:  # a fresh process per case: rusage of its children is this case's engine
                act = pool.apply(_solve_measured, (str(case_dir),))
            if act["status"] != "ok":
                print(f"{name}: solve failed: {act['reason']}", file=sys.stderr)
                return 1
            rows.append((name, est, act))
            mcs = act["cells"] * act["timesteps"] / act["engine_runtime_s"] / 1e6
            print(f"{name:>6}: {act['cells']} cells, {act['timesteps']} timesteps, engine loop "
                  f"{act['engine_runtime_s']:.1f} s ({mcs:.1f} MC/s), whole solve {act['wall_s']:.1f} s", flush=True)

    print()
    print(f"calibrated rate in cost.py: {CALIBRATED_CELLS_PER_S / 1e6:.0f} MC/s (one thread)")
    hdr = f"{'case':>6} {'quantity':<22} {'estimated':>12} {'actual':>12} {'error':>9}"
    print(hdr)
    print("-" * len(hdr))
    for name, est, act in rows:
        loop_s = act["engine_runtime_s"]
        items = [("engine cells", est["cells"], act["cells"], "{:.0f}"),
                 ("timestep (ps)", est["timestep_s"] * 1e12, act["timestep_s"] * 1e12, "{:.4f}"),
                 ("timesteps", est["timesteps"], act["timesteps"], "{:.0f}"),
                 ("peak memory (MB)", est["memory_B"] / 1e6, act["max_rss_B"] / 1e6, "{:.0f}"),
                 ("CPU s, engine loop", est["cpu_s"], loop_s, "{:.1f}"),
                 ("CPU s, whole child", est["cpu_s"], act["child_cpu_s"], "{:.1f}")]
        for q, e, v, fmt in items:
            print(f"{name:>6} {q:<22} {fmt.format(e):>12} {fmt.format(v):>12} {_err(e, v):>9}")
        for q, sec in (("MC/s per loop second", loop_s), ("MC/s per child CPU s", act["child_cpu_s"])):
            mcs = act["cells"] * act["timesteps"] / sec / 1e6
            print(f"{name:>6} {q:<22} {CALIBRATED_CELLS_PER_S / 1e6:>12.1f} {mcs:>12.1f} "
                  f"{_err(CALIBRATED_CELLS_PER_S / 1e6, mcs):>9}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
