"""GUM arithmetic of the uncertainty budget (workflow.post.uncertainty) against hand calculations."""
import math

import pytest

from bodysweep.workflow.post import uncertainty as gum


def test_divisors_are_those_of_the_gum():
    # JCGM 100:2008 §4.3.7 (rectangular a/sqrt3), §4.3.9 (triangular a/sqrt6); U-shaped a/sqrt2 (common practice)
    assert gum.DIVISORS["rectangular"] == pytest.approx(math.sqrt(3))
    assert gum.DIVISORS["triangular"] == pytest.approx(math.sqrt(6))
    assert gum.DIVISORS["u-shaped"] == pytest.approx(math.sqrt(2))
    assert gum.standard_uncertainty(-0.3, "rectangular") == pytest.approx(0.3 / math.sqrt(3))


def test_budget_rows_root_sum_square_and_k2():
    # hand calculation: rectangular 0.3 and 0.4 -> u = 0.1732, 0.2309; u_c = 0.5/sqrt3 = 0.2887; U = 0.5774
    rows = gum.budget_rows({"mesh": {"peak_SAR_1g": 0.3}, "boundary": {"peak_SAR_1g": -0.4}},
                           {"peak_SAR_1g": "relative"})
    by = {r["component"]: r for r in rows}
    assert by["combined"]["standard_uncertainty"] == pytest.approx(0.5 / math.sqrt(3))
    assert by["expanded (k=2)"]["standard_uncertainty"] == pytest.approx(1.0 / math.sqrt(3))
    assert by["boundary"]["deviation"] == -0.4 and by["boundary"]["divisor"] == pytest.approx(math.sqrt(3))
    # a missing component (failed run) makes the combined value NaN instead of a smaller number
    rows = gum.budget_rows({"mesh": {"q": 0.3}, "boundary": {"q": math.nan}}, {"q": "relative"})
    assert math.isnan([r for r in rows if r["component"] == "combined"][0]["standard_uncertainty"])


def _metrics(peak, s11, s21, p_in, p_del, balance=0.9):
    return {"sar": [{"mass_kg": 0.001, "peak_W_per_kg_per_W": peak}], "S11": [s11, 0.0], "S21": [s21, 0.0],
            "limits": [{"mass_kg": 0.001, "sar_limited_accepted_W": p_in,
                        "implant_power_W": {"unmatched": p_del, "tx_matched": None, "both_matched": None}}],
            "energy_balance": balance}


def test_deviations_relative_for_sar_and_power_db_for_s():
    base, run = _metrics(10.0, 0.5, 0.1, 0.16, 1e-3), _metrics(12.0, 0.25, 0.2, 0.1333, 2e-3)
    d = gum.run_deviations(base, run)
    assert d["peak_SAR_1g"] == pytest.approx(0.2)  # (12 - 10) / 10
    assert d["S11"] == pytest.approx(20 * math.log10(0.5))  # 0.25 vs 0.5: -6.02 dB
    assert d["S21"] == pytest.approx(20 * math.log10(2))
    assert d["implant_power_unmatched"] == pytest.approx(1.0)  # (2e-3 - 1e-3) / 1e-3
    assert d["sar_limited_accepted"] == pytest.approx(0.1333 / 0.16 - 1)
    assert "implant_power_tx_matched" not in d  # a variant without a value is not budgeted


def test_power_balance_counts_only_the_excess_over_one():
    assert gum.power_balance_deviations(_metrics(1, 0.5, 0.1, 1, 1, balance=1.08))["peak_SAR_1g"] == pytest.approx(0.08)
    d = gum.power_balance_deviations(_metrics(1, 0.5, 0.1, 1, 1, balance=0.7))
    assert d["peak_SAR_1g"] == 0.0 and d["S21"] == 0.0


def test_conservative_power_at_the_upper_end_of_sar():
    # analytic: SAR up by U -> allowed power (limit / SAR) down by 1 / (1 + U)
    assert gum.conservative_power(0.2, 0.25) == pytest.approx(0.16)
    assert math.isnan(gum.conservative_power(0.2, math.nan))
