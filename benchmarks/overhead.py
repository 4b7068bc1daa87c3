"""Pipeline overhead against solver time, per stage, on real cases (each one solved by openEMS).

    .venv/bin/python benchmarks/overhead.py [--demo N] [--threads 1]

Cases: the two cases of the tiny test study (layered slab, ~30 k cells) and the first ``N`` (default 1)
915 MHz cases of the demo study (layered cylinder, ~300 k cells). Each stage runs exactly as the
Snakemake rules run it (``python -m bodysweep.workflow.steps <verb> ...``, a fresh interpreter per job),
in a temporary results folder, one job at a time. Printed per case and stage: wall seconds and percent of
the solver's own time, where *solver* is what the engine reports in its log: operator creation
("Creation time for operator") plus timestepping ("Time for N iterations"). Everything else in the solve
job (interpreter, imports, mesh, CSXCAD build, writing the simulation files, reading probes and the SAR
dump, writing ``fields_raw.h5``) counts as overhead, as do the scene, finish and collect jobs (collect
once per study, shared among its cases). Then the in-process time of the pieces (no interpreter start)
shows where the overhead goes. The per-job part (interpreters, imports, preview, files) gives the
solver time above which it falls below the 3 % target; ``finish_case`` (mostly the 1 g / 10 g SAR
averaging) grows with the tissue cells and is shown as a fraction of solver time on its own.

The machine is shared (2 cores, other jobs running): compare the figures within one run only.
"""
from __future__ import annotations

import argparse
import json
import re
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
TINY = ROOT / "tests" / "pipeline" / "data" / "tiny.yaml"
DEMO = ROOT / "studies" / "demo_forearm_capsule.yaml"
TARGET = 0.03  # issue 9: overhead at most 3 % of solver wall time
PER_JOB_TARGET_S = 1.0  # issue 17: fixed overhead per case (interpreters, imports, preview, files) at most 1 s

_RE_OP = re.compile(r"Creation time for operator:\s*([0-9.eE+-]+)\s*s")
_RE_TS = re.compile(r"Time for\s+(\d+)\s+iterations with\s+[0-9.eE+]+\s+cells\s*:\s*([0-9.eE+]+)\s*sec")


def step(*args: str) -> float:
    """Wall seconds of one pipeline step run as its rule runs it."""
    t0 = time.perf_counter()
    p = subprocess.run([sys.executable, "-m", "bodysweep.workflow.steps", *args], capture_output=True, text=True)
    dt = time.perf_counter() - t0
    if p.returncode != 0 or '"status": "failed"' in p.stdout:
        raise RuntimeError(f"step {args[0]} failed: {p.stdout[-500:]} {p.stderr[-1500:]}")
    return dt


def engine_times(log: str) -> tuple[float, float, int]:
    """``(operator creation s, timestepping s, timesteps)`` from an openEMS console log."""
    op, ts = _RE_OP.search(log), _RE_TS.search(log)
    if not (op and ts):
        raise RuntimeError("engine log lacks the operator or timestepping time")
    return float(op.group(1)), float(ts.group(2)), int(ts.group(1))


def in_process(case_dir: Path) -> dict[str, float]:
    """In-process seconds of the overhead pieces of one solved case (imports already done)."""
    from bodysweep.geometry.preview import preview_png
    from bodysweep.workflow.casefolder import CaseFolder
    from bodysweep.geometry.scene import Scene
    from bodysweep.workflow.solver import build, engine
    from bodysweep.workflow.finish import finish_case
    from bodysweep.workflow.meshing.cost import estimate
    from bodysweep.workflow.meshing.mesh import checked_mesh
    from bodysweep.workflow.solver.run import load_case_inputs

    case = CaseFolder(case_dir).read_case_strict()
    out = {}
    t0 = time.perf_counter()
    model = Scene.from_dict(case["scene"]).build(float(case["frequency_Hz"]))
    model.to_dict()
    out["scene build + to_dict"] = time.perf_counter() - t0
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        preview_png(model, Path(tmp) / "p.png")
        out["preview png"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    _, model, settings, plan = load_case_inputs(case_dir)  # the stored mesh (mesh.json) of the scene step
    out["read inputs + stored mesh"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    checked_mesh(model, settings)
    estimate(checked_mesh(model, settings), model, settings)
    out["auto mesh + check + estimate (what each stage did before the mesh was stored)"] = (time.perf_counter() - t0) / 2
    t0 = time.perf_counter()
    fdtd, csx = engine.new_simulation(case["frequency_Hz"], 0.5 * case["frequency_Hz"], 1e-3, 1000,
                                      settings.boundary, settings.pml_cells)
    build.build_csx(model, plan, settings, csx)
    out["CSXCAD build"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    finish_case(case_dir)
    out["finish_case"] = time.perf_counter() - t0
    return out


def import_times() -> dict[str, float]:
    """Seconds for a fresh interpreter to import what each job imports (best of 2)."""
    probes = {"python + steps module": "import bodysweep.workflow.steps",
              "scene job imports": "import bodysweep.geometry.scene, bodysweep.geometry.preview, matplotlib.figure, "
                                   "matplotlib.backends.backend_agg",
              "solve child imports": "import bodysweep.workflow.solver.run as r, bodysweep.workflow.solver.build, "
                                     "bodysweep.workflow.solver.ports; from bodysweep.workflow.solver import engine; "
                                     "engine.load()",
              "finish job imports": "import h5py, bodysweep.workflow.finish, bodysweep.workflow.post.sar_average, "
                                    "bodysweep.workflow.post.twoport; "
                                    "from bodysweep.workflow.finish import _versions; _versions()",
              "collect job imports": "import bodysweep.workflow.collect"}
    out = {}
    for k, code in probes.items():
        best = float("inf")
        for _ in range(2):
            t0 = time.perf_counter()
            subprocess.run([sys.executable, "-c", code], check=True)
            best = min(best, time.perf_counter() - t0)
        out[k] = best
    return out


def study_copy(study: Path, work: Path) -> Path:
    """The study with ``max_timesteps`` raised to 200 000.

    openEMS checks its energy end criterion only every 4 s of wall time (openems.cpp, RunFDTD), so a
    small case on a fast, idle machine can reach the tiny study's cap of 20 000 steps before the first
    check and be recorded as failed; the cap is raised so that the benchmark measures, not fails.
    """
    import yaml

    d = yaml.safe_load(study.read_text())
    d.setdefault("solver", {})["max_timesteps"] = 200_000
    p = work / study.name
    p.write_text(yaml.safe_dump(d, sort_keys=False))
    return p


def run_study(study: Path, pick, work: Path, threads: int) -> list[dict]:
    from bodysweep.workflow.casefolder import SolveFolder
    from bodysweep.workflow.pipeline import prepare

    prep = prepare(study_copy(study, work), work / "results")
    entries = [e for e in prep.entries if pick(e)]
    rows = []
    for e in entries:
        d = prep.layout.case_dir(e["case_id"])
        r = {"case": e["label"], "case_dir": d}
        r["scene"] = step("scene", str(d))
        r["solve job"] = step("solve", str(d), "--port", "1", "--threads", str(threads))
        exc = SolveFolder(d).excitation(1)
        st = exc.read_status_strict()
        r["op"], r["ts"], r["timesteps"] = engine_times(exc.log_file.read_text())
        r["cells"] = st["cells"]
        r["finish"] = step("finish", str(d), "--ports", "1")
        rows.append(r)
    t_collect = step("collect", str(prep.layout.root))
    for r in rows:
        r["collect (share)"] = t_collect / len(rows)
    return rows


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--demo", type=int, default=1, help="number of 915 MHz demo cases (default 1)")
    ap.add_argument("--threads", type=int, default=1, help="engine threads of the solve job (default 1)")
    a = ap.parse_args()
    print("machine: 2 cores, shared (loaded by other jobs running openEMS); figures compare within this run")
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        rows = run_study(TINY, lambda e: True, work, a.threads)
        k = {"n": 0}

        def demo_pick(e):
            if e["frequency_Hz"] > 900e6 and k["n"] < a.demo:
                k["n"] += 1
                return True
            return False

        rows += run_study(DEMO, demo_pick, work, a.threads)
        stages = ["scene", "solve job - solver", "finish", "collect (share)"]
        print(f"\n{'case':<58} {'cells':>7} {'solver s':>8} | " + " | ".join(f"{s:>19}" for s in stages)
              + f" | {'overhead':>15}")
        fixed = []
        for r in rows:
            solver = r["op"] + r["ts"]
            r["solve job - solver"] = r["solve job"] - solver
            over = sum(r[s] for s in stages)
            cells = " | ".join(f"{r[s]:6.2f} s {100 * r[s] / solver:7.1f} %" for s in stages)
            print(f"{r['case'][:58]:<58} {r['cells']:>7} {solver:8.2f} | {cells} | "
                  f"{over:5.2f} s {100 * over / solver:5.1f} %")
            fixed.append(over)
        print("(solver = engine operator creation + timestepping as the engine logs them)")
        print("\nin-process time of the overhead pieces (imports done, no interpreter start):")
        for r, over in zip(rows, fixed):
            ip = in_process(r["case_dir"])
            r["finish_case"] = ip["finish_case"]
            print(f"  {r['case'][:56]:<56} " + ", ".join(f"{k} {v:.3f} s" for k, v in ip.items()))
        print("\nfresh-interpreter import time per job kind (best of 2):")
        for k, v in import_times().items():
            print(f"  {k:<24} {v:.2f} s")
        # finish_case (SAR averaging, mostly) grows with the tissue cells; the rest is per job
        per_job = max(o - r["finish_case"] for r, o in zip(rows, fixed))
        print(f"\noverhead that does not grow with the mesh (interpreters, imports, preview, files): at most "
              f"{per_job:.2f} s per case (target <= {PER_JOB_TARGET_S:g} s: "
              f"{'met' if per_job <= PER_JOB_TARGET_S else 'NOT met'}), within {100 * TARGET:.0f} % of solver "
              f"time from {per_job / TARGET:.0f} s of solver time on")
        for r in rows:
            solver = r["op"] + r["ts"]
            print(f"  finish_case (grows with the tissue cells) / solver: {100 * r['finish_case'] / solver:5.1f} % "
                  f"({r['cells']} cells)")


if __name__ == "__main__":
    sys.exit(main())
