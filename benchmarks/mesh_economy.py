"""Mesh economy: the automatic graded mesh against a uniform mesh and against a finer automatic mesh.

    .venv/bin/python benchmarks/mesh_economy.py [--skip-demo]

Two cases, each solved by openEMS on several meshes (one thread, one run at a time):

* the first case of the tiny test study (layered slab, short dipoles, 915 MHz) and
* the first 915 MHz case of the demo study (layered forearm cylinder, wrist loop, capsule loop).

Meshes:

``auto <preset>``
    the automatic mesh with the mesh keys (cells per wavelength, cells across a port gap, growth
    ratio, cells per layer) of a quality preset, the case's other solver settings unchanged;
    ``auto study`` is the case as its study file sets it (``draft`` with coarser overrides);
``uniform lambda/20``
    cells of one size, lambda / 20 in the densest tissue of the case (largest eps_r at the case
    frequency), no grading; the geometry's fixed lines (interior bounds, port gap ends, conductor
    edges, sheets, layer faces: the reference plan's fixed lines) are kept so that the same geometry
    is represented, and every gap between them is split into equal cells no larger than that size;
``uniform <finest> mm`` (counted, not run)
    the same with the reference's finest automatic cell everywhere;
reference
    the automatic mesh of the next finer preset (tiny: ``fine``, demo: ``standard``; the demo on
    ``fine`` would be 1.8 M cells, too long for this script).

Every run gets ``max_timesteps`` 200 000 so that the energy end criterion (the study's) decides.
Printed per mesh: cells, timesteps, solve wall time, |S21| at the case frequency, peak 1 g averaged SAR
per watt accepted, and the differences to the reference; then the issue's targets (uniform / auto
cells >= 5, |S21| within 0.5 dB, peak 1 g SAR within 5 % of the reference).

The machine is shared (2 cores, other jobs running openEMS): wall times compare within one run only.
"""
from __future__ import annotations

import argparse
import json
import math
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
TINY = ROOT / "tests" / "pipeline" / "data" / "tiny.yaml"
DEMO = ROOT / "studies" / "demo_forearm_capsule.yaml"
C0 = 299_792_458.0  # m/s (SI definition)
MESH_KEYS = ("cells_per_wavelength", "port_cells", "max_growth_ratio", "min_cells_per_layer")


def uniform_lines(fixed: list[float], h: float) -> np.ndarray:
    """Lines through every fixed line, each gap split into ``ceil(gap / h)`` equal cells, shape (n,)."""
    fx = np.asarray(sorted(fixed), float)
    out = [fx[:1]]
    for a, b in zip(fx[:-1], fx[1:]):
        n = max(1, int(math.ceil((b - a) / h - 1e-9)))
        out.append(np.linspace(a, b, n + 1)[1:])  # linspace ends exactly on the fixed line b
    return np.concatenate(out)


def densest_wavelength(model) -> tuple[float, str]:
    """Wavelength (m) in the tissue of largest eps_r at the case frequency, and that tissue's name."""
    tissues = [m for m in model.materials if m.is_tissue]
    m = max(tissues, key=lambda t: t.eps_r)
    return C0 / (model.frequency_Hz * math.sqrt(m.eps_r)), m.name


def variant_dir(src_case: dict, root: Path, name: str) -> Path:
    d = root / name
    d.mkdir(parents=True)
    (d / "case.json").write_text(json.dumps(src_case))
    return d


def solve_variant(d: Path) -> dict:
    from bodysweep.workflow import steps
    from bodysweep.workflow.finish import finish_case
    from bodysweep.workflow.solver.run import solve_excitation

    steps.build_scene(d)
    t0 = time.perf_counter()
    st = solve_excitation(d, 1, threads=1)
    wall = time.perf_counter() - t0
    if st["status"] != "ok":
        raise RuntimeError(f"{d.name}: solve failed: {st['reason']}")
    m = finish_case(d)
    if m["status"] != "ok":
        raise RuntimeError(f"{d.name}: finish failed: {m.get('reason')}")
    s21 = complex(*m["S21"])
    peak1 = [r for r in m["sar"] if abs(r["mass_kg"] - 0.001) < 1e-9][0]["peak_W_per_kg_per_W"]
    return {"cells": st["cells"], "timesteps": st["timesteps"], "wall_s": wall,
            "engine_s": st.get("engine_runtime_s"), "S21_dB": 20 * math.log10(abs(s21)), "sar1g": peak1,
            "decay": st.get("decay_reached")}


def with_mesh_keys(case: dict, preset: str) -> dict:
    """The case with the mesh keys of ``preset`` (``"study"``: the case's own settings)."""
    from bodysweep.workflow.solver.settings import PRESETS

    if preset == "study":
        return case
    p = PRESETS[preset]
    return {**case, "solver": {**case["solver"], **{k: getattr(p, k) for k in MESH_KEYS}}}


def run_case(study: Path, pick, work: Path, autos: tuple[str, ...], reference: str) -> None:
    from bodysweep.geometry.scene import Scene
    from bodysweep.workflow.pipeline import expand_study
    from bodysweep.workflow.solver.mesh import auto_mesh
    from bodysweep.workflow.solver.settings import settings_from_dict

    _, _, _, dicts = expand_study(study, work / "unused")
    case = next(d for d in dicts if pick(d))
    case["solver"] = {**case["solver"], "max_timesteps": 200_000}
    model = Scene.from_dict(case["scene"]).build(case["frequency_Hz"])
    lam, tissue = densest_wavelength(model)
    h = lam / 20
    root = work / case["case_id"]
    root.mkdir()
    print(f"\n{case['label']} ({study.name}); densest tissue {tissue}, lambda/20 = {h * 1e3:.2f} mm")
    variants = {}
    for preset in autos + (reference,):
        c = with_mesh_keys(case, preset)
        variants[f"auto {preset}"] = (variant_dir(c, root, f"auto_{preset}"), c)
    # uniform meshes through the fixed lines of the reference's automatic plan
    ref_case = variants[f"auto {reference}"][1]
    ref_plan = auto_mesh(model, settings_from_dict(ref_case["solver"]))
    finest = min(ref_plan.smallest_cell)
    uniform = {}
    for name, size in (("uniform lambda/20", h), (f"uniform {finest * 1e3:.2f} mm", finest)):
        lines = {a: uniform_lines([p for p, _ in ref_plan.fixed[a]], size) for a in "xyz"}
        uniform[name] = (lines, int(np.prod([len(v) - 1 for v in lines.values()])))
    name = "uniform lambda/20"
    d = variant_dir(case, root, "uniform")
    (d / "mesh_plan.json").write_text(json.dumps({
        **{f"lines_{a}": v.tolist() for a, v in uniform[name][0].items()},
        "interior_bounds": [list(ref_plan.interior_bounds[0]), list(ref_plan.interior_bounds[1])]}))
    variants[name] = (d, case)

    res = {}
    for name, (d, _) in variants.items():
        res[name] = solve_variant(d)
        r = res[name]
        print(f"  solved {name:<20} {r['cells']:>8} cells {r['timesteps']:>7} steps {r['wall_s']:7.1f} s", flush=True)
    ref = res[f"auto {reference}"]
    print(f"  {'mesh':<20} {'cells':>8} {'steps':>7} {'solve s':>8} {'|S21| dB':>9} {'d|S21| dB':>10} "
          f"{'SAR1g W/kg/W':>13} {'dSAR1g %':>9}")
    for name, r in res.items():
        ds = r["S21_dB"] - ref["S21_dB"]
        dsar = 100 * (r["sar1g"] - ref["sar1g"]) / ref["sar1g"]
        print(f"  {name:<20} {r['cells']:>8} {r['timesteps']:>7} {r['wall_s']:8.1f} {r['S21_dB']:9.3f} {ds:10.3f} "
              f"{r['sar1g']:13.4g} {dsar:9.2f}")
    fname = [k for k in uniform if k != "uniform lambda/20"][0]
    print(f"  {fname:<20} {uniform[fname][1]:>8} (not run: the cell size of the finest automatic cell "
          f"everywhere, what a uniform mesh needs to resolve the feed as the reference does)")
    print(f"  reference: auto {reference}; mesh keys of each preset: " + "; ".join(
        f"{p} " + ", ".join(f"{k} {with_mesh_keys(case, p)['solver'][k]}" for k in MESH_KEYS)
        for p in autos + (reference,)))
    for preset in autos:
        a = res[f"auto {preset}"]
        ratio_h = uniform["uniform lambda/20"][1] / a["cells"]
        ratio_f = uniform[fname][1] / a["cells"]
        ds = abs(a["S21_dB"] - ref["S21_dB"])
        dsar = abs(100 * (a["sar1g"] - ref["sar1g"]) / ref["sar1g"])
        print(f"  targets, auto {preset}: uniform lambda/20 / auto cells {ratio_h:.2f} and {fname} / auto "
              f"{ratio_f:.2f} (>= 5: {'met' if ratio_h >= 5 else 'MISSED'} / {'met' if ratio_f >= 5 else 'MISSED'}); "
              f"|S21| {ds:.3f} dB from the reference (<= 0.5: {'met' if ds <= 0.5 else 'MISSED'}); "
              f"peak 1 g SAR {dsar:.2f} % (<= 5: {'met' if dsar <= 5 else 'MISSED'})")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--skip-demo", action="store_true", help="only the tiny slab case")
    a = ap.parse_args()
    print("machine: 2 cores, shared (loaded by other jobs running openEMS); times compare within this run")
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        run_case(TINY, lambda d: True, work, ("study", "draft", "standard"), "fine")
        if not a.skip_demo:
            run_case(DEMO, lambda d: d["frequency_Hz"] > 900e6, work, ("study",), "standard")


if __name__ == "__main__":
    sys.exit(main())
