"""The case folder and the solve folder as code (``bodysweep.workflow.casefolder``): one module spells their
file names, and what it writes it reads back unchanged.

References: the file names and layouts are the project's own contract (DEVELOPERS.md, "The case folder");
the round trips compare with the data written; the stored mesh is compared with the mesher's own output
(``auto_mesh`` + ``check_mesh``) and the cost model's own estimate.
"""
from __future__ import annotations

import ast
import json
import re
from pathlib import Path

import numpy as np
import pytest

from bodysweep.workflow import casefolder as cf

ROOT = Path(__file__).resolve().parents[1]
PACKAGE_FOLDERS = (ROOT / "api", ROOT / "geometry", ROOT / "workflow")
OWNER = ROOT / "workflow" / "casefolder.py"
#: every file name of the case folder and the solve folder
NAMES = (cf.CASE_FILE, cf.METRICS_FILE, cf.RESULT_FILE, cf.SOLVE_FILE, cf.SCENE_FILE, cf.PREVIEW_FILE,
         cf.MESH_FILE, cf.HAND_MESH_FILE, cf.STATUS_FILE, cf.OUTCOME_FILE, cf.SIGNALS_FILE, cf.FIELDS_FILE,
         cf.SOLVER_LOG, cf.ENGINE_SAR_FILE, cf.ENGINE_SAR_STATUS_FILE, cf.ENGINE_SAR_LOG, cf.FINISH_LOG,
         cf.touchstone_name(1), cf.touchstone_name(2))
_SPELLED = re.compile(r"(?<![\w.])(" + "|".join(re.escape(n) for n in NAMES) + r")(?![\w])")


def _docstrings(tree: ast.AST) -> set[int]:
    """ids of the docstring constants (module, class, function): prose may name the files."""
    out = set()
    for node in ast.walk(tree):
        if isinstance(node, (ast.Module, ast.ClassDef, ast.FunctionDef, ast.AsyncFunctionDef)):
            body = getattr(node, "body", [])
            if body and isinstance(body[0], ast.Expr) and isinstance(body[0].value, ast.Constant):
                out.add(id(body[0].value))
    return out


def spelled_in_code(path: Path) -> list[str]:
    """``file:line: name`` for every string constant in code (f-string parts included, docstrings and
    comments not) that spells a file name of the case or solve folder."""
    tree = ast.parse(path.read_text(encoding="utf-8"), str(path))
    docs = _docstrings(tree)
    hits = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Constant) and isinstance(node.value, str) and id(node) not in docs:
            for m in _SPELLED.finditer(node.value):
                hits.append(f"{path.relative_to(ROOT)}:{node.lineno}: {m.group(1)}")
    return hits


def test_the_spelling_check_finds_a_spelled_name(tmp_path):
    # the check itself can fail: a literal in code and in an f-string are found, a docstring is not
    src = tmp_path / "m.py"
    src.write_text('"""Reads metrics.json."""\nA = "metrics.json"\nB = f"{x}/excite_1/status.json"\n'
                   'C = "ametrics.jsonx"\n')
    src_rel = src.relative_to(tmp_path)
    global ROOT
    old, ROOT = ROOT, tmp_path
    try:
        hits = spelled_in_code(src)
    finally:
        ROOT = old
    assert hits == [f"{src_rel}:2: metrics.json", f"{src_rel}:3: status.json"]


def test_only_the_casefolder_module_spells_the_file_names():
    hits = []
    for folder in PACKAGE_FOLDERS:
        for p in sorted(folder.rglob("*.py")):
            if p != OWNER:
                hits += spelled_in_code(p)
    # the rule files and the Snakefile: Python inside Snakemake's syntax, checked line by line (comments aside)
    for p in sorted((ROOT / "workflow").rglob("*.smk")) + [ROOT / "workflow" / "Snakefile"]:
        for k, line in enumerate(p.read_text().splitlines(), 1):
            code = line.split("#", 1)[0]
            hits += [f"{p.relative_to(ROOT)}:{k}: {m.group(1)}" for m in _SPELLED.finditer(code)]
    assert not hits, "file names of the case folder spelled outside workflow/casefolder.py:\n" + "\n".join(hits)


def test_the_owner_spells_each_name_once():
    text = OWNER.read_text()
    for n in NAMES[:-2]:
        assert text.count(f'"{n}"') == 1, n


def test_signals_round_trip(tmp_path):
    exc = cf.SolveFolder(tmp_path).excitation(2)
    t = np.linspace(0, 1e-9, 11)
    ports = [{"number": n, "t_voltage_s": t, "voltage_V": np.sin(t * 1e9 + n), "t_current_s": t + 1e-12,
              "current_A": np.cos(t * 1e9 + n), "V_band": np.array([1 + 2j, 3 - 1j]),
              "I_band": np.array([0.5j, 0.25]), "V_f0": 1 + 1j * n, "I_f0": 2 - 1j, "impedance_ohm": 50.0 * n,
              "excited": n == 2} for n in (2, 1)]
    attrs = {"timesteps": 123, "decay_reached": True, "excited_port": 2, "pulse_f0_Hz": 4e8, "pulse_fc_Hz": 2e8}
    exc.write_signals(ports, [3.9e8, 4.1e8], 4.03e8, attrs)
    got = exc.read_signals()
    assert exc.signals_file.name == cf.SIGNALS_FILE and exc.dir.name == "excite_2"
    assert got["excited_port"] == 2 and got["timesteps"] == 123 and got["decay_reached"] is True
    assert got["frequency_Hz"] == 4.03e8 and np.array_equal(got["f_band_Hz"], [3.9e8, 4.1e8])
    assert [p["number"] for p in got["ports"]] == [1, 2]  # ordered by port number
    for p in got["ports"]:
        src = next(q for q in ports if q["number"] == p["number"])
        for k in ("t_voltage_s", "voltage_V", "t_current_s", "current_A", "V_band", "I_band"):
            assert np.array_equal(p[k], src[k]), k
        assert p["V_f0"] == src["V_f0"] and p["I_f0"] == src["I_f0"] and p["impedance_ohm"] == src["impedance_ohm"]


def test_status_outcome_and_missing_results(tmp_path):
    exc = cf.SolveFolder(tmp_path).excitation(1)
    assert exc.read_status() is None and exc.missing_results() == [cf.SIGNALS_FILE, cf.FIELDS_FILE]
    exc.write_status({"status": "ok"})
    exc.keep_outcome({"status": "ok"})
    assert exc.read_status() == exc.read_outcome() == {"status": "ok"}
    mtime = exc.status_file.stat().st_mtime_ns
    assert not exc.restore_status({"status": "ok"}) and exc.status_file.stat().st_mtime_ns == mtime
    exc.remove_status()
    assert exc.read_status() is None and exc.read_outcome() is None
    assert cf.SolveFolder(tmp_path).excitation(2).result_files() == (cf.SIGNALS_FILE,)


def test_result_round_trip_and_missing_files(tmp_path):
    case = cf.CaseFolder(tmp_path / "abc123def456")
    edges = [np.linspace(0, 0.01, 4), np.linspace(0, 0.02, 3), np.linspace(-0.01, 0, 2)]
    local = np.arange(6, dtype=float).reshape(3, 2, 1)
    S = np.full((2, 2, 2), np.nan, complex)
    S[:, 0, 0] = [0.1 + 0.2j, 0.3]
    case.write_result({"case_id": "abc123def456", "frequency_Hz": 4e8}, np.array([3.9e8, 4.1e8]), S,
                      {"edges": edges, "density_kg_m3": np.ones((3, 2, 1)), "volumes": {"local": local,
                                                                                        "avg_1g": local / 2}})
    f, S2 = case.read_result_band()
    assert np.array_equal(f, [3.9e8, 4.1e8]) and np.array_equal(S2, S, equal_nan=True)
    assert case.read_result_case_id() == "abc123def456"
    assert case.sar_volume_names() == ["avg_1g", "local"]
    vol = case.read_sar("avg_1g")
    assert np.array_equal(vol["values"], local / 2) and all(np.array_equal(a, b) for a, b in zip(vol["edges"], edges))
    with pytest.raises(KeyError, match="avg_10g"):
        case.read_sar("avg_10g")
    # a finished case needs its Touchstone file: two-port when port 2 was excited, else either
    assert case.missing_results([1]) == [cf.touchstone_name(1)]
    assert case.missing_results([1, 2]) == [cf.touchstone_name(2)]
    case.touchstone_target(1).write_text("# Hz S RI R 50\n")
    assert case.missing_results([1]) == [] and case.touchstone_file() == case.touchstone_target(1)


@pytest.fixture(scope="module")
def tiny_case() -> dict:
    from bodysweep.workflow.pipeline import expand_study

    return expand_study(ROOT / "tests" / "pipeline" / "data" / "tiny.yaml", "/nonexistent")[3][0]


def test_stored_mesh_is_meshed_once_and_read_back(tmp_path, tiny_case):
    from bodysweep.geometry.scene import Scene
    from bodysweep.workflow.meshrecord import stored_mesh
    from bodysweep.workflow.meshing.cost import estimate
    from bodysweep.workflow.meshing.mesh import checked_mesh
    from bodysweep.workflow.meshing.settings import settings_from_dict

    folder = cf.SolveFolder(tmp_path)
    folder.record_file.write_text(json.dumps(tiny_case))
    calls = []

    def mesher(model, settings):
        calls.append(1)
        return checked_mesh(model, settings)

    plan, est = stored_mesh(folder, mesher, estimate)
    plan2, est2 = stored_mesh(folder, mesher, estimate)
    assert len(calls) == 1 and folder.mesh_file.exists()
    # the mesher's and the cost model's own results, unchanged by the JSON round trip
    model = Scene.from_dict(tiny_case["scene"]).build(tiny_case["frequency_Hz"])
    settings = settings_from_dict(tiny_case["solver"])
    ref = checked_mesh(model, settings)
    for a in "xyz":
        assert np.array_equal(getattr(plan2, f"lines_{a}"), getattr(ref, f"lines_{a}"))
    assert plan2.interior_bounds == ref.interior_bounds and est2 == est == estimate(ref, model, settings)
    # other solver settings that decide the mesh make the record stale; threads do not
    changed = {**tiny_case, "solver": {**tiny_case["solver"], "threads": 7}}
    folder.record_file.write_text(json.dumps(changed))
    stored_mesh(folder, mesher, estimate)
    assert len(calls) == 1
    changed["solver"]["max_timesteps"] = int(tiny_case["solver"]["max_timesteps"]) + 1
    folder.record_file.write_text(json.dumps(changed))
    assert stored_mesh(folder, mesher, estimate)[1].timesteps <= changed["solver"]["max_timesteps"]
    assert len(calls) == 2


def test_a_refused_mesh_is_stored_and_refused_again(tmp_path, tiny_case):
    from bodysweep.workflow.meshrecord import stored_mesh
    from bodysweep.workflow.meshing.cost import estimate

    folder = cf.SolveFolder(tmp_path)
    folder.record_file.write_text(json.dumps(tiny_case))

    def refuse(model, settings):
        raise ValueError("min_cell_mm: a cell of 0.001 mm is below the smallest allowed")

    with pytest.raises(ValueError, match="min_cell_mm"):
        stored_mesh(folder, refuse, estimate)
    with pytest.raises(ValueError, match="min_cell_mm"):  # read back, not meshed again
        stored_mesh(folder, lambda m, s: pytest.fail("meshed again"), estimate)
    assert folder.read_mesh()["status"] == "failed"


def test_cluster_sizing_and_plan_read_the_stored_mesh(tmp_path, tiny_case):
    from bodysweep.workflow.cluster import _case_cost_from_folder
    from bodysweep.workflow.estimate import case_estimate

    store = tmp_path / "store"
    folder = cf.SolveFolder(store / tiny_case["solve_id"])
    folder.dir.mkdir(parents=True)
    folder.record_file.write_text(json.dumps(tiny_case))
    cost, _ = _case_cost_from_folder(folder.dir)  # meshes and stores
    rec = folder.read_mesh()
    assert rec["status"] == "ok" and rec["estimate"]["cells"] == cost.cells
    # a stored estimate is what plan takes (a doctored figure shows that it was read, not recomputed)
    rec["estimate"]["cpu_seconds"] = 12345.0
    folder.write_mesh(rec)
    assert case_estimate(tiny_case, store=store).cpu_seconds == 12345.0
    assert case_estimate(tiny_case).cpu_seconds == cost.cpu_seconds


def test_scene_step_stores_the_mesh_and_the_engine_process_reads_it(tmp_path, tiny_case):
    from bodysweep.workflow.meshing.mesh import checked_mesh
    from bodysweep.workflow.solver.run import load_case_inputs
    from bodysweep.workflow.steps import build_scene

    folder = cf.SolveFolder(tmp_path)
    folder.record_file.write_text(json.dumps(tiny_case))
    out = build_scene(folder.dir)
    assert out.get("status") != "failed" and folder.scene_file.exists()
    rec = folder.read_mesh()
    assert rec["status"] == "ok"
    _, model, settings, plan = load_case_inputs(folder.dir)
    ref = checked_mesh(model, settings)  # the mesher's own result for the built scene
    assert np.array_equal(plan.lines_z, ref.lines_z)
    # the engine process takes the stored lines, it does not mesh again (a doctored line shows it)
    rec["mesh"]["lines_z"][1] = 0.5 * (rec["mesh"]["lines_z"][0] + rec["mesh"]["lines_z"][1])
    folder.write_mesh(rec)
    assert load_case_inputs(folder.dir)[3].lines_z[1] == rec["mesh"]["lines_z"][1] != ref.lines_z[1]
