"""Phantom builders: layer positions (hand calculation), priorities, mesh hints, error paths."""
import numpy as np
import pytest

from bodysweep.geometry.model import SceneModel
from bodysweep.geometry.phantoms import (CELLS_PER_LAYER, Layer, LayeredCylinder, LayeredSlab, LiquidBox,
                                         phantom_from_dict)
from bodysweep.geometry.primitives import Material
from bodysweep.geometry.raster import material_at
from bodysweep.geometry.tissues import Dielectric


def _model(build, names):
    mats = tuple(Material(n, "dielectric", 2.0, 0.1, 1000.0, True) for n in names)
    return SceneModel(1e9, mats, build.primitives, (), body_bounds=build.body_bounds, hints=build.hints)


SLAB = LayeredSlab((Layer("skin_dry", 0.002), Layer("fat_not_infiltrated", 0.004), Layer("muscle", 0.03)), 0.08, 0.06)


def test_slab_layers_stack_downward_from_zero():
    b = SLAB.build()
    # hand calculation: faces at 0, -2, -6, -36 mm
    assert np.allclose(SLAB.interfaces_z(), [0.0, -0.002, -0.006, -0.036])
    zs = [(p.bounds()[0][2], p.bounds()[1][2]) for p in b.primitives]
    assert np.allclose(zs, [(-0.002, 0.0), (-0.006, -0.002), (-0.036, -0.006)])
    assert b.body_bounds == ((-0.04, -0.03, -0.036), (0.04, 0.03, 0.0))
    # deeper layers have higher priority, so a shared face belongs to the deeper layer
    pr = [p.priority for p in b.primitives]
    assert pr == sorted(pr) and len(set(pr)) == 3
    m = _model(b, ["skin_dry", "fat_not_infiltrated", "muscle"])
    assert material_at(m, [(0, 0, -0.001), (0, 0, -0.002), (0, 0, -0.004), (0, 0, -0.02), (0, 0, 0.001),
                           (0.05, 0, -0.001)]) == ["skin_dry", "fat_not_infiltrated", "fat_not_infiltrated",
                                                   "muscle", "air", "air"]


def test_slab_hints_allow_two_cells_per_layer():
    b = SLAB.build()
    for layer, top, bottom in zip(SLAB.layers, SLAB.interfaces_z()[:-1], SLAB.interfaces_z()[1:]):
        caps = [h for h in b.hints if h.axis == "z" and h.max_cell > 0 and np.isclose(h.lo, bottom)
                and np.isclose(h.hi, top)]
        assert caps and layer.thickness_m / caps[0].max_cell >= CELLS_PER_LAYER
        lines = {round(h.lo, 12) for h in b.hints if h.lo == h.hi}
        assert round(top, 12) in lines and round(bottom, 12) in lines


def test_slab_round_trip_and_contains():
    assert phantom_from_dict(SLAB.to_dict()) == SLAB
    assert list(SLAB.contains([(0, 0, -0.01), (0, 0, 0.001), (0.041, 0, -0.01), (0, 0, -0.037)])) == \
        [True, False, False, False]


@pytest.mark.parametrize("bad,msg", [
    (dict(layers=(Layer("skin_dry", 0.002),), size_x_m=0.0, size_y_m=0.05), "size_x_m must be > 0 m, got 0.0"),
    (dict(layers=(), size_x_m=0.05, size_y_m=0.05), "needs at least one layer"),
])
def test_slab_errors(bad, msg):
    with pytest.raises(ValueError, match=msg):
        LayeredSlab(**bad)


@pytest.mark.parametrize("t", [0.0, -0.001])
def test_layer_thickness_must_be_positive(t):
    with pytest.raises(ValueError, match=f"layer 'fat_not_infiltrated': thickness_m must be > 0 m, got {t}"):
        phantom_from_dict({"type": "layered_slab", "size_x_m": 0.05, "size_y_m": 0.05,
                           "layers": [{"tissue": "skin_dry", "thickness_m": 0.001},
                                      {"tissue": "fat_not_infiltrated", "thickness_m": t}]})


def test_unknown_phantom_type_and_keys():
    with pytest.raises(ValueError, match="phantom: type must be one of"):
        phantom_from_dict({"type": "sphere"})
    with pytest.raises(ValueError, match=r"unknown key\(s\) \['colour'\]"):
        phantom_from_dict({"type": "layered_slab", "size_x_m": 0.05, "size_y_m": 0.05, "colour": "red",
                           "layers": [{"tissue": "skin_dry", "thickness_m": 0.001}]})
    with pytest.raises(ValueError, match=r"layer: unknown key\(s\) \['thickness_mm'\]"):
        Layer.from_dict({"tissue": "skin_dry", "thickness_mm": 1.0})


CYL = LayeredCylinder((Layer("skin_wet", 0.0015), Layer("fat_not_infiltrated", 0.003), Layer("muscle", 0.0145)),
                      "bone_cortical", 0.006, "y", 0.08)


def test_cylinder_axis_below_surface_and_priorities_inner_over_outer():
    b = CYL.build()
    R = 0.006 + 0.0015 + 0.003 + 0.0145  # hand calculation: 25 mm
    assert CYL.outer_radius_m == pytest.approx(R)
    outer = b.primitives[0]
    assert outer.start == (0.0, -0.04, -R) and outer.stop == (0.0, 0.04, -R) and outer.radius == pytest.approx(R)
    assert [p.radius for p in b.primitives] == pytest.approx([0.025, 0.0235, 0.0205, 0.006])
    assert [p.priority for p in b.primitives] == sorted(p.priority for p in b.primitives)
    assert np.allclose(b.body_bounds, ((-R, -0.04, -2 * R), (R, 0.04, 0.0)))
    m = _model(b, ["skin_wet", "fat_not_infiltrated", "muscle", "bone_cortical"])
    # along the top: skin, fat, muscle, then bone at the axis; side of the limb: skin again
    got = material_at(m, [(0, 0, -0.0007), (0, 0, -0.003), (0, 0, -0.01), (0, 0, -R), (R - 0.0007, 0.0, -R),
                          (0.0, 0.0, 0.0001), (R - 0.0001, 0.0, -0.0001)])
    assert got == ["skin_wet", "fat_not_infiltrated", "muscle", "bone_cortical", "skin_wet", "air", "air"]


def test_cylinder_hints_and_round_trip_and_axis_x():
    b = CYL.build()
    skin_caps = [h for h in b.hints if "layer 0" in h.reason and h.max_cell > 0]
    # top, bottom and two sides; each allows >= 2 cells across 1.5 mm
    assert {h.axis for h in skin_caps} == {"z", "x"} and len(skin_caps) == 4
    assert all(0.0015 / h.max_cell >= 2 for h in skin_caps)
    assert phantom_from_dict(CYL.to_dict()) == CYL
    cx = LayeredCylinder(CYL.layers, "bone_cortical", 0.006, "x", 0.05)
    p = cx.build().primitives[0]
    assert p.start == (-0.025, 0.0, -0.025)
    assert list(cx.contains([(0.02, 0, -0.001), (0.03, 0, -0.001), (0, 0.02, -0.001)])) == [True, False, False]


@pytest.mark.parametrize("kw,msg", [
    (dict(axis="z"), "layered cylinder: axis must be one of \\['x', 'y'\\], got 'z'"),
    (dict(core_radius_m=0.0), "core_radius_m must be > 0 m, got 0.0"),
    (dict(length_m=-1.0), "length_m must be > 0 m, got -1.0"),
])
def test_cylinder_errors(kw, msg):
    args = dict(layers=CYL.layers, core_tissue="bone_cortical", core_radius_m=0.006, axis="y", length_m=0.08)
    args.update(kw)
    with pytest.raises(ValueError, match=msg):
        LayeredCylinder(**args)


def test_cylinder_core_must_be_given():
    d = CYL.to_dict()
    del d["core"]
    with pytest.raises(ValueError, match="core must be"):
        phantom_from_dict(d)


def test_liquid_box_shell_over_liquid():
    box = LiquidBox("liq", 0.07, 0.06, 0.04, 0.002, Dielectric("phantom_shell", 3.7, loss_tangent=0.002))
    b = box.build()
    m = _model(b, ["liq", "phantom_shell"])
    assert material_at(m, [(0, 0, -0.001), (0, 0, -0.003), (0, 0, -0.039), (0, 0, -0.041)]) == \
        ["phantom_shell", "liq", "liq", "air"]
    assert b.materials[0].name == "phantom_shell"
    assert phantom_from_dict(box.to_dict()) == box
    assert list(box.contains([(0, 0, -0.001), (0, 0, -0.01)])) == [False, True]


def test_liquid_box_errors():
    with pytest.raises(ValueError, match="shell_thickness_m \\(0.05 m\\) must be smaller than depth_m"):
        LiquidBox("liq", 0.07, 0.06, 0.04, 0.05)
    with pytest.raises(ValueError, match="shell needs thickness_m"):
        phantom_from_dict({"type": "liquid_box", "liquid": "liq", "size_x_m": 0.07, "size_y_m": 0.06,
                           "depth_m": 0.04, "shell": {"eps_r": 3.0}})
    with pytest.raises(ValueError, match="liquid box shell: .*colour"):
        phantom_from_dict({"type": "liquid_box", "liquid": "liq", "size_x_m": 0.07, "size_y_m": 0.06,
                           "depth_m": 0.04, "shell": {"thickness_m": 0.002, "eps_r": 3.0, "colour": 1}})
