"""The two identities of a case: which study settings change the solve id, the case (finish) id, or neither.

One test per class of setting. Reference for every id: sha256 (FIPS 180-4, Python's hashlib) of the
canonical JSON of the documented content (DEVELOPERS.md, Identity); the classes themselves follow what
each setting does: the scene, mesh, excitation and engine settings enter the FDTD run (the fields
change), the SAR masses, limits, ``max_air_fraction`` and band points are applied to the stored fields
and port signals afterwards (common practice: post-processing of a finished FDTD run).
"""
from __future__ import annotations

import copy
import hashlib
from pathlib import Path

import pytest
import yaml

from bodysweep.workflow.study import canonical_json, expand, load_study

TINY = Path(__file__).parents[1] / "pipeline" / "data" / "tiny.yaml"


def _ids(tmp_path: Path, edit=None, name="s.yaml") -> list[tuple[str, str]]:
    d = yaml.safe_load(TINY.read_text())
    if edit is not None:
        edit(d)
    p = tmp_path / name
    p.write_text(yaml.safe_dump(d, sort_keys=False))
    return [(c.solve_id, c.case_id) for c in expand(load_study(p))]


@pytest.fixture
def base(tmp_path):
    return _ids(tmp_path)


def _changes(base, other) -> tuple[bool, bool]:
    """(solve ids changed, case ids changed), each for every case alike."""
    solve = {b[0] != o[0] for b, o in zip(base, other)}
    case = {b[1] != o[1] for b, o in zip(base, other)}
    assert len(solve) == 1 and len(case) == 1, "a study-wide setting changes every case alike"
    return solve.pop(), case.pop()


def test_ids_are_sha256_of_the_documented_contents(tmp_path):
    c = expand(load_study(TINY))[0]
    solve = c.solve_content()
    assert c.solve_id == hashlib.sha256(canonical_json(solve).encode()).hexdigest()[:12]
    finish = c.identity_content()
    assert finish["solve_id"] == c.solve_id
    assert c.case_id == hashlib.sha256(canonical_json(finish).encode()).hexdigest()[:12]
    # the solve content holds no post-processing setting
    assert "sar" not in solve and "n_band_points" not in solve["solver"] and "threads" not in solve["solver"]
    assert set(solve["versions"]) == {"builder", "adapter"}


@pytest.mark.parametrize("edit", [
    lambda d: d["scene"]["phantom"]["layers"][0].update(thickness_mm=2.5),       # tissue stack
    lambda d: d["scene"]["external"].update(standoff_mm=7),                     # antenna placement
    lambda d: d.update(frequencies_MHz=[433]),                                  # frequency
], ids=["skin", "standoff", "frequency"])
def test_scene_settings_change_both_ids(tmp_path, base, edit):
    assert _changes(base, _ids(tmp_path, edit)) == (True, True)


@pytest.mark.parametrize("key,value", [("cells_per_wavelength", 8), ("max_growth_ratio", 1.8), ("port_cells", 2),
                                       ("air_margin_wavelengths", 0.15), ("min_cell_mm", 0.2)])
def test_mesh_settings_change_both_ids(tmp_path, base, key, value):
    assert _changes(base, _ids(tmp_path, lambda d: d["solver"].update({key: value}))) == (True, True)


def test_excitation_settings_change_both_ids(tmp_path, base):
    # the excited ports decide which runs exist; band_fraction sets the Gaussian pulse's bandwidth
    assert _changes(base, _ids(tmp_path, lambda d: d.update(excite=[1, 2]))) == (True, True)
    assert _changes(base, _ids(tmp_path, lambda d: d["solver"].update(band_fraction=0.4), "b.yaml")) == (True, True)


@pytest.mark.parametrize("key,value", [("end_criterion_dB", -35), ("max_timesteps", 300000), ("boundary", "pml"),
                                       ("engine_sar_average", True)])
def test_engine_settings_change_both_ids(tmp_path, base, key, value):
    assert _changes(base, _ids(tmp_path, lambda d: d["solver"].update({key: value}))) == (True, True)


def test_run_only_settings_change_neither(tmp_path, base):
    assert _ids(tmp_path, lambda d: d["solver"].update(threads=2)) == base
    assert _ids(tmp_path, lambda d: d.update(study="another_name", description="copied")) == base


@pytest.mark.parametrize("edit", [
    lambda d: d.setdefault("sar", {}).update(limits=[{"mass_g": 1, "limit_W_per_kg": 1.6, "source": "other text"}]),
    lambda d: d.setdefault("sar", {}).update(limits=[{"mass_g": 10, "limit_W_per_kg": 4.0, "source": "x"}]),
    lambda d: d.setdefault("sar", {}).update(masses_g=[1, 10, 2]),
    lambda d: d.setdefault("sar", {}).update(max_air_fraction=0.2),
], ids=["limit source text", "limit value", "masses", "max_air_fraction"])
def test_sar_settings_change_only_the_case_id(tmp_path, base, edit):
    assert _changes(base, _ids(tmp_path, edit)) == (False, True)


def test_band_points_change_only_the_case_id(tmp_path, base):
    # the finish step transforms the stored port time signals at its own band points
    assert _changes(base, _ids(tmp_path, lambda d: d["solver"].update(n_band_points=21))) == (False, True)


def test_masses_enter_the_solve_when_the_engine_averages(tmp_path):
    """With solver.engine_sar_average the solve step runs the engine's averaging for the study's masses."""
    on = _ids(tmp_path, lambda d: d["solver"].update(engine_sar_average=True), "a.yaml")
    on_1g = _ids(tmp_path, lambda d: (d["solver"].update(engine_sar_average=True),
                                      d.setdefault("sar", {}).update(masses_g=[1, 10, 2])), "b.yaml")
    assert _changes(on, on_1g) == (True, True)


def test_versions_split_between_the_ids(tmp_path, base, monkeypatch):
    import bodysweep.workflow.post as post
    import bodysweep.workflow.solver as solver

    monkeypatch.setattr(post, "POST_VERSION", post.POST_VERSION + ".test")
    assert _changes(base, _ids(tmp_path)) == (False, True)
    monkeypatch.undo()
    monkeypatch.setattr(solver, "ADAPTER_VERSION", solver.ADAPTER_VERSION + ".test")
    assert _changes(base, _ids(tmp_path)) == (True, True)
