"""Mesh economy: the automatic mesh of each preset against a reference at twice the standard resolution.

    .venv/bin/python benchmarks/mesh_economy.py [--cases tiny,tiny_round,liquid,liquid_round,demo,demo_loop] [--keep FOLDER]

Cases (each solved by openEMS on every mesh, one thread, one run at a time):

``tiny``
    the first case of the tiny test study (layered slab, 30 mm strip dipole 6 mm above the skin, thin-wire
    implant dipole 6 mm deep, 915 MHz);
``liquid``
    ``benchmarks/data/dipole_liquid.yaml``: a half-wave strip dipole 10 mm above a flat box of
    tissue-simulating liquid (70 x 40 x 20 mm), implant dipole 6 mm deep, 2450 MHz;
``demo``
    the first 915 MHz strip-dipole case of the demo study without a ring (layered forearm cylinder, 90 mm strip
    dipole, capsule loop 12 mm deep; the dipole accepts about a fifth of the incident power, the wrist loop only
    3 %, which makes per-watt-accepted figures ill-conditioned); also solved on the study's own mesh;
``demo_loop``
    the first 403 MHz wrist-loop case of the demo study without a ring (capsule 12 mm deep; the loop accepts
    1.7 % of the incident power); also solved on the study's own mesh;
``tiny_round``, ``liquid_round``
    ``tiny`` and ``liquid`` with a round-wire implant (``wire_radius_mm`` 0.5 instead of 0).

Meshes: the mesh keys (:data:`MESH_KEYS`) of the ``draft`` and ``standard`` presets, the case's other solver
settings unchanged, and the reference: the standard preset at twice its resolution (``cells_per_wavelength``,
``port_cells`` and ``min_cells_per_layer`` doubled).
Every run gets ``max_timesteps`` 400 000 so that the energy end criterion (the study's) decides.

Printed per case and mesh: cells, timesteps, solve wall time, S11, the energy balance ((absorbed + delivered) /
accepted: a mesh that misplaces the accepted power shows here first), and the differences to the reference of peak
1 g and 10 g averaged SAR per watt accepted and of |S21| at the case frequency; then the targets (standard:
SAR within 5 % and |S21| within 0.5 dB; draft: SAR within 15 %).

Solves are kept in ``--keep FOLDER`` (keyed by the case folder's content) so that a second call reuses them.
The machine is shared (2 cores, other jobs running openEMS): wall times compare within one run only.
"""
from __future__ import annotations

import argparse
import hashlib
import json
import math
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
CASES = {
    "tiny": (ROOT / "tests" / "pipeline" / "data" / "tiny.yaml", lambda d: True),
    "liquid": (ROOT / "benchmarks" / "data" / "dipole_liquid.yaml", lambda d: True),
    "demo": (ROOT / "studies" / "demo_forearm_capsule.yaml",
             lambda d: d["frequency_Hz"] > 900e6 and d["scene"]["external"]["type"] == "dipole"
             and not d["scene"]["concentrators"]),
    "demo_loop": (ROOT / "studies" / "demo_forearm_capsule.yaml",
                  lambda d: d["frequency_Hz"] < 500e6 and d["scene"]["external"]["type"] == "loop"
                  and not d["scene"]["concentrators"]),
}
#: cases solved with one change of the scene: the same with a round-wire implant of radius 0.5 mm. A wire of
#: radius 0 is modelled as a line of zeroed field whose equivalent radius follows the cell beside it, so its
#: |S21| has no mesh-independent value; a round wire's surface is meshed.
ROUND_WIRE = {"tiny_round": "tiny", "liquid_round": "liquid"}
MESH_KEYS = ("cells_per_wavelength", "port_cells", "max_growth_ratio", "min_cells_per_layer")


def mesh_keys(preset: str, scale: int = 1) -> dict:
    """The mesh keys of ``preset``, at ``scale`` times its resolution."""
    from bodysweep.workflow.meshing.settings import PRESETS

    p = PRESETS[preset]
    keys = {k: getattr(p, k) for k in MESH_KEYS}
    keys["cells_per_wavelength"] *= scale
    keys["port_cells"] *= scale
    keys["min_cells_per_layer"] *= scale
    return keys


def solve(case: dict, keep: Path) -> dict:
    """Solve and finish one case dict in a folder under ``keep`` named by its content; the figures."""
    from bodysweep.workflow import steps
    from bodysweep.workflow.finish import finish_case
    from bodysweep.workflow.solver.run import solve_excitation
    from bodysweep.workflow.study.identity import code_versions

    key = hashlib.sha256(json.dumps([case["scene"], case["solver"], case["frequency_Hz"], code_versions()],
                                    sort_keys=True).encode()).hexdigest()[:12]
    d = keep / key
    done = d / "figures.json"
    if done.exists():
        out = json.loads(done.read_text())
        out.setdefault("energy_balance", json.loads((d / "metrics.json").read_text()).get("energy_balance"))
        return out
    d.mkdir(parents=True, exist_ok=True)
    (d / "case.json").write_text(json.dumps(case))
    steps.build_scene(d)
    t0 = time.perf_counter()
    st = solve_excitation(d, 1, threads=1)
    wall = time.perf_counter() - t0
    if st["status"] != "ok":
        raise RuntimeError(f"{d}: solve failed: {st['reason']}")
    m = finish_case(d)
    if m["status"] == "failed":
        raise RuntimeError(f"{d}: finish failed: {m.get('reason')}")
    sar = {round(r["mass_kg"] * 1e3): r["peak_W_per_kg_per_W"] for r in m["sar"]}
    out = {"cells": st["cells"], "timesteps": st["timesteps"], "wall_s": wall, "sar1": sar[1], "sar10": sar[10],
           "S21_dB": 20 * math.log10(abs(complex(*m["S21"]))), "S11_dB": 20 * math.log10(abs(complex(*m["S11"]))),
           "energy_balance": m.get("energy_balance")}
    done.write_text(json.dumps(out))
    return out


def _accepted(r: dict) -> float:
    """Fraction of the incident power accepted at port 1, 1 - |S11|^2."""
    return 1.0 - 10 ** (r["S11_dB"] / 10)


def run_case(name: str, keep: Path) -> list[str]:
    from bodysweep.workflow.pipeline import expand_study

    study, pick = CASES[ROUND_WIRE.get(name, name)]
    with tempfile.TemporaryDirectory() as tmp:
        _, _, _, dicts = expand_study(study, Path(tmp) / "unused")
    case = next(d for d in dicts if pick(d))
    if name in ROUND_WIRE:
        case["scene"]["implant"]["wire_radius_m"] = 0.5e-3
        case["label"] += " round-wire implant (radius 0.5 mm)"
    case["solver"] = {**case["solver"], "max_timesteps": 400_000, "threads": 1, "excite_ports": [1]}
    case["excite_ports"] = [1]  # port 1 only: S11, S21 and the SAR
    meshes = {"draft": mesh_keys("draft"), "standard": mesh_keys("standard"), "reference": mesh_keys("standard", 2)}
    if name.startswith("demo"):  # the study's own (coarse) mesh too
        meshes = {"study": {k: case["solver"][k] for k in MESH_KEYS}, **meshes}
    print(f"\n{name}: {case['label']} ({study.relative_to(ROOT)})", flush=True)
    res = {}
    for mesh, keys in meshes.items():
        c = json.loads(json.dumps(case))
        c["solver"] = {**c["solver"], **keys}
        res[mesh] = solve(c, keep / name)
        r = res[mesh]
        print(f"  solved {mesh:<10} {r['cells']:>9} cells {r['timesteps']:>7} steps {r['wall_s']:7.0f} s", flush=True)
    ref = res["reference"]
    rows = []
    for mesh, r in res.items():
        d1, d10 = (100 * (r[k] / ref[k] - 1) for k in ("sar1", "sar10"))
        ds21 = r["S21_dB"] - ref["S21_dB"]
        # per watt incident: (1 - |S11|^2) x per watt accepted; free of the accepted power's conditioning
        d1i = 100 * (r["sar1"] * _accepted(r) / (ref["sar1"] * _accepted(ref)) - 1)
        row = (f"| {name} | {mesh} | {r['cells']:,} | {d1:+.1f} % | {d10:+.1f} % | {d1i:+.1f} % | {ds21:+.2f} dB | "
               f"{r['energy_balance']:.2f} |")
        if mesh == "study":
            row += " none (the study's own mesh) |"
        elif mesh != "reference":
            tol = 5.0 if mesh == "standard" else 15.0
            verdict = [f"SAR {'met' if max(abs(d1), abs(d10)) <= tol else 'MISSED'} (<= {tol:g} %)"]
            if mesh == "standard":
                verdict.append(f"\\|S21\\| {'met' if abs(ds21) <= 0.5 else 'MISSED'} (<= 0.5 dB)")
            row += " " + "; ".join(verdict) + " |"
        else:
            row += " – |"
        rows.append(row)
        print(f"  {mesh:<10} {r['cells']:>9} cells  S11 {r['S11_dB']:7.3f} dB  S21 {r['S21_dB']:8.3f} dB  SAR 1 g "
              f"{r['sar1']:9.4g}  10 g {r['sar10']:9.4g} W/kg per W  energy balance {r['energy_balance']:.3f}", flush=True)
    return rows


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", default="tiny,tiny_round,liquid,liquid_round,demo,demo_loop", help="comma-separated: " + ", ".join([*CASES, *ROUND_WIRE]))
    ap.add_argument("--keep", type=Path, default=None, help="folder keeping the solves between calls")
    a = ap.parse_args()
    names = [c.strip() for c in a.cases.split(",") if c.strip()]
    bad = [c for c in names if c not in CASES and c not in ROUND_WIRE]
    if bad:
        ap.error(f"unknown case(s) {bad}; known: {sorted(CASES) + sorted(ROUND_WIRE)}")
    print("machine: 2 cores, shared (loaded by other jobs running openEMS); times compare within this run")
    with tempfile.TemporaryDirectory() as tmp:
        keep = a.keep or Path(tmp)
        rows = []
        for name in names:
            rows += run_case(name, keep)
    print("\n| case | mesh | cells | Δ peak 1 g SAR | Δ peak 10 g SAR | Δ peak 1 g SAR per W incident | Δ\\|S21\\| "
          "| energy balance | targets |")
    print("|---|---|---|---|---|---|---|---|---|")
    print("\n".join(rows))


if __name__ == "__main__":
    sys.exit(main())
