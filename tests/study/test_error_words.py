"""Errors speak the study file's words and units: mm, key names as written, the nearest valid name, a Hz hint.

Common practice for command-line tools (a message the user can act on); the suggestions use difflib
(Python standard library, ratio >= 0.6).
"""
from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from bodysweep.workflow.study import StudyError, expand, load_study
from bodysweep.workflow.study.errors import si2edge_text

HERE = Path(__file__).parent
BAD = HERE / "bad_inputs"


@pytest.mark.parametrize("name, words", [
    ("frequency_given_in_hz.yaml", ["this looks like Hz", "403000000 Hz = 403 MHz"]),
    ("unknown_top_level_key.yaml", ["did you mean frequencies_MHz?"]),
    ("scene_key_misspelt.yaml", ["did you mean min_clearance_mm?"]),
    ("phantom_type_misspelt.yaml", ["did you mean layered_slab?"]),
    ("unknown_tissue.yaml", ["did you mean muscle?", "built-in tissues", "skin_wet", "fat_not_infiltrated"]),
    ("solver_unknown_key.yaml", ["did you mean cells_per_wavelength?"]),
])
def test_message_names_the_fix(name, words):
    with pytest.raises(StudyError) as info:
        expand(load_study(BAD / name), check_scene=False)
    text = str(info.value)
    assert "\n" not in text
    for w in words:
        assert w in text, text


def _minimal(**implant) -> dict:
    d = yaml.safe_load((HERE / "good" / "minimal.yaml").read_text())
    d["scene"]["implant"].update(implant)
    return d


def test_implant_outside_the_phantom_in_mm_with_the_depths_that_fit():
    # minimal.yaml: layers 2 + 4 + 30 = 36 mm of tissue; capsule 4 mm high (box 13 x 4 x 4 mm) centred at the
    # depth, so depths from 2 mm to 34 mm keep it inside (analytic, 0.1 mm scan steps)
    with pytest.raises(StudyError) as info:
        expand(load_study(_minimal(depth_mm=60)))
    text = str(info.value)
    assert "depth_mm = 60 mm" in text and "(0, 0) mm" in text
    import re

    lo, hi = map(float, re.search(r"depth_mm from ([\d.]+) mm to ([\d.]+) mm fits", text).groups())
    assert abs(lo - 2.0) <= 0.15 and abs(hi - 34.0) <= 0.15, text
    assert "depth_m " not in text and "_m =" not in text and " m," not in text


def test_builder_messages_are_turned_into_edge_units():
    # analytic unit conversion: 1 m = 1000 mm
    assert si2edge_text("reaches (0, -0.008, -0.066) m at depth_m = 0.06 m") == "reaches (0, -8, -66) mm at depth_mm = 60 mm"
    assert si2edge_text("clearance is 0.5 mm (min_clearance_m)") == "clearance is 0.5 mm (min_clearance_mm)"
    # other units stay as they are
    assert si2edge_text("density 1000 kg/m3 at 5 m/s") == "density 1000 kg/m3 at 5 m/s"
