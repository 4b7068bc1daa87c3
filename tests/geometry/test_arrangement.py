"""Arrangement guards (geometry.arrangement): distances by hand, errors through Scene, warnings through `check`."""
from pathlib import Path

import numpy as np
import pytest
import yaml

from bodysweep.geometry import arrangement
from bodysweep.geometry.primitives import Box, Cylinder, Polygon
from bodysweep.geometry.scene import Scene
from bodysweep.workflow import cli

MINIMAL = Path(__file__).parents[1] / "study" / "good" / "minimal.yaml"
BAD = Path(__file__).parent / "bad_arrangements"


def test_distance_to_primitives_by_hand():
    # analytic distances: point-box, point-cylinder (axis distance minus radius), point-sheet polygon
    box = Box("b", "pec", (0, 0, 0), (1, 1, 1))
    assert arrangement.distance_to_primitive([[2, 0.5, 0.5], [0.5, 0.5, 0.5], [2, 2, 1]], box) == pytest.approx(
        [1.0, 0.0, np.sqrt(2)])
    cyl = Cylinder("c", "pec", (0, 0, 0), (0, 0, 1), 0.1)
    assert arrangement.distance_to_primitive([[0.5, 0, 0.5], [0, 0, 2]], cyl) == pytest.approx([0.4, 1.0])
    tri = Polygon("p", "pec", "z", 0.2, ((0, 0), (1, 0), (0, 1)))
    d = arrangement.distance_to_primitive([[0.2, 0.2, 0.5], [1, 1, 0.2], [0.2, 0.2, 0.2]], tri)
    assert d == pytest.approx([0.3, np.sqrt(2) / 2, 0.0])  # above the inside; beside the hypotenuse; on the sheet


def _scene(**edits):
    d = yaml.safe_load(MINIMAL.read_text())["scene"]
    for k, v in edits.items():
        d[k] = v
    return d


def test_rod_clear_of_the_antenna_passes_and_touching_fails():
    # external strip at z = 5 mm (standoff), x in [-30, 30] mm: a rod ending 1 mm below is clear; one through it is not
    ok = _scene(concentrators=[{"type": "rod", "anchor": "surface", "start_mm": [20, 0, -3], "stop_mm": [20, 0, 3.5],
                                "radius_mm": 0.5, "conductor": "pec"}])
    Scene.from_edge_dict(ok)
    bad = _scene(concentrators=[{"type": "rod", "anchor": "surface", "start_mm": [20, 0, -3], "stop_mm": [20, 0, 6],
                                 "radius_mm": 0.5, "conductor": "pec"}])
    with pytest.raises(ValueError, match=r"concentrator 0 \(rod\) crosses the external antenna's conductor"):
        Scene.from_edge_dict(bad)


def _check(tmp_path, capsys, monkeypatch, study: dict, thin_wire: bool = False):
    if not thin_wire:  # give minimal.yaml's implant wire a radius, so that only the warning under test shows
        study["scene"]["implant"]["wire_radius_mm"] = 0.3
    p = tmp_path / "s.yaml"
    p.write_text(yaml.safe_dump(study, sort_keys=False))
    monkeypatch.chdir(tmp_path)
    rc = cli.main(["check", str(p)])
    return rc, [ln for ln in capsys.readouterr().err.splitlines() if ln.strip()]


def test_overhanging_antenna_is_a_warning(tmp_path, capsys, monkeypatch):
    # a 60 mm dipole centred at x = 20 mm reaches x = 50 mm; the 80 mm slab ends at 40 mm: 10 mm overhang
    study = yaml.safe_load(MINIMAL.read_text())
    study["scene"]["external"]["position_mm"] = [20, 0]
    rc, err = _check(tmp_path, capsys, monkeypatch, study)
    assert rc == 0 and len(err) == 1
    assert err[0].startswith("warning: external antenna overhangs the slab's side x = 40 mm by 10 mm")
    assert list(tmp_path.iterdir()) == [tmp_path / "s.yaml"]  # check writes nothing


def test_capsule_across_an_interface_is_a_warning_naming_both_tissues(tmp_path, capsys, monkeypatch):
    # capsule 4 mm high centred 5 mm deep: z from -3 to -7 mm; skin 0-2 mm, fat 2-6 mm, muscle 6-36 mm
    study = yaml.safe_load(MINIMAL.read_text())
    study["scene"]["implant"]["depth_mm"] = 5
    rc, err = _check(tmp_path, capsys, monkeypatch, study)
    assert rc == 0 and len(err) == 1
    assert ("implant capsule straddles a tissue interface: it lies partly in fat_not_infiltrated (layer 1) and "
            "partly in muscle (layer 2)") in err[0]
    study["scene"]["implant"]["depth_mm"] = 10  # -8 to -12 mm: all muscle, no warning
    rc, err = _check(tmp_path, capsys, monkeypatch, study)
    assert rc == 0 and err == []


def test_implant_into_bone_is_refused_with_one_line(tmp_path, capsys, monkeypatch):
    # hand calculation: core starts 2 + 3 + 14 = 19 mm below the skin; capsule 4 mm high at 18 mm reaches 20 mm
    monkeypatch.chdir(tmp_path)
    rc = cli.main(["check", str(BAD / "geometry_implant_into_bone.yaml")])
    err = [ln for ln in capsys.readouterr().err.splitlines() if ln.strip()]
    assert rc == 2 and len(err) == 1
    assert "implant capsule reaches 1 mm into the limb's core (bone_cortical, radius 6 mm) at depth_mm = 18" in err[0]
    assert list(tmp_path.iterdir()) == []


def test_rod_through_the_antenna_is_refused_with_one_line(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    rc = cli.main(["check", str(BAD / "geometry_rod_through_antenna.yaml")])
    err = [ln for ln in capsys.readouterr().err.splitlines() if ln.strip()]
    assert rc == 2 and len(err) == 1 and err[0].startswith("bodysweep: error: ")
    assert "concentrator 0 (rod) crosses the external antenna's conductor" in err[0]
    assert list(tmp_path.iterdir()) == []


def test_wire_without_radius_is_a_warning(tmp_path, capsys, monkeypatch):
    # minimal.yaml's implant is a dipole of wire_radius_mm 0: a line of cell edges, whose effective radius is a
    # fraction of the adjacent cell (common practice of FDTD thin-wire modelling), so it is warned at check
    study = yaml.safe_load(MINIMAL.read_text())
    rc, err = _check(tmp_path, capsys, monkeypatch, study, thin_wire=True)
    assert rc == 0 and len(err) == 1
    assert err[0].startswith("warning: the implant dipole is a wire without radius (scene.implant.wire_radius_mm 0)")
