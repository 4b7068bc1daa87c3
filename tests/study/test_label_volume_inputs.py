"""Study files with a label-volume phantom: bad volumes refused by the command (one line naming the file and
the defect in the study file's keys and mm, exit 2, nothing written), relative paths read from the study's
folder, and the file's content in the case identity."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import yaml

from bodysweep.workflow import cli
from bodysweep.workflow.study import expand, load_study

TABLE = [{"label": 1, "tissue": "skin_wet"}, {"label": 2, "tissue": "muscle"}]


def slab_labels() -> np.ndarray:
    a = np.full((10, 10, 10), 2, dtype=np.uint8)
    a[:, :, -1] = 1
    return a


def _study(name: str, file: str, **phantom) -> dict:
    """A label volume in the base scene; a sweep between it and a layered slab (option ``slab``)."""
    vol = {"type": "label_volume", "file": file, "voxel_size_mm": [4, 4, 2], "labels": TABLE, **phantom}
    slab = {"type": "layered_slab", "size_x_mm": 40, "size_y_mm": 40,
            "layers": [{"tissue": "skin_wet", "thickness_mm": 2}, {"tissue": "muscle", "thickness_mm": 18}]}
    return {"study": name, "frequencies_MHz": [915],
            "scene": {"phantom": vol,
                      "external": {"type": "dipole", "length_mm": 30, "feed_gap_mm": 2, "axis": "x",
                                   "strip_width_mm": 2, "standoff_mm": 6},
                      "implant": {"type": "dipole", "length_mm": 10, "feed_gap_mm": 2, "axis": "x", "depth_mm": 6}},
            "solver": {"preset": "draft"}, "sar": {"masses_g": [1, 10]},
            "sweep": {"parameters": {"body": {"path": "scene.phantom", "options": {"volume": dict(vol), "slab": slab}},
                                     },
                      "blocks": [{"list": [{"body": "volume"}, {"body": "slab"}]}]}}


CORPUS = {  # kind: (words in the message, how the file or the study is made wrong)
    "label_without_tissue": "label(s) 7 (1 voxels) have no tissue",
    "voxel_size_in_metres": "larger than 2500 mm; check voxel_size_mm",  # 4 mm typed as 4000 (um taken for mm)
    "missing_file": "no such file",
    "corrupt_file": "not a readable .npy file",
    "non_integer_labels": "non-integer labels",
    "implant_in_air": "implant outside the phantom",  # the volume does not reach the implant
    "lifted_into_antenna": "lifts the tissue above z = 0",
    "crop_outside_volume": "holds no voxel",
    "unknown_tissue": "scene.phantom.labels.1.tissue: unknown tissue (did you mean muscle?)",
}


@pytest.mark.parametrize("kind", sorted(CORPUS))
def test_bad_label_volume_refused_by_the_command(tmp_path, monkeypatch, capsys, kind):
    """Bad-input corpus for label volumes."""
    sub = tmp_path / "study"
    sub.mkdir()
    arr = slab_labels()
    phantom: dict = {}
    if kind == "label_without_tissue":
        arr[3, 3, 3] = 7
    elif kind == "non_integer_labels":
        arr = arr.astype(np.float32) * 0.5
    elif kind == "voxel_size_in_metres":
        phantom = {"voxel_size_mm": [4000, 4000, 2000]}
    elif kind == "implant_in_air":
        arr[:, :, :8] = 0  # only 4 mm of tissue left; the implant sits 6 mm deep
    elif kind == "lifted_into_antenna":
        phantom = {"offset_mm": [0, 0, 8]}
    elif kind == "crop_outside_volume":
        phantom = {"crop_from_mm": [100, 0, 0], "crop_to_mm": [140, 40, 20]}
    elif kind == "unknown_tissue":
        phantom = {"labels": [TABLE[0], {"label": 2, "tissue": "muscel"}]}
    if kind == "corrupt_file":
        (sub / "body.npy").write_bytes(b"\x93NUMPY\x01\x00garbage")
    elif kind != "missing_file":
        np.save(sub / "body.npy", arr)
    path = sub / "s.yaml"
    path.write_text(yaml.safe_dump(_study("bad_volume", "body.npy", **phantom)))
    monkeypatch.chdir(tmp_path)
    rc = cli.main(["run", str(path), "--cores", "1", "--accept-cost"])
    err = capsys.readouterr().err.strip()
    assert rc == 2
    assert len(err.splitlines()) == 1 and CORPUS[kind] in err, err
    assert "body.npy" in err or kind in ("implant_in_air", "unknown_tissue"), err  # these name the study file's key
    assert "_m " not in err and not err.rstrip(")").endswith("_m"), err  # the study file's keys (…_mm), not SI ones
    assert not (tmp_path / "results").exists() and not (sub / "results").exists()  # nothing written


def test_relative_file_and_content_hash_in_identity(tmp_path, monkeypatch):
    sub = tmp_path / "study"
    sub.mkdir()
    np.save(sub / "body.npy", slab_labels())
    path = sub / "s.yaml"
    path.write_text(yaml.safe_dump(_study("volume_ids", "body.npy")))
    monkeypatch.chdir(tmp_path)  # the file is found beside the study file, not in the working folder
    before = {c.label: c.case_id for c in expand(load_study(path))}
    assert before == {c.label: c.case_id for c in expand(load_study(path))}
    arr = slab_labels()
    arr[:, :, -2:] = 1  # the user edits the segmentation: 4 mm of skin
    np.save(sub / "body.npy", arr)
    after = {c.label: c.case_id for c in expand(load_study(path))}
    vol = next(k for k in before if "volume" in k)
    slab = next(k for k in before if "slab" in k)
    assert after[vol] != before[vol]  # the case using the file reruns
    assert after[slab] == before[slab]  # the other keeps its id


def test_moving_the_study_folder_keeps_the_ids(tmp_path):
    ids = []
    for folder in ("a", "b"):
        sub = tmp_path / folder
        sub.mkdir()
        np.save(sub / "body.npy", slab_labels())
        (sub / "s.yaml").write_text(yaml.safe_dump(_study("volume_ids", "body.npy")))
        cases = expand(load_study(sub / "s.yaml"))
        ids.append(sorted(c.case_id for c in cases))
        assert any(c.scene["phantom"].get("file") == str(sub / "body.npy") for c in cases)  # case.json keeps the path
    assert ids[0] == ids[1]


def test_solve_record_keeps_the_path_and_hashes_without_it(tmp_path):
    """solve.json keeps the volume's path for the scene step; its hash (the solve id) leaves the path out."""
    from bodysweep.workflow.store import solve_record, verify_solve, write_solve_record

    np.save(tmp_path / "body.npy", slab_labels())
    (tmp_path / "s.yaml").write_text(yaml.safe_dump(_study("volume_rec", "body.npy")))
    case = next(c for c in expand(load_study(tmp_path / "s.yaml")) if "volume" in c.label).to_dict()
    rec = solve_record(case)
    assert rec["scene"]["phantom"]["file"] == str(tmp_path / "body.npy") and len(rec["scene"]["phantom"]["sha256"]) == 64
    write_solve_record(tmp_path / "store", case)
    problems = verify_solve(tmp_path / "store", case["solve_id"], [1])
    assert not any("hashes to" in p for p in problems), problems  # the record hashes to its folder name
