"""Half-domain solve with an electric wall on a symmetry plane (solver setting ``mirror_plane``).

Reference: image theory / the mirror symmetry of Maxwell's equations (Balanis, Advanced Engineering
Electromagnetics, 2nd ed., §7.4): a structure that is its own image in the plane ``x = 0``, driven by
currents along x that are even about the plane, has zero tangential E on it, so the plane may be
replaced by a perfect electric conductor and half the domain solved (symmetry walls in FDTD:
common practice). The half-structure port holds half the gap: half the voltage, the same current.
"""
from __future__ import annotations

import json
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from bodysweep.geometry.scene import Scene
from bodysweep.workflow.solver import mirror
from bodysweep.workflow.meshing.mesh import auto_mesh
from bodysweep.workflow.meshing.settings import settings_from_dict
from bodysweep.workflow.study import expand, load_study

TINY = Path(__file__).resolve().parents[1] / "pipeline" / "data" / "tiny.yaml"


def _tiny_case():
    return expand(load_study(TINY))[0]


def _model(case):
    return Scene.from_dict(case.scene).build(case.frequency_Hz)


def test_setting_off_leaves_the_settings_dict_and_case_ids_alone():
    # identity (DEVELOPERS.md "Identity"): a default-off setting must not enter the hashed content
    d = settings_from_dict({"preset": "draft"}).to_dict()
    assert "mirror_plane" not in d
    on = settings_from_dict({"preset": "draft", "mirror_plane": "x"})
    assert on.to_dict()["mirror_plane"] == "x" and settings_from_dict(on.to_dict()) == on
    with pytest.raises(ValueError, match="mirror_plane"):
        settings_from_dict({"mirror_plane": "w"})
    with pytest.raises(ValueError, match="engine_sar_average"):
        settings_from_dict({"mirror_plane": "x", "engine_sar_average": True})


def test_symmetry_check_accepts_the_tiny_scene_and_refuses_broken_symmetry():
    case = _tiny_case()
    model = _model(case)
    mirror.check_symmetric(model, "x")  # slab centred, both dipoles along x centred on x = 0
    with pytest.raises(ValueError, match="port 1 .* points along x"):
        mirror.check_symmetric(model, "y")  # the wall must cut the feeds, not contain them
    with pytest.raises(ValueError, match="not symmetric about z = 0"):
        mirror.check_symmetric(model, "z")
    scene = json.loads(json.dumps(case.scene))
    scene["implant"]["position_m"] = [0.001, 0.0]  # implant moved 1 mm along x: no longer symmetric
    shifted = Scene.from_dict(scene).build(case.frequency_Hz)
    with pytest.raises(ValueError, match="not symmetric about x = 0"):
        mirror.check_symmetric(shifted, "x")


def test_half_mesh_ends_on_the_wall_and_fields_unfold_as_images():
    case = _tiny_case()
    model = _model(case)
    s = settings_from_dict(case.solver)
    full, half = auto_mesh(model, s), auto_mesh(model, replace(s, mirror_plane="x"))
    assert half.lines_x[0] == 0.0 and half.interior_bounds[0][0] == 0.0
    assert np.array_equal(half.lines_y, full.lines_y) and np.array_equal(half.lines_z, full.lines_z)
    # image of a field on the half x >= 0 (Balanis §7.4): E_y, E_z odd, E_x even about x = 0
    rng = np.random.default_rng(1)
    E = rng.normal(size=(3, 2, 1, 1)) + 0j
    arrays = {"E_V_per_m": E, "sigma_S_per_m": np.ones((2, 1, 1)), "density_kg_m3": np.ones((2, 1, 1)),
              "volume_m3": np.ones((2, 1, 1)), "x_m": np.array([0.5, 1.5]), "x_edges_m": np.array([0.0, 1.0, 2.0])}
    out = mirror.mirror_fields(arrays, "x")
    assert np.allclose(out["x_edges_m"], [-2, -1, 0, 1, 2]) and np.allclose(out["x_m"], [-1.5, -0.5, 0.5, 1.5])
    assert np.allclose(out["E_V_per_m"][0, ::-1], out["E_V_per_m"][0])
    assert np.allclose(out["E_V_per_m"][1:, ::-1], -out["E_V_per_m"][1:])


@pytest.mark.solver
def test_solve_refuses_an_asymmetric_case_with_the_reason(tmp_path):
    from bodysweep.workflow.solver.run import solve_excitation

    c = _tiny_case().to_dict()
    c["scene"]["implant"]["position_m"] = [0.001, 0.0]  # 1 mm off the plane x = 0
    c["solver"] = {**c["solver"], "mirror_plane": "x"}
    (tmp_path / "case.json").write_text(json.dumps(c))
    st = solve_excitation(tmp_path, 1, threads=1)
    assert st["status"] == "failed" and "not symmetric about x = 0" in st["reason"], st["reason"]


@pytest.mark.solver
def test_half_domain_gives_the_full_domain_s_parameters_and_sar(tmp_path):
    from bodysweep.workflow.finish import finish_case
    from bodysweep.workflow.solver.run import solve_excitation

    case = _tiny_case()
    metrics, status = {}, {}
    for name, extra in (("full", {}), ("half", {"mirror_plane": "x"})):
        d = tmp_path / name
        d.mkdir()
        c = case.to_dict()
        # openEMS checks its end criterion only every 4 s of wall time: room for the half run to reach it
        c["solver"] = {**c["solver"], "max_timesteps": 60000, **extra}
        (d / "case.json").write_text(json.dumps(c))
        status[name] = solve_excitation(d, 1, threads=1)
        assert status[name]["status"] == "ok", status[name]["reason"]
        metrics[name] = finish_case(d)
        assert metrics[name]["status"] in ("ok", "warning"), metrics[name]["reason"]
    # half the cells (plus the wall's own line), Balanis §7.4 halves the domain
    assert status["half"]["cells"] < 0.55 * status["full"]["cells"]
    f, h = metrics["full"], metrics["half"]
    for key in ("S11", "S21"):
        sf, sh = complex(*f[key]), complex(*h[key])
        # image theory makes them equal; the discretisations differ only by the wall's mesh line at
        # x = 0 (the full mesh has none there): |S| within 0.2 dB, phase within 2 degrees
        assert abs(20 * np.log10(abs(sh) / abs(sf))) < 0.2, (key, sf, sh)
        assert abs(np.degrees(np.angle(sh / sf))) < 2.0, (key, sf, sh)
    # accepted power: the half run's twice its own, equal to the full run's (SAR normalisation)
    assert abs(h["accepted_power_port1_W"] / f["accepted_power_port1_W"] - 1) < 0.02
    for rf, rh in zip(f["sar"], h["sar"]):
        assert rf["mass_kg"] == rh["mass_kg"]
        # peak 1 g / 10 g SAR per W within 2 % (cubes straddling the wall see the unfolded field)
        assert abs(rh["peak_W_per_kg_per_W"] / rf["peak_W_per_kg_per_W"] - 1) < 0.02, (rf, rh)


def test_cad_part_symmetric_about_x_and_not_about_y(tmp_path):
    """An STL dipole centred on x = 0 is its own mirror image about x = 0; shifted along y it has no image
    about y = 0 (analytic: the reflection of the shifted part lies on the other side)."""
    import sys
    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "geometry"))
    from test_cad import strip_dipole_mm, write_stl

    f = write_stl(tmp_path / "d.stl", strip_dipole_mm(50, 2, 2, 1))
    ext = {"type": "cad", "file": f, "unit": "mm", "feed_start_m": [-0.001, 0.0, 0.0],
           "feed_stop_m": [0.001, 0.0, 0.0], "feed_axis": "x", "standoff_m": 0.005}
    model = Scene.from_dict({"phantom": {"type": "none"}, "external": ext}).build(2.45e9)
    mirror.check_symmetric(model, "x")
    shifted = Scene.from_dict({"phantom": {"type": "none"}, "external": dict(ext, offset_m=[0.0, 0.003, 0.0])})
    with pytest.raises(ValueError, match="not symmetric about y"):
        mirror.check_symmetric(shifted.build(2.45e9), "y")
