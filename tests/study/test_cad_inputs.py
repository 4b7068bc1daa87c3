"""Study files with CAD parts: bad files refused by the command (one line, exit 2, nothing written),
relative paths read from the study's folder, and the file's content in the case identity."""
from __future__ import annotations

import sys
from pathlib import Path

import pytest
import yaml

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "geometry"))

from test_cad import box_triangles, strip_dipole_mm, write_stl  # noqa: E402

from bodysweep.workflow import cli  # noqa: E402
from bodysweep.workflow.study import expand, load_study  # noqa: E402


def _study(name: str, file: str, unit: str = "mm") -> dict:
    """The base scene's external and the option ``stl`` are separate mappings (no YAML alias between them)."""
    cad = lambda: {"type": "cad", "file": file, "unit": unit, "feed_axis": "x", "feed_start_mm": [-1, -1, 0],
           "feed_stop_mm": [1, 1, 0], "standoff_mm": 8}
    dipole = {"type": "dipole", "length_mm": 50, "feed_gap_mm": 2, "axis": "x", "strip_width_mm": 2, "standoff_mm": 8}
    return {"study": name, "frequencies_MHz": [2450],
            "scene": {"phantom": {"type": "layered_slab", "size_x_mm": 70, "size_y_mm": 40,
                                  "layers": [{"tissue": "muscle", "thickness_mm": 20}]}, "external": cad()},
            "solver": {"preset": "draft"}, "sar": {"masses_g": [1, 10]},
            "sweep": {"parameters": {"ext": {"path": "scene.external", "options": {"stl": cad(), "strip": dipole}}},
                      "blocks": [{"list": [{"ext": "stl"}, {"ext": "strip"}]}]}}


@pytest.mark.parametrize("kind,words", [("open", "is not closed"), ("unit", "check unit"), ("missing", "no such file")])
def test_bad_cad_file_refused_by_the_command(tmp_path, monkeypatch, capsys, kind, words):
    """Bad-input corpus for CAD parts: an open mesh, a file in mm declared in m (1000 times too big), no file."""
    sub = tmp_path / "study"
    sub.mkdir()
    if kind == "open":
        write_stl(sub / "part.stl", box_triangles((-25, -1, 0), (25, 1, 1))[:-1])
    elif kind == "unit":
        write_stl(sub / "part.stl", strip_dipole_mm(50, 2, 2, 1))
    path = sub / "s.yaml"
    path.write_text(yaml.safe_dump(_study("bad_cad", "part.stl", "m" if kind == "unit" else "mm")))
    monkeypatch.chdir(tmp_path)
    rc = cli.main(["run", str(path), "--cores", "1", "--accept-cost"])
    err = capsys.readouterr().err.strip()
    assert rc == 2
    assert len(err.splitlines()) == 1 and "part.stl" in err and words in err, err
    assert not (tmp_path / "results").exists() and not (sub / "results").exists()  # nothing written


def test_relative_file_and_content_hash_in_identity(tmp_path, monkeypatch):
    sub = tmp_path / "study"
    sub.mkdir()
    stl = sub / "part.stl"
    write_stl(stl, strip_dipole_mm(50, 2, 2, 1))
    path = sub / "s.yaml"
    path.write_text(yaml.safe_dump(_study("cad_ids", "part.stl")))
    monkeypatch.chdir(tmp_path)  # the file is found beside the study file, not in the working folder
    before = {c.label: c.case_id for c in expand(load_study(path))}
    again = {c.label: c.case_id for c in expand(load_study(path))}
    assert before == again  # the same file gives the same ids
    write_stl(stl, strip_dipole_mm(52, 2, 2, 1))  # the user edits the part
    after = {c.label: c.case_id for c in expand(load_study(path))}
    stl_label = next(k for k in before if "stl" in k)
    strip_label = next(k for k in before if "strip" in k)
    assert after[stl_label] != before[stl_label]  # the case using the file reruns
    assert after[strip_label] == before[strip_label]  # the other case keeps its id


def test_moving_the_study_folder_keeps_the_ids(tmp_path):
    """The identity holds the file's hash, not its path: a copied study folder gives the same case ids."""
    ids = []
    data = Path(write_stl(tmp_path / "part.stl", strip_dipole_mm(50, 2, 2, 1))).read_bytes()
    for folder in ("a", "b"):
        sub = tmp_path / folder
        sub.mkdir()
        (sub / "part.stl").write_bytes(data)  # the same bytes (numpy-stl writes the file name into the header)
        (sub / "s.yaml").write_text(yaml.safe_dump(_study("cad_ids", "part.stl")))
        cases = expand(load_study(sub / "s.yaml"))
        ids.append(sorted(c.case_id for c in cases))
        assert any(c.scene["external"].get("file") == str(sub / "part.stl") for c in cases)  # case.json keeps the path
    assert ids[0] == ids[1]


def test_rotation_is_sweepable(tmp_path):
    write_stl(tmp_path / "part.stl", strip_dipole_mm(50, 2, 2, 1))
    d = _study("cad_rot", "part.stl")
    d["sweep"] = {"parameters": {"turn": "scene.external.rotation_deg.2"}, "blocks": [{"list": [{"turn": 0}, {"turn": 90}]}]}
    d["scene"]["external"]["rotation_deg"] = [0, 0, 0]
    d["scene"]["external"].update(feed_axis="x", feed_start_mm=[-1, 0, 0], feed_stop_mm=[1, 0, 0])
    path = tmp_path / "s.yaml"
    path.write_text(yaml.safe_dump(d))
    with pytest.raises(Exception, match="feed_axis x"):  # a quarter turn about z sends the x gap along y
        expand(load_study(path))
    d["sweep"]["blocks"] = [{"list": [{"turn": 0}, {"turn": 180}]}]
    path.write_text(yaml.safe_dump(d))
    cases = expand(load_study(path))
    assert len({c.case_id for c in cases}) == 2
    assert [c.scene["external"]["rotation_deg"][2] for c in cases] == [0.0, 180.0]
