"""The search's uncertainty budget: the merit column's budget quantity, the expanded uncertainty in the merit's
unit, and the best point's lead. References: GUM (JCGM 100:2008) §4.3.7 (rectangular divisor sqrt 3), §5.1.2
(root-sum-square), §6.2 (k = 2); dB of a power ratio, 10 log10 (definition)."""
from __future__ import annotations

import math

import pandas as pd
import pytest

from bodysweep.workflow.explore.budget import in_merit_unit, lead, merit_quantity, point_budget, section

QUANTITIES = ["peak_SAR_10g", "S11", "sar_limited_accepted", "implant_power_unmatched", "implant_power_tx_matched"]


def test_merit_columns_map_to_their_budget_quantity():
    assert merit_quantity("implant_power_tx_matched_dBm", QUANTITIES) == ("implant_power_tx_matched", "dB")
    assert merit_quantity("implant_power_tx_matched_W", QUANTITIES) == ("implant_power_tx_matched", "linear")
    assert merit_quantity("S11_dB", QUANTITIES) == ("S11", "dB")
    assert merit_quantity("peak_SAR_10g_W_per_kg_per_W", QUANTITIES) == ("peak_SAR_10g", "linear")
    assert merit_quantity("figure_of_merit_value", QUANTITIES, "sar_limited_accepted_dBm") == ("sar_limited_accepted", "dB")
    assert merit_quantity("runtime_s", QUANTITIES) == (None, "")


def test_expanded_uncertainty_in_the_merit_unit():
    assert in_merit_unit(0.3, "dB", "dB", -40.0) == 0.3  # S-parameters are budgeted in dB already
    # a relative U of a power read in dB: the larger side, -10 log10(1 - U) (definition of dB)
    assert in_merit_unit(0.2, "relative", "dB", -40.0) == pytest.approx(-10 * math.log10(0.8))
    assert in_merit_unit(0.2, "relative", "linear", 0.5) == pytest.approx(0.1)
    assert in_merit_unit(1.5, "relative", "dB", -40.0) == math.inf  # the lower side reaches zero power
    assert math.isnan(in_merit_unit(math.nan, "relative", "dB", -40.0))


def test_lead_against_the_uncertainty():
    assert lead(-30.0, -31.0, 0.5, True) == {"lead": 1.0, "U": 0.5, "exceeds": True}
    assert lead(-30.0, -30.2, 0.5, True)["exceeds"] is False
    assert lead(2.0, 3.5, 1.0, False) == {"lead": 1.5, "U": 1.0, "exceeds": True}  # minimised
    assert lead(-30.0, -31.0, math.nan, True)["exceeds"] is None  # incomplete budget: no verdict
    assert lead(-30.0, -31.0, math.inf, True)["exceeds"] is False


def test_point_budget_takes_the_point_case_with_the_largest_uncertainty():
    def rows(cid, devs):
        u = [abs(d) / math.sqrt(3) for d in devs]
        uc = math.sqrt(sum(x * x for x in u))
        out = [{"case_id": cid, "quantity": "implant_power_tx_matched", "unit": "relative", "component": c,
                "deviation": d, "standard_uncertainty": x, "source": "own"} for c, d, x in zip(("mesh", "tissue"), devs, u)]
        out += [{"case_id": cid, "quantity": "implant_power_tx_matched", "unit": "relative", "component": "combined",
                 "deviation": math.nan, "standard_uncertainty": uc, "source": "own"},
                {"case_id": cid, "quantity": "implant_power_tx_matched", "unit": "relative",
                 "component": "expanded (k=2)", "deviation": math.nan, "standard_uncertainty": 2 * uc, "source": "own"}]
        return out

    table = pd.DataFrame(rows("a", [0.1, -0.05]) + rows("b", [0.3, 0.1]) + rows("c", [0.9, 0.9]))
    summary = pd.DataFrame({"case_id": ["a", "b"], "figure_of_merit": ["implant_power_tx_matched_dBm"] * 2})
    b = point_budget(table, summary, ["a", "b"], "figure_of_merit_value", -40.0)
    U = 2 * math.sqrt((0.3 ** 2 + 0.1 ** 2) / 3)  # GUM: rectangular, root-sum-square, k = 2
    assert b["case_id"] == "b" and b["quantity"] == "implant_power_tx_matched"
    assert b["U_budget"] == pytest.approx(U)
    assert b["U"] == pytest.approx(-10 * math.log10(1 - U))
    assert [c["component"] for c in b["components"]] == ["mesh", "tissue", "combined", "expanded (k=2)"]


def test_budget_section_runs_every_case_of_the_budget_study():
    assert section({}) == {"cases": "all"}
    own = {"uncertainty": {"cases": "best", "count": 3, "rank_by": "S21_dB", "components": ["mesh"]}}
    assert section(own) == {"components": ["mesh"], "cases": "all"}  # the search chooses the points
