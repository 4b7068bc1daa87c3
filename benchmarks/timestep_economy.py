"""Timestep economy: energy end criterion and excitation bandwidth against the results.

    .venv/bin/python benchmarks/timestep_economy.py [--skip-demo]

The first case of the tiny test study and the first 915 MHz case of the demo study are solved by
openEMS (one thread, one run at a time) with the end criterion at -20, -30 (the studies' value), -40
and -50 dB, and once at -30 dB with the widest excitation pulse the adapter allows (``band_fraction``
1.0, so the Gaussian's half-bandwidth is 0.9 f instead of 0.5 f: a 1.8x shorter pulse). Printed per run:
timesteps, the pulse length in timesteps, solve wall time, S11 and |S21| at the case frequency and the
peak 1 g averaged SAR per watt accepted, with differences to the -50 dB run (the reference). Every run
may take up to 60 000 timesteps; a run whose energy has not decayed by then is listed as such.

openEMS evaluates the end criterion only when it prints its progress line, every 4 s of wall time
(openems.cpp, RunFDTD), so the timesteps of a run are those done by the first progress line after the
energy has decayed: on a small case several criteria end at the same line, and the count depends on the
machine's speed at that moment. The machine is shared (2 cores, other jobs running openEMS).
"""
from __future__ import annotations

import argparse
import json
import math
import re
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
TINY = ROOT / "tests" / "pipeline" / "data" / "tiny.yaml"
DEMO = ROOT / "studies" / "demo_forearm_capsule.yaml"
MAX_STEPS = 60_000  # far above what the studies' cases need; a run that does not decay stops here
RUNS = ((-20.0, None), (-30.0, None), (-40.0, None), (-50.0, None), (-30.0, 1.0))


def solve(case: dict, d: Path) -> dict:
    from bodysweep.workflow import steps
    from bodysweep.workflow.finish import finish_case
    from bodysweep.workflow.solver.run import solve_excitation

    d.mkdir(parents=True)
    (d / "case.json").write_text(json.dumps(case))
    steps.build_scene(d)
    t0 = time.perf_counter()
    st = solve_excitation(d, 1, threads=1)
    wall = time.perf_counter() - t0
    log = (d / "excite_1" / "solver.log").read_text()
    pulse = re.search(r"Excitation signal length is:\s*(\d+)\s*timesteps", log)
    pulse = int(pulse.group(1)) if pulse else None
    if st["status"] != "ok":
        if st.get("decay_reached") is False and st.get("timesteps"):
            nan = float("nan")
            return {"steps": st["timesteps"], "pulse": pulse, "wall": wall, "S11": nan, "S21": nan, "sar": nan,
                    "note": st["reason"]}
        raise RuntimeError(f"{d.name}: {st['reason']}")
    m = finish_case(d)
    return {"steps": st["timesteps"], "pulse": pulse, "wall": wall, "note": "",
            "S11": 20 * math.log10(abs(complex(*m["S11"]))), "S21": 20 * math.log10(abs(complex(*m["S21"]))),
            "sar": [r for r in m["sar"] if abs(r["mass_kg"] - 0.001) < 1e-9][0]["peak_W_per_kg_per_W"]}


def run_case(study: Path, pick, work: Path) -> None:
    from bodysweep.workflow.pipeline import expand_study

    _, _, _, dicts = expand_study(study, work / "unused")
    case = next(d for d in dicts if pick(d))
    print(f"\n{case['label']} ({study.name}), band_fraction of the study "
          f"{case['solver'].get('band_fraction', 'preset')}")
    res = []
    for end_dB, band in RUNS:
        solver = {**case["solver"], "end_criterion_dB": end_dB, "max_timesteps": MAX_STEPS}
        if band is not None:
            solver["band_fraction"] = band
        tag = f"{end_dB:g}dB" + (f"_band{band:g}" if band else "")
        r = solve({**case, "solver": solver}, work / case["case_id"] / tag)
        r["label"] = f"end {end_dB:g} dB" + (f", band_fraction {band:g}" if band else "")
        res.append(r)
        print(f"  solved {r['label']:<32} {r['steps']:>7} steps {r['wall']:6.1f} s", flush=True)
    ref = next(r for r in res if r["label"] == "end -50 dB")
    print(f"  {'run':<32} {'steps':>7} {'pulse':>6} {'solve s':>8} {'S11 dB':>8} {'dS11':>7} {'|S21| dB':>9} "
          f"{'dS21':>7} {'SAR1g':>9} {'dSAR %':>7}")
    for r in res:
        print(f"  {r['label']:<32} {r['steps']:>7} {r['pulse']:>6} {r['wall']:8.1f} {r['S11']:8.3f} "
              f"{r['S11'] - ref['S11']:7.3f} {r['S21']:9.3f} {r['S21'] - ref['S21']:7.3f} {r['sar']:9.4g} "
              f"{100 * (r['sar'] - ref['sar']) / ref['sar']:7.2f}" + (f"  ({r['note']})" if r["note"] else ""))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--skip-demo", action="store_true", help="only the tiny slab case")
    a = ap.parse_args()
    print("machine: 2 cores, shared (loaded by other jobs running openEMS); times compare within this run")
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        run_case(TINY, lambda d: True, work)
        if not a.skip_demo:
            run_case(DEMO, lambda d: d["frequency_Hz"] > 900e6, work)


if __name__ == "__main__":
    sys.exit(main())
