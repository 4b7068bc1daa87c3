"""Warnings for suspect cases (workflow.post.flags) on hand-built metrics."""
import math

import pytest

from bodysweep.workflow.post import flags

SLAB = {"type": "layered_slab", "size_x_m": 0.04, "size_y_m": 0.06,
        "layers": [{"tissue": "skin_dry", "thickness_m": 0.002}, {"tissue": "muscle", "thickness_m": 0.018}]}
LIMB = {"type": "layered_cylinder", "axis": "y", "length_m": 0.044, "layers": []}


def test_cut_faces_by_hand():
    # hand calculation: slab sides at +-size/2, bottom at -(2 + 18) mm; a limb is cut at +-length/2 on its axis
    assert [(a, pytest.approx(c)) for a, c, _ in flags.cut_faces(SLAB)] == [
        (0, -0.02), (0, 0.02), (1, -0.03), (1, 0.03), (2, -0.02)]
    assert [(a, pytest.approx(c)) for a, c, _ in flags.cut_faces(LIMB)] == [(1, -0.022), (1, 0.022)]
    assert flags.cut_faces({"type": "none"}) == []


def test_truncation_flag_only_for_a_cube_touching_a_cut_face():
    # hand calculation: a 10 mm cube centred 5.5 mm from the limb's end (y = 22 mm) stays clear (5 mm half side);
    # centred 4.5 mm from it, it reaches past the end; centred 5.0 mm from it, its face lies on the end
    clear = {"mass_kg": 0.001, "cube_centre_m": [0.0, 0.0165, -0.005], "cube_side_m": 0.010}
    touch = dict(clear, cube_centre_m=[0.0, 0.0175, -0.005])
    flush = dict(clear, cube_centre_m=[0.0, -0.017, -0.005])
    assert flags.truncation_warnings([clear], LIMB, None) == []
    w = flags.truncation_warnings([touch], LIMB, None)
    assert len(w) == 1 and w[0]["code"] == "sar_cube_truncated" and "y = 22 mm" in w[0]["message"]
    assert "y = -22 mm" in flags.truncation_warnings([flush], LIMB, None)[0]["message"]
    assert flags.truncation_warnings([dict(clear, cube_side_m=None)], LIMB, None) == []
    # the SAR grid's edge counts as a cut face
    w = flags.truncation_warnings([clear], {"type": "none"}, [(-0.1, 0.1), (-0.1, 0.1), (-0.008, 0.0)])
    assert w and "edge of the SAR grid along z" in w[0]["message"]


@pytest.mark.parametrize("s11_dB, flagged", [(-0.01, True), (-0.2, True), (-0.3, False), (-10.0, False)])
def test_normalisation_flag_below_a_few_percent_accepted(s11_dB, flagged):
    # 1 - |S11|^2 (Pozar, Microwave Engineering, 4th ed., eq. 2.38): -0.2 dB -> 4.5 %, -0.3 dB -> 6.7 %
    s11 = 10 ** (s11_dB / 20)
    w = flags.normalisation_warning(complex(s11, 0))
    assert bool(w) is flagged
    if flagged:
        assert w[0]["accepted_fraction"] == pytest.approx(1 - s11 ** 2)
        assert "implant_power_both_matched_dBm" in w[0]["message"]


def test_energy_balance_and_its_band():
    # analytic: |S11| = 0.6 -> 0.64 accepted per incident watt; |S21| = 0.4 -> 0.16 / 0.64 = 0.25 delivered per accepted W
    b = flags.energy_balance(0.70, complex(0.6, 0), complex(0, 0.4))
    assert b == pytest.approx(0.95)
    assert flags.balance_warning(b) == []
    assert flags.balance_warning(1.2)[0]["code"] == "energy_balance"
    assert flags.balance_warning(-0.1)
    assert flags.energy_balance(0.3, complex(0.6, 0), None) == pytest.approx(0.3)  # one-port scene: nothing delivered
    assert flags.energy_balance(None, complex(0.6, 0), None) is None


def test_case_warnings_collects_every_kind_as_one_line_each():
    m = {"S11": [0.999, 0.0], "S21": [0.001, 0.0], "absorbed_fraction_all": 1.5, "decay_reached": False,
         "sar": [{"mass_kg": 0.01, "cube_centre_m": [0.019, 0.0, -0.003], "cube_side_m": 0.021}]}
    w = flags.case_warnings(m, {"phantom": SLAB})
    assert [x["code"] for x in w] == ["sar_cube_truncated", "accepted_power_low", "energy_balance", "end_criterion"]
    lines = flags.warning_lines(w)  # metrics.json["warnings"]: plain strings with the code first
    assert [t.split(":")[0] for t in lines] == [x["code"] for x in w] and all(";" not in t and "|" not in t for t in lines)
    assert flags.case_warnings({"S11": [0.1, 0.0], "absorbed_fraction_all": 0.5, "decay_reached": True}, {}) == []


def test_thin_wire_flag_only_for_a_dipole_without_cross_section():
    # A wire of zero radius is a line of cell edges; its effective radius is a fraction of the adjacent cell
    # (common practice of FDTD thin-wire modelling), so its impedance follows the mesh.
    thin = {"type": "dipole", "wire_radius_m": 0.0, "strip_width_m": 0.0}
    round_ = {"type": "dipole", "wire_radius_m": 0.0005, "strip_width_m": 0.0}
    strip = {"type": "dipole", "wire_radius_m": 0.0, "strip_width_m": 0.002}
    loop = {"type": "loop", "trace_width_m": 0.002}
    w = flags.thin_wire_warnings({"external": strip, "implant": thin})
    assert [x["part"] for x in w] == ["implant"] and "scene.implant.wire_radius_mm" in w[0]["message"]
    assert flags.thin_wire_warnings({"external": thin, "implant": round_})[0]["part"] == "external"
    assert flags.thin_wire_warnings({"external": loop, "implant": round_}) == []
    assert flags.thin_wire_warnings({"external": strip, "implant": None}) == []
    codes = [x["code"] for x in flags.case_warnings({"S11": [0.1, 0.0], "decay_reached": True}, {"implant": thin})]
    assert codes == ["thin_wire"]
