"""A study whose body is a label volume and whose external antenna is an STL part, through the whole pipeline.

The tiny study's scene with its slab written as a label volume (relative path beside the study file) and,
in a second case, its strip dipole read from an STL file: ``run`` must solve both from the store of solves
(whose ``solve.json`` holds the parts by content hash and their paths under ``files``), ``verify`` must
find nothing wrong. Offsetting the volume is a sweepable value like any other.
"""
from __future__ import annotations

import os
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "geometry"))

from test_cad import strip_dipole_mm, write_stl  # noqa: E402

from bodysweep.workflow import cli  # noqa: E402

pytestmark = [pytest.mark.pipeline, pytest.mark.timeout(900)]

TINY = Path(__file__).parent / "data" / "tiny.yaml"


def test_label_volume_and_stl_part_run_through_the_store(tmp_path, capsys):
    study = yaml.safe_load(TINY.read_text())
    sub = tmp_path / "study"
    (sub / "parts").mkdir(parents=True)
    labels = np.full((10, 10, 10), 2, dtype=np.uint8)
    labels[:, :, -1] = 1
    np.save(sub / "parts" / "slab.npy", labels)
    write_stl(sub / "parts" / "dipole.stl", strip_dipole_mm(30, 2, 2, 1))
    layers = study["scene"]["phantom"]["layers"]
    study["study"] = "volume_stl"
    study["scene"]["phantom"] = {"type": "label_volume", "file": "parts/slab.npy", "voxel_size_mm": [4, 4, 2],
                                 "offset_mm": [0, 0, 0],
                                 "labels": [{"label": 1, "tissue": layers[0]["tissue"]},
                                            {"label": 2, "tissue": layers[1]["tissue"]}]}
    dipole = dict(study["scene"]["external"])
    stl = {"type": "cad", "file": "parts/dipole.stl", "unit": "mm", "feed_axis": "x", "feed_start_mm": [-1, -1, 0],
           "feed_stop_mm": [1, 1, 0], "standoff_mm": dipole["standoff_mm"]}
    study["sweep"] = {"parameters": {"ext": {"path": "scene.external", "options": {"strip": dipole, "stl": stl}},
                                     "shift": "scene.phantom.offset_mm.0"},
                      "blocks": [{"list": [{"ext": "strip", "shift": 0}, {"ext": "stl", "shift": 4}]}]}
    path = sub / "s.yaml"
    path.write_text(yaml.safe_dump(study))
    old = os.getcwd()
    os.chdir(tmp_path)
    try:
        rc = cli.main(["run", str(path), "--cores", "2", "--accept-cost"])
        out = capsys.readouterr()
        assert rc == 0, out.out[-3000:] + out.err[-3000:]
        assert cli.main(["verify", str(path)]) == 0, capsys.readouterr().out[-2000:]
    finally:
        os.chdir(old)
    summary = pd.read_csv(tmp_path / "results" / "volume_stl" / "tables" / "summary.csv")
    assert len(summary) == 2 and set(summary["status"]) <= {"ok", "warning"}, summary[["label", "status", "reason"]]
    assert np.all(summary["peak_SAR_10g_W_per_kg_per_W"] > 0)
