"""Automatic mesh: lambda/N, grading, thin metal on lines, merging, sliver refusal, PML clipping.

Scenes are hand-made SceneModels; material values are round illustrative numbers, not references.
"""
import numpy as np
import pytest
from scipy.constants import c as C0_SCIPY

from bodysweep.geometry.model import MeshHint, SceneModel
from bodysweep.geometry.primitives import Box, Cylinder, Material, Polygon, Port, Wire
from bodysweep.workflow.meshing.mesh import (BODY_REACH_WAVELENGTHS, MeshPlan, MeshRefused, auto_mesh,
                                            check_mesh, merge_fixed_lines)
from bodysweep.workflow.meshing.settings import PRESETS, SolverSettings

MUSCLE = Material("muscle", eps_r=57.0, sigma_S_per_m=0.8, density_kg_m3=1090.0, is_tissue=True)
FAT = Material("fat", eps_r=5.6, sigma_S_per_m=0.04, density_kg_m3=911.0, is_tissue=True)
SKIN = Material("skin", eps_r=46.0, sigma_S_per_m=0.7, density_kg_m3=1100.0, is_tissue=True)
PEC = Material("copper", kind="pec")
PLASTIC = Material("capsule", eps_r=2.6)


def layered_with_dipole(f=403.5e6):
    prims = (Box("skin", "skin", (-0.1, -0.1, -0.002), (0.1, 0.1, 0.0), priority=12),
             Box("fat", "fat", (-0.1, -0.1, -0.012), (0.1, 0.1, -0.002), priority=11),
             Box("muscle", "muscle", (-0.1, -0.1, -0.08), (0.1, 0.1, -0.012), priority=10),
             Wire("arm_a", "copper", ((-0.08, 0, 0.02), (-0.001, 0, 0.02))),
             Wire("arm_b", "copper", ((0.001, 0, 0.02), (0.08, 0, 0.02))),
             Polygon("patch", "copper", "z", -0.02, ((-0.005, -0.005), (0.005, -0.005), (0.005, 0.005),
                                                      (-0.005, 0.005))))
    ports = (Port("p1", 1, (-0.001, 0, 0.02), (0.001, 0, 0.02), "x"),
             Port("p2", 2, (0, 0, -0.021), (0, 0, -0.02), "z"))
    return SceneModel(f, (MUSCLE, FAT, SKIN, PEC), prims, ports, body_bounds=((-0.1, -0.1, -0.08), (0.1, 0.1, 0.0)))


def capsule_with_loop(f=915e6):
    ring = tuple((0.004 * np.cos(t), 0.004 * np.sin(t)) for t in np.linspace(0, 2 * np.pi, 24, endpoint=False))
    prims = (Box("muscle", "muscle", (-0.06, -0.05, -0.05), (0.06, 0.05, 0.0)),
             Cylinder("capsule", "capsule", (0, 0, -0.025), (0, 0, -0.012), 0.0055, priority=50),
             Polygon("loop", "copper", "z", -0.015, ring),
             Wire("ext", "copper", ((-0.03, -0.01, 0.01), (0.03, -0.01, 0.01), (0.03, 0.01, 0.01)), radius=0.0005),
             Wire("diag", "copper", ((-0.01, 0.0, 0.005), (0.01, 0.004, 0.008))))
    ports = (Port("p1", 1, (-0.03, -0.011, 0.01), (-0.03, -0.009, 0.01), "y"),
             Port("p2", 2, (0.004, 0, -0.0152), (0.004, 0, -0.0148), "z"))
    hints = (MeshHint("z", -0.03, -0.008, 0.0008, "implant region"), MeshHint("x", 0.012, 0.012, 0.0, "probe line"))
    return SceneModel(f, (MUSCLE, PEC, PLASTIC), prims, ports, hints=hints,
                      body_bounds=((-0.06, -0.05, -0.05), (0.06, 0.05, 0.0)))


def muscle_block(f=915e6):
    prims = (Box("muscle", "muscle", (-0.04, -0.04, -0.06), (0.04, 0.04, 0.0)),
             Wire("arm", "copper", ((-0.02, 0, 0.01), (-0.0005, 0, 0.01))),
             Wire("arm2", "copper", ((0.0005, 0, 0.01), (0.02, 0, 0.01))))
    ports = (Port("p1", 1, (-0.0005, 0, 0.01), (0.0005, 0, 0.01), "x"),)
    return SceneModel(f, (MUSCLE, PEC), prims, ports, body_bounds=((-0.04, -0.04, -0.06), (0.04, 0.04, 0.0)))


SCENES = {"layered_dipole_403": layered_with_dipole, "capsule_loop_915": capsule_with_loop,
          "muscle_block_915": muscle_block, "layered_dipole_2450": lambda: layered_with_dipole(2.45e9)}
SETTINGS = {**{f"preset_{k}": v for k, v in PRESETS.items()},
            "ratio_1.1": SolverSettings(max_growth_ratio=1.1, air_margin_wavelengths=0.1),
            "ratio_2": SolverSettings(max_growth_ratio=2.0, cells_per_wavelength=10),
            "mur": SolverSettings(boundary="mur")}


@pytest.mark.parametrize("settings_name", sorted(SETTINGS))
@pytest.mark.parametrize("scene_name", sorted(SCENES))
def test_grading_and_basic_validity_on_every_sample_mesh(scene_name, settings_name):
    model, s = SCENES[scene_name](), SETTINGS[settings_name]
    plan = auto_mesh(model, s)
    check_mesh(plan, model, s)
    lam0 = C0_SCIPY / model.frequency_Hz  # scipy.constants
    for ax in range(3):
        h = np.diff(plan.lines(ax))
        assert np.all(h > 0)
        # neighbour ratio <= setting everywhere (the requirement itself, checked independently here)
        assert np.max(np.maximum(h[1:] / h[:-1], h[:-1] / h[1:])) <= s.max_growth_ratio * (1 + 1e-9)
        # no cell larger than lambda0 / N (analytic: free-space wavelength c/f)
        assert h.max() <= lam0 / s.cells_per_wavelength * (1 + 1e-9)
    # every port gap has at least port_cells cells along its axis
    for p in model.ports:
        k = "xyz".index(p.axis)
        lo, hi = sorted((p.start[k], p.stop[k]))
        ln = plan.lines(k)
        assert np.any(np.isclose(ln, lo, atol=1e-12)) and np.any(np.isclose(ln, hi, atol=1e-12))
        assert np.sum((ln > lo - 1e-12) & (ln < hi + 1e-12)) - 1 >= s.port_cells
    # every structure at least the air margin away from the absorbing layer, unless the phantom was clipped
    ilo, ihi = plan.interior_bounds
    blo, bhi = model.bounds()
    margin = s.air_margin_wavelengths * lam0
    for ax, a in enumerate("xyz"):
        if f"{a}-" not in plan.clipped_body:
            assert blo[ax] - ilo[ax] >= margin * (1 - 1e-9)
        if f"{a}+" not in plan.clipped_body:
            assert ihi[ax] - bhi[ax] >= margin * (1 - 1e-9)
        ln = plan.lines(ax)
        n = plan.absorbing_cells
        assert ln[n] == pytest.approx(ilo[ax], abs=1e-12) and ln[-1 - n] == pytest.approx(ihi[ax], abs=1e-12)


def test_lambda_over_n_in_homogeneous_muscle():
    model, s = muscle_block(915e6), SolverSettings(cells_per_wavelength=20)
    plan = auto_mesh(model, s)
    lam_muscle = C0_SCIPY / (915e6 * np.sqrt(57.0))  # analytic: lambda = c / (f sqrt(eps_r))
    lam_air = C0_SCIPY / 915e6
    (x0, y0, z0), (x1, y1, z1) = model.primitives[0].bounds()
    for ax, (a, b) in enumerate([(x0, x1), (y0, y1), (z0, z1)]):
        ln = plan.lines(ax)
        h = np.diff(ln)
        inside = (ln[:-1] >= a - 1e-12) & (ln[1:] <= b + 1e-12)
        assert inside.sum() >= 10
        assert h[inside].max() <= lam_muscle / 20 * (1 + 1e-9)
        # the grading lets the air cells grow: the largest cell is much larger than the muscle limit
        assert h.max() > 2 * lam_muscle / 20
        assert h.max() <= lam_air / 20 * (1 + 1e-9)


def test_thin_wire_and_sheet_lie_on_mesh_lines():
    model = layered_with_dipole()
    plan = auto_mesh(model, PRESETS["standard"])
    on = lambda ax, v: np.any(np.isclose(plan.lines(ax), v, rtol=0, atol=1e-12))  # noqa: E731
    # thin wire along x at y = 0, z = 0.02: its y and z are lines, and its ends are lines
    assert on(1, 0.0) and on(2, 0.02) and on(0, -0.08) and on(0, 0.08)
    # zero-thickness sheet at z = -0.02 and its straight edges
    assert on(2, -0.02) and on(0, -0.005) and on(0, 0.005) and on(1, -0.005) and on(1, 0.005)
    # layer interfaces
    for z in (0.0, -0.002, -0.012, -0.08):
        assert on(2, z)
    # at least min_cells_per_layer cells across the 2 mm skin
    zl = plan.lines(2)
    assert np.sum((zl >= -0.002 - 1e-12) & (zl <= 1e-12)) - 1 >= 2


def test_merge_keeps_the_more_important_of_near_coincident_lines():
    # priorities: port 6 > conductor 4 > dielectric 2; threshold 10 um
    cands = [(0.0, 2, "fat face"), (1e-6, 4, "conductor edge"), (5e-3, 6, "port end"), (5.004e-3, 2, "face"),
             (1e-2, 2, "a"), (1.0005e-2, 2, "b")]
    out = merge_fixed_lines(cands, 1e-5)
    assert [p for p, _, _ in out] == [1e-6, 5e-3, 1e-2]  # equal priority: the first one stays
    assert [w for _, _, w in out] == ["conductor edge", "port end", "a"]


def test_port_lines_of_two_ports_closer_than_the_threshold_both_stay():
    # two feed gaps centred on x = 0: 2 mm and 1.5 mm (ends 0.25 mm apart), threshold 0.3125 mm; a gap end
    # must sit on a line (ports.py), so neither may move; a dielectric face between them still goes
    cands = [(-1e-3, 6, "port 1 gap end"), (-0.75e-3, 6, "port 2 gap end"), (-0.9e-3, 2, "skin face"),
             (0.75e-3, 6, "port 2 gap end"), (1e-3, 6, "port 1 gap end")]
    notes: list[str] = []
    out = merge_fixed_lines(cands, 0.3125e-3, keep_apart=0.15e-3, notes=notes)
    assert [p for p, _, _ in out] == [-1e-3, -0.75e-3, 0.75e-3, 1e-3]  # exact: gaps 2 mm and 1.5 mm kept
    assert len(notes) == 2 and all("kept 0.2500 mm apart" in n for n in notes), notes
    # closer than the smallest cell the mesh check accepts: refused, in mm and with the study's keys
    with pytest.raises(MeshRefused) as e:
        merge_fixed_lines([(-1e-3, 6, "port 1 gap end"), (-0.99e-3, 6, "port 2 gap end")], 0.3125e-3,
                          keep_apart=0.15e-3)
    msg = str(e.value)
    assert "-1.0000 mm (port 1 gap end)" in msg and "-0.9900 mm (port 2 gap end)" in msg
    assert "0.0100 mm apart" in msg and "feed_gap_mm" in msg


def test_two_feed_gaps_at_nearby_positions_mesh_with_every_gap_end_on_a_line():
    # external dipole with a 2 mm gap above, implant dipole with a 1.5 mm gap below, both along x at x = 0,
    # a 2.5 mm skin layer (2.5 mm / 2 cells per layer -> finest 1.25 mm, threshold 0.3125 mm > 0.25 mm)
    prims = (Box("skin", "skin", (-0.02, -0.02, -0.0025), (0.02, 0.02, 0.0), priority=12),
             Box("muscle", "muscle", (-0.02, -0.02, -0.02), (0.02, 0.02, -0.0025), priority=10),
             Wire("ext_a", "copper", ((-0.015, 0, 0.006), (-0.001, 0, 0.006))),
             Wire("ext_b", "copper", ((0.001, 0, 0.006), (0.015, 0, 0.006))),
             Wire("imp_a", "copper", ((-0.005, 0, -0.006), (-0.00075, 0, -0.006))),
             Wire("imp_b", "copper", ((0.00075, 0, -0.006), (0.005, 0, -0.006))))
    ports = (Port("p1", 1, (-0.001, 0, 0.006), (0.001, 0, 0.006), "x"),
             Port("p2", 2, (-0.00075, 0, -0.006), (0.00075, 0, -0.006), "x"))
    model = SceneModel(915e6, (MUSCLE, SKIN, PEC), prims, ports, body_bounds=((-0.02, -0.02, -0.02), (0.02, 0.02, 0)))
    s = SolverSettings(cells_per_wavelength=6, air_margin_wavelengths=0.1, port_cells=1, max_growth_ratio=2.0)
    plan = auto_mesh(model, s)
    assert plan.merge_threshold_m > 0.25e-3
    x = plan.lines_x
    for v in (-1e-3, -0.75e-3, 0.75e-3, 1e-3):  # analytic: each gap end is a line, exactly
        assert np.any(np.abs(x - v) < 1e-15), v
    assert any("kept 0.2500 mm apart" in n for n in plan.notes)
    check_mesh(plan, model, s)  # the solver step accepts it (sliver and grading checks)


def test_near_coincident_faces_in_a_scene_are_merged_by_the_derived_threshold():
    base = muscle_block()
    # two dielectric faces 1 um apart at z = -20 mm (analytic: far below any requested cell size)
    prims = base.primitives + (Box("shim", "muscle", (-0.04, -0.04, -0.020001), (0.04, 0.04, -0.01)),
                               Box("film", "muscle", (-0.04, -0.04, -0.03), (0.04, 0.04, -0.02)))
    model = SceneModel(base.frequency_Hz, base.materials, prims, base.ports, body_bounds=base.body_bounds)
    plan = auto_mesh(model, SolverSettings())
    z = plan.lines_z
    assert np.sum((z >= -0.020001 - 1e-12) & (z <= -0.02 + 1e-12)) == 1
    assert np.diff(z).min() >= plan.merge_threshold_m
    assert any("merged" in n for n in plan.notes)
    check_mesh(plan, model, SolverSettings())


def test_sliver_is_refused_with_axis_and_positions_in_mm():
    base = muscle_block()
    # a layer 1 um thick at z = -20 mm ... -19.999 mm; merging switched off by a tiny min_cell_m
    prims = base.primitives + (Box("film", "muscle", (-0.04, -0.04, -0.020001), (0.04, 0.04, -0.02)),)
    model = SceneModel(base.frequency_Hz, base.materials, prims, base.ports, body_bounds=base.body_bounds)
    s = SolverSettings(min_cell_m=1e-7)
    plan = auto_mesh(model, s)
    # the film is itself the smallest feature, so a cell of its size is not a sliver by itself ...
    check_mesh(plan, model, s)
    # ... but a 1 um cell made by two stray lines in a mesh of mm features is
    z = plan.lines_z
    k = int(np.argmin(np.abs(z - (-0.03))))
    bad_z = np.sort(np.append(z, z[k] + 1e-6))
    bad = MeshPlan(plan.lines_x, plan.lines_y, bad_z, plan.interior_bounds, plan.absorbing_cells,
                   plan.merge_threshold_m)
    with pytest.raises(MeshRefused) as e:
        check_mesh(bad, base, SolverSettings(max_growth_ratio=2.0))
    msg = str(e.value)
    assert msg.startswith("z") or "z:" in msg
    assert f"{z[k]*1e3:.6f} mm" in msg and f"{(z[k]+1e-6)*1e3:.6f} mm" in msg


def test_oversized_slab_is_clipped_at_the_interior_bounds():
    f = 2.45e9
    lam0 = C0_SCIPY / f
    slab = Box("muscle", "muscle", (-2.0, -2.0, -1.0), (2.0, 2.0, 0.0))  # 'semi-infinite' slab
    arm = (Wire("a", "copper", ((-0.02, 0, 0.01), (-0.0005, 0, 0.01))),
           Wire("b", "copper", ((0.0005, 0, 0.01), (0.02, 0, 0.01))))
    port = Port("p1", 1, (-0.0005, 0, 0.01), (0.0005, 0, 0.01), "x")
    model = SceneModel(f, (MUSCLE, PEC), (slab,) + arm, (port,), body_bounds=((-2, -2, -1), (2, 2, 0)))
    s = SolverSettings()
    plan = auto_mesh(model, s)
    assert set(plan.clipped_body) == {"x-", "x+", "y-", "y+", "z-"}
    (x0, y0, z0), (x1, y1, z1) = plan.interior_bounds
    reach = BODY_REACH_WAVELENGTHS * lam0
    assert x0 == pytest.approx(-0.02 - reach) and x1 == pytest.approx(0.02 + reach)
    assert y0 == pytest.approx(-reach) and z0 == pytest.approx(0.01 - reach)
    assert z1 == pytest.approx(0.01 + s.air_margin_wavelengths * lam0)  # air side keeps its margin
    # the clipped slab ends exactly on the PML inner face: line index pml_cells, air (no tissue) beyond
    assert plan.lines_x[s.pml_cells] == pytest.approx(x0) and plan.lines_z[s.pml_cells] == pytest.approx(z0)
    assert len(plan.lines_x) - 1 == plan.shape_cells[0]
    clipped = plan.clip_to_interior(*slab.bounds())
    assert clipped == ((x0, y0, z0), (x1, y1, 0.0))
    # a finite phantom is not clipped and keeps its margin
    plan2 = auto_mesh(muscle_block(915e6), s)
    assert plan2.clipped_body == ()


def test_plan_round_trips_through_a_dict():
    plan = auto_mesh(capsule_with_loop(), SolverSettings())
    back = MeshPlan.from_dict(plan.to_dict())
    for ax in range(3):
        np.testing.assert_array_equal(back.lines(ax), plan.lines(ax))
    assert back.interior_bounds == plan.interior_bounds and back.fixed == plan.fixed
