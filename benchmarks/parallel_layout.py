"""Parallel layout on this machine: two solve jobs on one thread each against one job on two threads.

    .venv/bin/python benchmarks/parallel_layout.py [--repeat 1] [--large-mesh study|standard]

For a small case (first case of the tiny test study, ~30 k cells) and a large one (first 915 MHz case
of the demo study, ~300 k cells; with ``--large-mesh standard`` the same case on the ``standard`` preset's mesh
keys, ~1 M cells), two copies of the case are solved

* side by side, each as its own solve job with ``--threads 1`` (what ``bodysweep run`` does now on 2
  cores: ``threads_per_job`` 1, two jobs at a time), and
* one after the other, each with ``--threads 2``.

Each job runs exactly as the solve rule runs it (``python -m bodysweep.workflow.steps solve ...``).
The number of timesteps differs between runs (openEMS checks its energy end criterion every 4 s of
wall time, openems.cpp RunFDTD), so besides the wall time for the two cases the throughput
``sum(cells x timesteps) / wall`` is printed; the faster layout is the one with the higher throughput.

The machine is shared (2 cores, other jobs running openEMS): the two layouts run back to back in one
run and alternate when repeated; compare within one run only.
"""
from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
TINY = ROOT / "tests" / "pipeline" / "data" / "tiny.yaml"
DEMO = ROOT / "studies" / "demo_forearm_capsule.yaml"
MESH_KEYS = ("cells_per_wavelength", "port_cells", "max_growth_ratio", "min_cells_per_layer")


def case_copy(case: dict, root: Path, name: str) -> Path:
    from bodysweep.workflow import steps

    d = root / name
    d.mkdir(parents=True)
    (d / "case.json").write_text(json.dumps(case))
    steps.build_scene(d)
    return d


def solve_cmd(d: Path, threads: int) -> list[str]:
    return [sys.executable, "-m", "bodysweep.workflow.steps", "solve", str(d), "--port", "1", "--threads", str(threads)]


def status(d: Path) -> dict:
    st = json.loads((d / "excite_1" / "status.json").read_text())
    if st["status"] != "ok":
        raise RuntimeError(f"{d}: {st['reason']}")
    return st


def side_by_side(dirs: list[Path]) -> float:
    t0 = time.perf_counter()
    procs = [subprocess.Popen(solve_cmd(d, 1), stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL) for d in dirs]
    for p in procs:
        p.wait()
    return time.perf_counter() - t0


def one_after_other(dirs: list[Path]) -> float:
    t0 = time.perf_counter()
    for d in dirs:
        subprocess.run(solve_cmd(d, 2), check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - t0


def measure(label: str, case: dict, work: Path, repeat: int) -> dict:
    rows = {"2 jobs x 1 thread": [], "1 job x 2 threads": []}
    for k in range(repeat):
        order = list(rows) if k % 2 == 0 else list(rows)[::-1]
        for layout in order:
            root = work / f"{case['case_id']}_{k}_{layout.replace(' ', '')}"
            dirs = [case_copy(case, root, f"copy{i}") for i in range(2)]
            wall = side_by_side(dirs) if layout.startswith("2 jobs") else one_after_other(dirs)
            sts = [status(d) for d in dirs]
            work_units = sum(s["cells"] * s["timesteps"] for s in sts)
            rows[layout].append({"wall": wall, "MCs": work_units / wall / 1e6, "steps": [s["timesteps"] for s in sts],
                                 "cells": sts[0]["cells"], "threads": [s["threads"] for s in sts]})
    print(f"\n{label}: {rows['2 jobs x 1 thread'][0]['cells']} cells")
    best = {}
    for layout, rs in rows.items():
        for r in rs:
            print(f"  {layout:<18} wall for 2 cases {r['wall']:7.1f} s, timesteps {r['steps']}, threads {r['threads']}, "
                  f"throughput {r['MCs']:6.1f} MCells*steps/s")
        best[layout] = sum(r["MCs"] for r in rs) / len(rs)
    a, b = best["2 jobs x 1 thread"], best["1 job x 2 threads"]
    print(f"  mean throughput: side by side {a:.1f}, one job on 2 threads {b:.1f} -> "
          f"{'2 jobs x 1 thread' if a >= b else '1 job x 2 threads'} faster by {max(a, b) / min(a, b):.2f}x")
    return best


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=1, help="rounds of both layouts (alternating order)")
    ap.add_argument("--large-mesh", choices=("study", "standard"), default="study",
                    help="mesh keys of the large case: the study's own (~300 k cells) or the standard preset's (~1 M)")
    a = ap.parse_args()
    from bodysweep.workflow.pipeline import expand_study
    from bodysweep.workflow.meshing.settings import PRESETS

    print("machine: 2 cores, shared (loaded by other jobs running openEMS); compare within this run")
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        _, _, _, tiny = expand_study(TINY, work / "unused")
        _, _, _, demo = expand_study(DEMO, work / "unused")
        small = {**tiny[0], "solver": {**tiny[0]["solver"], "max_timesteps": 200_000}}
        big = next(d for d in demo if d["frequency_Hz"] > 900e6)
        big = {**big, "solver": {**big["solver"], "max_timesteps": 200_000}}
        if a.large_mesh != "study":
            big["solver"].update({k: getattr(PRESETS[a.large_mesh], k) for k in MESH_KEYS})
        measure(f"small: {small['label']} (tiny study)", small, work, a.repeat)
        measure(f"large: {big['label']} (demo study, {a.large_mesh} mesh keys)", big, work, a.repeat)


if __name__ == "__main__":
    sys.exit(main())
