"""Component runs of the uncertainty budget (workflow.study.uncertainty): what each run changes."""
import copy
from pathlib import Path

import pytest
import yaml

from bodysweep.geometry.tissues import tissue_properties
from bodysweep.workflow.study import expand, load_study
from bodysweep.workflow.study import uncertainty as ub
from bodysweep.workflow.verify import case_json2case_id

TINY = Path(__file__).parents[1] / "pipeline" / "data" / "tiny.yaml"


def _cases(tmp_path, section, edit=None):
    d = yaml.safe_load(TINY.read_text())
    d["uncertainty"] = section
    if edit:
        edit(d)
    p = tmp_path / "s.yaml"
    p.write_text(yaml.safe_dump(d))
    study = load_study(p)
    return study, [c.to_dict() for c in expand(study)]


def test_each_run_changes_its_one_input(tmp_path):
    study, cases = _cases(tmp_path, {"cases": "all", "mesh_run_at_least": "none"})
    cfg = ub.budget_settings(study.raw)
    base = cases[0]
    mesh = ub.variant(base, "mesh", cfg)
    assert mesh["solver"]["cells_per_wavelength"] == pytest.approx(1.5 * base["solver"]["cells_per_wavelength"])
    assert mesh["solver"]["port_cells"] == 2 * base["solver"]["port_cells"]
    assert mesh["solver"]["min_cells_per_layer"] == 2 * base["solver"]["min_cells_per_layer"]
    r = base["solver"]["max_growth_ratio"]  # grading halved toward uniform, never below the schema's 1.05
    assert mesh["solver"]["max_growth_ratio"] == pytest.approx(max(1.05, 1 + (r - 1) / 2))
    assert mesh["solver"]["max_growth_ratio"] < r
    assert mesh["scene"] == base["scene"]
    far = ub.variant(base, "boundary", cfg)
    assert far["solver"]["air_margin_wavelengths"] == pytest.approx(base["solver"]["air_margin_wavelengths"] + 0.25)
    end = ub.variant(base, "end_criterion", cfg)
    assert end["solver"]["end_criterion_dB"] == pytest.approx(base["solver"]["end_criterion_dB"] - 20)
    tissue = ub.variant(base, "tissue", cfg)
    assert tissue["solver"] == base["solver"]
    # every tissue's eps_r and sigma x 1.1 at the case frequency (Gabriel et al. 1996 Cole-Cole values)
    mats = {m["name"]: m for m in tissue["scene"]["materials"]}
    for layer in tissue["scene"]["phantom"]["layers"]:
        m = mats[layer["tissue"]]
        eps, sigma = tissue_properties(layer["tissue"][:-len("_changed")], base["frequency_Hz"])
        assert m["eps_r"] == pytest.approx(1.1 * eps) and m["sigma_S_per_m"] == pytest.approx(1.1 * sigma)
    ids = {base["case_id"], mesh["case_id"], far["case_id"], end["case_id"], tissue["case_id"]}
    assert len(ids) == 5
    for v in (mesh, far, end, tissue):  # the identity verify recomputes from case.json
        assert case_json2case_id(v) == v["case_id"]
        assert v["budget"] == [{"of": base["case_id"], "component": v["parameters"]["uncertainty_run"]}]


def test_mesh_run_at_least_a_preset(tmp_path):
    # the refinement step from a coarse case (6 per wavelength, port_cells 1, growth 2) stays far coarser than the
    # standard preset; with mesh_run_at_least the mesh run takes each mesh key no coarser than the preset's
    from bodysweep.workflow.meshing.settings import preset

    study, cases = _cases(tmp_path, {"cases": "all"})
    assert ub.budget_settings(study.raw)["mesh_run_at_least"] == "none"  # the schema default: the step alone
    study, cases = _cases(tmp_path, {"cases": "all", "mesh_run_at_least": "standard"})
    cfg = ub.budget_settings(study.raw)
    base, std = cases[0], preset("standard")
    assert base["solver"]["cells_per_wavelength"] * 1.5 < std.cells_per_wavelength  # the floor matters here
    mesh = ub.variant(base, "mesh", cfg)["solver"]
    assert mesh["cells_per_wavelength"] == pytest.approx(std.cells_per_wavelength)
    assert mesh["port_cells"] == max(2 * base["solver"]["port_cells"], std.port_cells)
    assert mesh["min_cells_per_layer"] == max(2 * base["solver"]["min_cells_per_layer"], std.min_cells_per_layer)
    assert mesh["max_growth_ratio"] == pytest.approx(min(1 + (base["solver"]["max_growth_ratio"] - 1) / 2,
                                                         std.max_growth_ratio))
    # a case already finer than the floor keeps the plain refinement step
    fine = preset("fine")
    study, cases = _cases(tmp_path, {"cases": "all", "mesh_run_at_least": "standard"}, lambda d: d["solver"].update(
        cells_per_wavelength=fine.cells_per_wavelength, port_cells=fine.port_cells,
        min_cells_per_layer=fine.min_cells_per_layer, max_growth_ratio=fine.max_growth_ratio))
    mesh = ub.variant(cases[0], "mesh", ub.budget_settings(study.raw))["solver"]
    assert mesh["cells_per_wavelength"] == pytest.approx(1.5 * fine.cells_per_wavelength)
    assert mesh["port_cells"] == 2 * fine.port_cells


def test_without_tissue_the_tissue_run_is_the_case_itself(tmp_path):
    # analytic: nothing to change in a scene without phantom, so the run coincides with the case (deviation 0)
    def no_phantom(d):
        d["scene"]["phantom"] = {"type": "none"}
        d["scene"].pop("implant")
        d.pop("sweep")
    study, cases = _cases(tmp_path, {"cases": "all", "components": ["tissue"]}, no_phantom)
    extra, _ = ub.budget_case_dicts(study.raw, cases)
    assert extra == [] and cases[0]["budget"] == [{"of": cases[0]["case_id"], "component": "tissue"}]


def test_selection_sample_is_seeded_and_best_waits_for_results(tmp_path):
    study, cases = _cases(tmp_path, {"cases": "sample", "count": 1, "seed": 3})
    ids = [c["case_id"] for c in cases]
    a, _ = ub.selection(ub.budget_settings(study.raw), ids)
    b, _ = ub.selection(ub.budget_settings(study.raw), ids)
    assert a == b and len(a) == 1
    extra, _ = ub.budget_case_dicts(study.raw, copy.deepcopy(cases))
    assert len(extra) == 4 and {e["budget"][0]["of"] for e in extra} == set(a)
    study, cases = _cases(tmp_path, {"cases": "best", "count": 1})
    chosen, note = ub.selection(ub.budget_settings(study.raw), ids, None)
    assert chosen == [] and "once the cases have results" in note


def test_bad_section_is_refused_naming_the_key(tmp_path):
    from bodysweep.workflow.study import StudyError

    with pytest.raises(StudyError) as info:
        _cases(tmp_path, {"cases": "all", "mesh_refinement_factor": 1.2})
    assert "uncertainty.mesh_refinement_factor" in str(info.value)
