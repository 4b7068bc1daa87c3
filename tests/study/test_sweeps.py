"""Sweep kinds, their combination, choices, derived values, labels and parameters."""
from __future__ import annotations

import copy
import itertools
from pathlib import Path

import numpy as np
import pytest
import yaml
from scipy.stats import qmc

from bodysweep.workflow.study import StudyError, expand, load_study

GOOD = Path(__file__).parent / "good"


def _minimal() -> dict:
    return yaml.safe_load((GOOD / "minimal.yaml").read_text())


def _study(parameters: dict, blocks: list, **extra) -> dict:
    d = _minimal()
    d["sweep"] = {"parameters": parameters, "blocks": blocks}
    d.update(extra)
    return d


P = {"depth": "scene.implant.depth_mm", "skin": "scene.phantom.layers.0.thickness_mm",
     "fat": "scene.phantom.layers.1.thickness_mm", "len": "scene.implant.length_mm"}


def _values(cases, *paths):
    return [tuple(c.parameters[p] for p in paths) for c in cases]


def test_grid_runs_like_itertools_product():
    depths, fats = [5, 10, 15], [3, 4]
    cases = expand(load_study(_study(P, [{"grid": {"depth": depths, "fat": fats}}])))
    # reference: itertools.product (last-written parameter fastest)
    assert _values(cases, P["depth"], P["fat"]) == list(itertools.product(depths, fats))
    # and the values land in the SI scene (mm -> m, SI prefix)
    assert [c.scene["implant"]["depth_m"] for c in cases] == [d * 1e-3 for d, _ in itertools.product(depths, fats)]


def test_zip_varies_together_and_list_keeps_rows():
    cases = expand(load_study(_study(P, [{"zip": {"skin": [1, 2, 3], "fat": [4, 5, 6]}}])))
    assert _values(cases, P["skin"], P["fat"]) == [(1, 4), (2, 5), (3, 6)]  # reference: builtin zip
    rows = [{"depth": 7, "fat": 3}, {"depth": 5, "fat": 4.5}]
    cases = expand(load_study(_study(P, [{"list": rows}])))
    assert _values(cases, P["depth"], P["fat"]) == [(7, 3), (5, 4.5)]


def test_random_block_equals_numpy_default_rng():
    spec = {"seed": 42, "count": 6, "ranges": {"depth": [5, 20], "len": [8, 12]}, "decimals": None}
    cases = expand(load_study(_study(P, [{"random": spec}])))
    # reference: numpy Generator.uniform with the same seed, columns in the written order
    ref = np.random.default_rng(42).uniform([5, 8], [20, 12], size=(6, 2))
    np.testing.assert_array_equal(np.array(_values(cases, P["depth"], P["len"])), ref)
    assert all(5 <= d < 20 and 8 <= L < 12 for d, L in _values(cases, P["depth"], P["len"]))


def test_latin_hypercube_equals_scipy_and_fills_every_stratum():
    n = 8
    spec = {"seed": 3, "count": n, "ranges": {"depth": [5, 21], "len": [8, 12]}, "decimals": None}
    cases = expand(load_study(_study(P, [{"latin_hypercube": spec}])))
    got = np.array(_values(cases, P["depth"], P["len"]))
    # reference: scipy.stats.qmc.LatinHypercube with the same seed, scaled by qmc.scale
    ref = qmc.scale(qmc.LatinHypercube(d=2, rng=np.random.default_rng(3)).random(n), [5, 8], [21, 12])
    np.testing.assert_allclose(got, ref, rtol=0, atol=0)
    # Latin-hypercube property (McKay, Beckman & Conover 1979): each of the n equal strata of every
    # range holds exactly one sample
    for j, (lo, hi) in enumerate([(5, 21), (8, 12)]):
        strata = np.floor((got[:, j] - lo) / (hi - lo) * n).astype(int)
        assert sorted(strata) == list(range(n))


def test_sampling_rounds_to_decimals_and_is_reproducible():
    spec = {"seed": 9, "count": 4, "ranges": {"depth": [5, 20]}, "decimals": 1}
    a = _values(expand(load_study(_study(P, [{"random": spec}]))), P["depth"])
    b = _values(expand(load_study(_study(P, [{"random": spec}]))), P["depth"])
    assert a == b
    assert all(round(v, 1) == v for (v,) in a)
    spec2 = dict(spec, seed=10)
    assert _values(expand(load_study(_study(P, [{"random": spec2}]))), P["depth"]) != a


def test_blocks_combine_as_a_product_with_frequency_outermost():
    d = _study(P, [{"grid": {"depth": [5, 10]}}, {"zip": {"skin": [1, 2], "fat": [3, 4]}}], frequencies_MHz=[403, 915])
    cases = expand(load_study(d))
    ref = [(f, dep, s, fa) for f in (403.0, 915.0) for dep in (5, 10) for s, fa in ((1, 3), (2, 4))]
    assert _values(cases, "frequency_MHz", P["depth"], P["skin"], P["fat"]) == ref
    assert cases[0].label == "f=403MHz depth=5mm skin=1mm fat=3mm"
    assert [c.frequency_Hz for c in cases] == [r[0] * 1e6 for r in ref]


def test_choice_replaces_a_whole_subtree_and_nested_path_follows_it():
    loop = {"type": "loop", "shape": "circular", "radius_mm": 12, "trace_width_mm": 1.5, "feed_gap_mm": 1,
            "turns": 1, "normal": "z", "position_mm": [0, 0], "standoff_mm": 3, "conductor": "pec"}
    base_ext = _minimal()["scene"]["external"]
    rod = {"type": "rod_pair", "anchor": "implant", "offset_mm": [0, 0, 4.5], "azimuth_deg": 0,
           "rod_length_mm": 8, "gap_mm": 2, "radius_mm": 0.4, "conductor": "pec"}
    params = {"ext": {"path": "scene.external", "options": {"dipole": base_ext, "loop": loop}},
              "standoff": "scene.external.standoff_mm",
              "rods": {"path": "scene.concentrators", "options": {"none": [], "two": [rod, dict(rod, azimuth_deg=90)]}}}
    cases = expand(load_study(_study(params, [{"grid": {"ext": ["dipole", "loop"], "rods": ["none", "two"]}},
                                              {"grid": {"standoff": [2, 4]}}])))
    assert len(cases) == 8
    c = next(c for c in cases if c.parameters["scene.external"] == "loop" and c.parameters["scene.concentrators"] == "two")
    assert c.scene["external"]["type"] == "loop" and c.scene["external"]["radius_m"] == 12e-3
    assert len(c.scene["concentrators"]) == 2
    assert c.scene["external"]["standoff_m"] in (2e-3, 4e-3)
    assert c.label.startswith("f=403MHz ext=loop rods=two standoff=")


def test_path_only_in_one_option_is_conditional_and_left_out_for_the_other():
    # a numeric parameter inside one named option applies only where that option is chosen
    loop = {"type": "loop", "radius_mm": 12, "feed_gap_mm": 1, "standoff_mm": 3}
    params = {"ext": {"path": "scene.external", "options": {"dipole": _minimal()["scene"]["external"], "loop": loop}},
              "r": "scene.external.radius_mm"}
    cases = expand(load_study(_study(params, [{"grid": {"ext": ["loop", "dipole"]}}, {"grid": {"r": [10, 12]}}])),
                   check_scene=False)
    # 2 x 2 rows; the two dipole rows differ only in r, which the dipole does not have: one case
    assert [c.label for c in cases] == ["f=403MHz ext=loop r=10mm", "f=403MHz ext=loop r=12mm", "f=403MHz ext=dipole"]
    assert [c.parameters["scene.external.radius_mm"] for c in cases] == [10, 12, None]
    assert "radius_m" not in cases[2].scene["external"]


def test_choice_not_varied_keeps_the_base_and_its_parameter_applies_everywhere():
    loop = {"type": "loop", "shape": "circular", "radius_mm": 12, "trace_width_mm": 1.5, "feed_gap_mm": 1,
            "turns": 1, "normal": "z", "position_mm": [0, 0], "standoff_mm": 3, "conductor": "pec"}
    d = _minimal()
    d["scene"]["external"] = loop
    params = {"ext": {"path": "scene.external", "options": {"dipole": _minimal()["scene"]["external"], "loop": loop}},
              "r": "scene.external.radius_mm"}
    # the choice is declared but not varied: every case keeps the base (a loop), r applies everywhere
    d["sweep"] = {"parameters": params, "blocks": [{"grid": {"r": [10, 12]}}]}
    cases = expand(load_study(d), check_scene=False)
    assert [c.parameters["scene.external.radius_mm"] for c in cases] == [10, 12]


def test_derived_values_use_parameters_frequency_and_earlier_derived():
    d = _study(P, [{"grid": {"depth": [5, 12]}}], frequencies_MHz=[403, 433])
    d["derived"] = {
        "muscle": {"path": "scene.phantom.layers.2.thickness_mm", "expr": "max(2 * depth, 20) + skin"},
        "len2": {"path": "scene.implant.length_mm", "expr": "min(muscle / 3, 150000 / frequency_MHz / 20)"},
    }
    cases = expand(load_study(d))
    for c in cases:
        depth, f = c.parameters[P["depth"]], c.parameters["frequency_MHz"]
        muscle = max(2 * depth, 20) + 2  # skin 2 mm in the base scene; hand arithmetic (analytic)
        assert c.parameters["scene.phantom.layers.2.thickness_mm"] == pytest.approx(muscle, rel=1e-12)
        assert c.scene["phantom"]["layers"][2]["thickness_m"] == pytest.approx(muscle * 1e-3, rel=1e-12)
        assert c.parameters["scene.implant.length_mm"] == pytest.approx(min(muscle / 3, 150000 / f / 20), rel=1e-12)


def test_derived_names_unknown_or_later_are_refused():
    d = _study(P, [{"grid": {"depth": [5]}}])
    d["derived"] = {"a": {"path": "scene.implant.length_mm", "expr": "b + 1"},
                    "b": {"path": "scene.phantom.layers.2.thickness_mm", "expr": "depth"}}
    with pytest.raises(StudyError) as info:
        load_study(d)
    assert info.value.key_path == "derived.a.expr" and "b" in str(info.value)


def test_max_cases_default_budget_and_keyword():
    grid = {"grid": {"depth": list(range(1, 101)), "len": list(range(1, 101))}}  # 10000 rows
    d = _study(P, [grid, {"grid": {"fat": [3, 4]}}])
    with pytest.raises(StudyError) as info:
        load_study(d)  # 20000 > 10000 (default)
    assert info.value.key_path == "sweep.blocks" and "20000" in str(info.value)
    assert load_study(dict(d, budget={"max_cases": 20000})).n_cases == 20000
    with pytest.raises(StudyError):
        load_study(_study(P, [{"grid": {"depth": [5, 10, 15]}}]), max_cases=2)


def test_parameters_and_labels_carry_edge_units():
    d = _study({**P, "cpw": "solver.cells_per_wavelength", "tissue": "scene.phantom.layers.2.tissue"},
               [{"grid": {"depth": [7.25], "cpw": [12], "tissue": ["muscle", "fat_not_infiltrated"]}}])
    cases = expand(load_study(d))
    assert cases[0].parameters == {"frequency_MHz": 403.0, "scene.implant.depth_mm": 7.25,
                                   "solver.cells_per_wavelength": 12, "scene.phantom.layers.2.tissue": "muscle"}
    assert cases[0].label == "f=403MHz depth=7.25mm cpw=12 tissue=muscle"
    assert cases[0].solver["cells_per_wavelength"] == 12.0
    assert cases[1].scene["phantom"]["layers"][2]["tissue"] == "fat_not_infiltrated"


def test_case_dict_has_the_case_folder_contract_keys():
    d = _study(P, [{"grid": {"depth": [5]}}], excite=[1, 2])
    c = expand(load_study(d))[0].to_dict()
    assert set(c) == {"case_id", "solve_id", "label", "study", "parameters", "frequency_Hz", "scene", "solver", "sar",
                      "excite_ports", "versions"}
    assert c["excite_ports"] == [1, 2] and c["solver"]["excite_ports"] == [1, 2]
    assert set(c["versions"]) == {"builder", "adapter", "post"}
    # default SAR limits are the schema defaults; 1 g = 1e-3 kg (SI prefix)
    assert c["sar"]["masses_kg"] == [1e-3, 1e-2]
    assert [lim["mass_kg"] for lim in c["sar"]["limits"]] == [1e-3, 1e-2]
    from bodysweep.workflow.meshing.settings import settings_from_dict
    assert settings_from_dict(c["solver"]).to_dict() == c["solver"]


def test_raw_is_the_validated_mapping_with_defaults():
    study = load_study(_minimal())
    assert study.raw["excite"] == [1] and study.raw["sar"]["masses_g"] == [1, 10]
    assert study.raw["budget"]["max_cases"] == 10000
    assert study.raw["scene"] == _minimal()["scene"]


def test_mapping_input_is_not_modified():
    d = _study(P, [{"grid": {"depth": [5, 10]}}])
    before = copy.deepcopy(d)
    expand(load_study(d))
    assert d == before


def test_scene_schema_errors_surface_at_expansion_with_the_case_label():
    pytest.importorskip("bodysweep.geometry.scene")
    d = _study({"ph": "scene.phantom.type"}, [{"grid": {"ph": ["layered_slab", "layered_blob"]}}])
    with pytest.raises(StudyError) as info:
        expand(load_study(d))
    err = info.value
    assert err.key_path == "scene.phantom.type"  # the scene schema names the key
    assert "f=403MHz ph=layered_blob" in str(err) and "\n" not in str(err)
    # the study layer alone (scene builder off) accepts it
    assert len(expand(load_study(d), check_scene=False)) == 2


def test_scene_is_the_builders_resolved_form():
    scene_mod = pytest.importorskip("bodysweep.geometry.scene")
    c = expand(load_study(_minimal()))[0]
    # the scene builder's own round trip is the reference for "fully resolved"
    assert scene_mod.Scene.from_dict(c.scene).to_dict() == c.scene


def test_scene_builder_refusal_surfaces_with_the_case_label():
    pytest.importorskip("bodysweep.geometry.scene")
    # a tissue name is free text for the schema (user materials may be declared); the builder refuses it
    d = _study({"t": "scene.phantom.layers.0.tissue"}, [{"grid": {"t": ["skin_dry", "unobtainium"]}}])
    with pytest.raises(StudyError) as info:
        expand(load_study(d))
    assert info.value.key_path == "scene"
    assert "in case f=403MHz t=unobtainium: phantom layer 0" in str(info.value)
    assert "\n" not in str(info.value)



def test_exciting_port_2_needs_an_implant():
    d = _minimal()
    del d["scene"]["implant"]
    d["scene"]["concentrators"] = []
    assert len(expand(load_study(d))) == 1  # a scene without implant is fine with port 1 only
    d["excite"] = [1, 2]
    with pytest.raises(StudyError) as info:
        expand(load_study(d))
    assert info.value.key_path == "excite" and "no implant" in str(info.value)


def test_derived_count_stays_a_whole_number():
    d = _study({"cpw": "solver.cells_per_wavelength"}, [{"grid": {"cpw": [12, 16]}}])
    d["solver"] = {"port_cells": 2}
    d["derived"] = {"pc": {"path": "solver.port_cells", "expr": "cpw / 4"}}
    cases = expand(load_study(d))
    # 12 / 4 = 3 and 16 / 4 = 4 (analytic); port_cells is an integer key (solver.schema.json)
    assert [c.solver["port_cells"] for c in cases] == [3, 4]
    assert all(type(c.solver["port_cells"]) is int for c in cases)
    d["derived"]["pc"]["expr"] = "cpw / 5"
    with pytest.raises(StudyError) as info:
        expand(load_study(d))
    assert info.value.key_path == "derived.pc.expr" and "whole number" in str(info.value)


def test_conditional_parameter_column_is_numeric_and_empty_where_the_option_lacks_it(tmp_path):
    # the summary table gets one numeric column per conditional parameter, NaN where it does not apply
    from bodysweep.workflow.collect import collect_frames
    from bodysweep.workflow.layout import StudyLayout
    from bodysweep.workflow.pipeline import plan_entry

    rod = {"type": "rod_pair", "anchor": "implant", "offset_mm": [0, 0, 4.5], "azimuth_deg": 0,
           "rod_length_mm": 8, "gap_mm": 2, "radius_mm": 0.4, "conductor": "pec"}
    params = {"rods": {"path": "scene.concentrators", "options": {"none": [], "pair": [rod]}},
              "rod_len": "scene.concentrators.0.rod_length_mm", "rod_z": "scene.concentrators.0.offset_mm.2"}
    cases = expand(load_study(_study(params, [{"grid": {"rods": ["none", "pair"], "rod_len": [6, 10],
                                                        "rod_z": [4, 5]}}])))
    assert len(cases) == 5  # 1 without rods + 2 x 2 with rods (hand count)
    assert [c.scene["concentrators"][0]["rod_length_m"] for c in cases[1:]] == pytest.approx([6e-3, 6e-3, 10e-3, 10e-3])
    entries = [plan_entry(c.to_dict()) for c in cases]
    s = collect_frames(StudyLayout.of("x", tmp_path), entries, band=False)["summary"]
    col = s["scene.concentrators.0.rod_length_mm"]
    assert col.dtype.kind == "f"
    assert np.isnan(col.iloc[0]) and list(col.iloc[1:]) == [6, 6, 10, 10]
    assert list(s["scene.concentrators"]) == ["none", "pair", "pair", "pair", "pair"]
