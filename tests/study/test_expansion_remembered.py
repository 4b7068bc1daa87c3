"""The study expanded once and remembered (workflow/expansion.py): the same case ids as a fresh expansion,
ids fixed over code changes that are not meant to change them, and the remembered expansion dropped when
the study file, its path or a CAD part changes.

The golden ids below (GOLDEN_BY_VERSIONS) start from the code of main at commit 7c7290d (before the expansion was
remembered), from the study in FIXED; a change of them must come with a bumped version constant
(BUILDER_VERSION, ADAPTER_VERSION or POST_VERSION, DEVELOPERS.md "Identity").
"""
import json
import shutil
from pathlib import Path

import pytest

from bodysweep.workflow import expansion
from bodysweep.workflow.expansion import expand_once, remembered

FIXED = '''
study: identity_fixed
frequencies_MHz: [403, 915]
scene:
  phantom:
    type: layered_slab
    size_x_mm: 40
    size_y_mm: 40
    layers:
      - {tissue: skin_dry, thickness_mm: 2}
      - {tissue: fat_not_infiltrated, thickness_mm: 4}
      - {tissue: muscle, thickness_mm: 18}
  external:
    type: dipole
    length_mm: 30
    feed_gap_mm: 2
    strip_width_mm: 2
    axis: x
    position_mm: [0, 0]
    standoff_mm: 6
    conductor: pec
  implant:
    type: dipole
    length_mm: 10
    feed_gap_mm: 2
    wire_radius_mm: 0
    axis: x
    position_mm: [0, 0]
    depth_mm: 8
    conductor: pec
    capsule: {shape: box, size_mm: [13, 4, 4], eps_r: 2.9, loss_tangent: 0.005}
  concentrators: []
  materials: []
solver:
  preset: draft
  cells_per_wavelength: 6
  n_band_points: 11
sar:
  masses_g: [1, 10]
  limits: [{mass_g: 10, limit_W_per_kg: 2.0, source: "test limit"}]
excite: [1, 2]
sweep:
  parameters:
    depth: scene.implant.depth_mm
    fat: scene.phantom.layers.1.thickness_mm
  blocks:
    - grid: {depth: [8, 11.5]}
    - list: [{fat: 3}, {fat: 5.25}]
derived:
  standoff: {path: scene.external.standoff_mm, expr: "max(4, depth / 2)"}
'''

#: (case id, solve id) of each case of FIXED, in expansion order, by the versions that enter the identity
#: (BUILDER_VERSION, ADAPTER_VERSION, POST_VERSION). ("2", "3", "5") was computed at main 7c7290d; each later
#: entry was added when a version was bumped, after the code of the time reproduced every earlier entry with its
#: versions set back (test_earlier_versions_give_their_recorded_ids): only the bump changed the ids.
GOLDEN_BY_VERSIONS = {
    ("2", "3", "5"): [("4db45a6f9018", "fb7cfc6f904c"), ("f85164246a4d", "f7e594ae9de5"),
                      ("358a64ef8aea", "b8aed7cf8cde"), ("ae1c186b79d7", "ad227938fc73"),
                      ("28b38c5e58e9", "e36d656ce4a5"), ("0decca223fe6", "a2b8f2deb2d0"),
                      ("fcdcff63303e", "e7fa46093952"), ("a0f04652abd0", "a4c01e78aec2")],
    ("2", "4", "6"): [("b51e07955ce4", "dc11ef43073e"), ("c2043d50e755", "1054c0055541"),
                      ("6232c9b31f6f", "937429e1e2c9"), ("cc5b6d3e2404", "b5f407895443"),
                      ("3f01cafd98ef", "fea21aa30985"), ("6fc168677c84", "d1f32c19a83f"),
                      ("4112558d2593", "7fb55b1d8db7"), ("f4a5b9122ad5", "34a992d1a0f9")],
    ("2", "5", "6"): [("b6d170478c23", "f193f86f8df0"), ("2f6642e8b312", "7ceb0d2ba95a"),
                      ("8d9172b797f2", "16160077a0e1"), ("857256b5c032", "7710ea8e3717"),
                      ("9ff33e516102", "4216db53f603"), ("f321bc45bc53", "4a1b4de1f8c0"),
                      ("7e6afaf99255", "a5560e1a9d00"), ("7c3d7dc5b354", "20492535fa22")],
}


def _versions():
    import bodysweep.geometry as g
    import bodysweep.workflow.post as p
    import bodysweep.workflow.solver as s

    return (str(g.BUILDER_VERSION), str(s.ADAPTER_VERSION), str(p.POST_VERSION))


assert _versions() in GOLDEN_BY_VERSIONS, (
    f"identity versions {_versions()} have no golden ids: after a deliberate bump, add the new ids of FIXED here "
    "(and keep the earlier entries, which must still be reproduced with their versions set back)")
GOLDEN = GOLDEN_BY_VERSIONS[_versions()]

STL = Path(__file__).resolve().parents[2] / "studies" / "external_stl_dipole.yaml"


@pytest.fixture
def study(tmp_path):
    p = tmp_path / "fixed.yaml"
    p.write_text(FIXED)
    return p


def ids(exp):
    return [(e["case_id"], e["solve_id"]) for e in exp.entries]


def test_golden_ids_fresh_and_remembered(study, tmp_path):
    results = tmp_path / "results"
    fresh = expand_once(study, results)
    assert not fresh.remembered and ids(fresh) == GOLDEN
    assert [(d["case_id"], d["solve_id"]) for d in fresh.dicts] == GOLDEN
    assert not fresh.save(), "nothing is written into a study folder that does not exist"
    (results / "identity_fixed").mkdir(parents=True)
    assert fresh.save()
    again = expand_once(study, results)
    assert again.remembered and ids(again) == GOLDEN
    assert again.dicts == fresh.dicts  # the case.json contents read back unchanged
    assert again.settings == fresh.settings and again.raw == fresh.raw and again.budget == fresh.budget


def test_remembered_without_loading_the_study(study, tmp_path, monkeypatch):
    results = tmp_path / "results"
    (results / "identity_fixed").mkdir(parents=True)
    expand_once(study, results).save()
    import bodysweep.workflow.study as study_pkg

    def refuse(*a, **k):
        raise AssertionError("the study was loaded again")

    monkeypatch.setattr(study_pkg, "load_study", refuse)
    monkeypatch.setattr(study_pkg, "expand", refuse)
    exp = expand_once(study, results)
    entries, dicts = exp.cases()
    assert exp.remembered and len(entries) == len(GOLDEN) and len(dicts()) == len(GOLDEN)


def test_any_change_of_the_file_or_code_expands_again(study, tmp_path, monkeypatch):
    results = tmp_path / "results"
    (results / "identity_fixed").mkdir(parents=True)
    expand_once(study, results).save()
    study.write_text(FIXED.replace("depth: [8, 11.5]", "depth: [8, 11.25]"))
    exp = expand_once(study, results)
    assert not exp.remembered and ids(exp)[:2] == GOLDEN[:2] and ids(exp)[2] != GOLDEN[2]
    exp.save()
    study.write_text(FIXED)  # back: the remembered one is the edited file's, so expanded afresh
    assert not expand_once(study, results).remembered
    expand_once(study, results).save()
    assert expand_once(study, results).remembered
    monkeypatch.setattr(expansion, "code_signature", lambda: "other code")  # e.g. a builder edited
    assert not expand_once(study, results).remembered
    monkeypatch.undo()
    copy = tmp_path / "elsewhere" / "fixed.yaml"  # same bytes at another path: relative files differ
    copy.parent.mkdir()
    copy.write_text(FIXED)
    assert not expand_once(copy, results).remembered


def test_a_changed_cad_part_expands_again(tmp_path):
    folder = tmp_path / "s"
    shutil.copytree(STL.parent, folder, ignore=shutil.ignore_patterns("*.py"))
    study = folder / STL.name
    results = tmp_path / "results"
    exp = expand_once(study, results)
    exp.layout.root.mkdir(parents=True)
    assert exp.cad_files and exp.save()
    assert expand_once(study, results).remembered
    part = Path(next(iter(exp.cad_files)))
    assert part.parent == folder / "parts"  # read from the copy's own folder
    part.write_bytes(part.read_bytes() + b" ")  # another sha256: the cases' identity would change
    assert remembered(study, results) is None


@pytest.mark.parametrize("name", ["capsule_shell_16x6x6mm.stl", "casing_shell_56x8x5mm.stl", "plate_20x2x1mm.stl"])
def test_a_changed_capsule_casing_or_concentrator_expands_again(tmp_path, name):
    """Every STL part of a case is watched, not only the antennas (studies/implant_stl_capsule.yaml)."""
    folder = tmp_path / "s"
    shutil.copytree(STL.parent, folder, ignore=shutil.ignore_patterns("*.py"))
    study = folder / "implant_stl_capsule.yaml"
    results = tmp_path / "results"
    exp = expand_once(study, results)
    exp.layout.root.mkdir(parents=True)
    assert exp.save() and expand_once(study, results).remembered
    part = folder / "parts" / name
    assert str(part) in exp.cad_files
    part.write_bytes(part.read_bytes() + b" ")
    assert remembered(study, results) is None


def test_a_torn_cases_file_is_not_trusted(study, tmp_path):
    results = tmp_path / "results"
    (results / "identity_fixed").mkdir(parents=True)
    expand_once(study, results).save()
    cases = expand_once(study, results).layout.expansion_cases_file
    data = json.loads(cases.read_text())
    data["key"] = "another key"
    cases.write_text(json.dumps(data))
    exp = expand_once(study, results)
    assert exp.remembered and [(d["case_id"], d["solve_id"]) for d in exp.dicts] == GOLDEN  # expanded again


def test_name_hint_is_only_a_hint(tmp_path):
    p = tmp_path / "s.yaml"
    p.write_text("# study: not_this\nstudy: 'real_name'  # comment\nscene: {}\n")
    assert expansion.name_hint(p) == "real_name"
    p.write_text("study: a\nx:\n  study: b\n")
    assert expansion.name_hint(p) == "a"
    p.write_text("{study: a}\n")
    assert expansion.name_hint(p) is None and remembered(p, tmp_path) is None


@pytest.mark.parametrize("versions", sorted(GOLDEN_BY_VERSIONS))
def test_earlier_versions_give_their_recorded_ids(versions, study, tmp_path, monkeypatch):
    # with the version constants set back, today's code gives the ids recorded for them: a bump is the only
    # thing that changed the ids since
    import bodysweep.geometry as g
    import bodysweep.workflow.post as p
    import bodysweep.workflow.solver as s

    for mod, name, v in ((g, "BUILDER_VERSION", versions[0]), (s, "ADAPTER_VERSION", versions[1]),
                         (p, "POST_VERSION", versions[2])):
        monkeypatch.setattr(mod, name, v)
    assert ids(expand_once(study, tmp_path / "results")) == GOLDEN_BY_VERSIONS[versions]
