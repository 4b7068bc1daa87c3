"""Study files with passive CAD parts (capsule, casing, concentrator): bad files refused by the command (one
line naming the file, exit 2, nothing written), and each file's content in the identity of the cases using it."""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest
import yaml

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "geometry"))

from test_cad import box_triangles, write_stl  # noqa: E402

from bodysweep.workflow import cli  # noqa: E402
from bodysweep.workflow.study import expand, load_study  # noqa: E402

#: the good shape of each part in mm, in its own coordinates (the implant dipole is 10 mm along x, the external
#: strip dipole 50 mm; the concentrator is a plate 4 mm above the implant)
GOOD = {"capsule": ((-7, -2, -2), (7, 2, 2)), "casing": ((-27, -3, -2), (27, 3, 2)),
        "concentrator": ((-10, -1, 3.5), (10, 1, 4.5))}
#: a part of the same kind that cuts (or, the concentrator, crosses) the antenna
CUTTING = {"capsule": ((-4, -2, -2), (4, 2, 2)), "casing": ((-20, -3, -2), (20, 3, 2)),
           "concentrator": ((-10, -1, -0.5), (10, 1, 0.5))}


def _study(name: str, part: str, file: str, unit: str = "mm") -> dict:
    ext = {"type": "dipole", "length_mm": 50, "feed_gap_mm": 2, "strip_width_mm": 2, "standoff_mm": 8}
    imp = {"type": "dipole", "length_mm": 10, "feed_gap_mm": 1, "strip_width_mm": 1, "depth_mm": 8}
    scene = {"phantom": {"type": "layered_slab", "size_x_mm": 60, "size_y_mm": 40,
                         "layers": [{"tissue": "skin_wet", "thickness_mm": 2}, {"tissue": "muscle", "thickness_mm": 18}]},
             "external": ext, "implant": imp}
    if part == "capsule":
        imp["capsule"] = {"shape": "cad", "file": file, "unit": unit, "eps_r": 3.0}
    elif part == "casing":
        ext["casing"] = {"shape": "cad", "file": file, "unit": unit, "eps_r": 3.0}
    else:
        scene["concentrators"] = [{"type": "cad", "file": file, "unit": unit, "anchor": "implant"}]
    return {"study": name, "frequencies_MHz": [2450], "scene": scene, "solver": {"preset": "draft"},
            "sar": {"masses_g": [1, 10]},
            "sweep": {"parameters": {"depth": "scene.implant.depth_mm"}, "blocks": [{"list": [{"depth": 8}, {"depth": 9}]}]}}


@pytest.mark.parametrize("part", ["capsule", "casing", "concentrator"])
@pytest.mark.parametrize("kind,words", [("open", "is not closed"), ("unit", "check unit (m, mm or um)"),
                                        ("cut", None)])
def test_bad_part_refused_by_the_command(tmp_path, monkeypatch, capsys, part, kind, words):
    """Bad-input corpus for passive CAD parts: an open mesh, a file in mm declared in m (1000 times too big),
    a part that cuts the antenna it should hold (or, a concentrator, crosses the implant antenna)."""
    sub = tmp_path / "study"
    sub.mkdir()
    tri = box_triangles(*(CUTTING if kind == "cut" else GOOD)[part])
    write_stl(sub / "part.stl", tri[:-1] if kind == "open" else tri)
    path = sub / "s.yaml"
    d = _study("bad_part", part, "part.stl", "m" if kind == "unit" else "mm")
    if part == "concentrator" and kind == "cut":
        d["scene"]["min_clearance_mm"] = 0  # past the clearance check, to the crossing check
    path.write_text(yaml.safe_dump(d))
    monkeypatch.chdir(tmp_path)
    rc = cli.main(["run", str(path), "--cores", "1", "--accept-cost"])
    err = capsys.readouterr().err.strip()
    words = words or ("crosses the implant antenna's conductor" if part == "concentrator" else "cuts the antenna")
    assert rc == 2
    assert len(err.splitlines()) == 1 and words in err, err
    assert "part.stl" in err or part == "concentrator" and kind == "cut", err
    assert not (tmp_path / "results").exists() and not (sub / "results").exists()  # nothing written


@pytest.mark.parametrize("part", ["capsule", "casing", "concentrator"])
def test_file_content_in_the_identity(tmp_path, part):
    """Editing the file changes the ids of the cases that use it; a study copied elsewhere keeps its ids;
    the same scene without the part has other ids (the part is in the scene)."""
    ids = []
    data = Path(write_stl(tmp_path / "part.stl", box_triangles(*GOOD[part]))).read_bytes()
    for folder in ("a", "b"):
        sub = tmp_path / folder
        sub.mkdir()
        (sub / "part.stl").write_bytes(data)
        (sub / "s.yaml").write_text(yaml.safe_dump(_study("ids", part, "part.stl")))
        ids.append([c.case_id for c in expand(load_study(sub / "s.yaml"))])
    assert ids[0] == ids[1] and len(set(ids[0])) == 2
    lo, hi = (np.asarray(v, dtype=float) for v in GOOD[part])
    write_stl(tmp_path / "b" / "part.stl", box_triangles(lo - 0.5, hi + 0.5))  # the user edits the part
    edited = [c.case_id for c in expand(load_study(tmp_path / "b" / "s.yaml"))]
    assert set(edited).isdisjoint(ids[0])


def test_solve_record_keeps_the_files_the_scene_step_reads(tmp_path):
    """solve.json carries the parts' file paths (the scene step builds from it) while its hash, checked by
    verify, leaves them out: the folder name stays the solve id."""
    from bodysweep.geometry.scene import Scene
    from bodysweep.workflow.store import solve_record, verify_solve, write_solve_record

    write_stl(tmp_path / "part.stl", box_triangles(*GOOD["capsule"]))
    (tmp_path / "s.yaml").write_text(yaml.safe_dump(_study("rec", "capsule", "part.stl")))
    case = expand(load_study(tmp_path / "s.yaml"))[0].to_dict()
    rec = solve_record(case)
    assert rec["scene"]["implant"]["capsule"]["file"] == str(tmp_path / "part.stl")
    Scene.from_dict(rec["scene"])  # what the scene step does with it
    write_solve_record(tmp_path / "store", case)
    problems = verify_solve(tmp_path / "store", case["solve_id"], [1])
    assert problems and not any("hashes to" in p for p in problems), problems  # only the missing run files
