"""Checks of bodysweep.workflow.post.limits and .linkbudget against cited texts, analytic results and scikit-rf."""
import numpy as np
import pytest
import skrf
from skrf.media import DefinedGammaZ0

from bodysweep.workflow.post.limits import ExposureLimit, default_limits, limit_table
from bodysweep.workflow.post.linkbudget import delivered_power, max_input_power

Z0 = 50.0


def test_limit_values_match_cited_texts():
    rows = {r.name: r for r in limit_table()}
    # 47 CFR 1.1310(c): 1.6 W/kg over 1 g, general population, partial body (from memory)
    assert rows["fcc_1g_partial_body"].mass_kg == 1e-3 and rows["fcc_1g_partial_body"].limit_W_per_kg == 1.6
    # ICNIRP 2020, Health Phys. 118(5), Table 2: general public local, 2 W/kg head & trunk, 4 W/kg limbs, 10 g (from memory)
    assert rows["icnirp2020_10g_head_trunk"].mass_kg == 1e-2 and rows["icnirp2020_10g_head_trunk"].limit_W_per_kg == 2.0
    assert rows["icnirp2020_10g_limbs"].mass_kg == 1e-2 and rows["icnirp2020_10g_limbs"].limit_W_per_kg == 4.0
    assert [(r.mass_kg, r.limit_W_per_kg) for r in default_limits()] == [(1e-3, 1.6), (1e-2, 2.0)]
    with pytest.raises(ValueError, match="mass_kg"):
        ExposureLimit("x", 0.0, 2.0, "r", "s")


def test_max_input_power_exact_inverse():
    # analytic: P_max = limit / peak; SAR at P_max equals the limit
    assert max_input_power(0.8, 1.6) == 2.0
    rng = np.random.default_rng(1)
    peak = 10 ** rng.uniform(-3, 3, 200)
    lim = rng.uniform(0.1, 10, 200)
    p = max_input_power(peak, lim)
    np.testing.assert_allclose(p * peak, lim, rtol=1e-14)
    np.testing.assert_allclose(max_input_power(2 * peak, lim), p / 2, rtol=1e-14)
    for bad in (0.0, -1.0, np.nan, np.inf):
        with pytest.raises(ValueError):
            max_input_power(bad, 2.0)


def _freq():
    return skrf.Frequency(400, 450, 3, unit="MHz")


@pytest.mark.parametrize("att_dB", [3.0, 10.0])
def test_matched_t_attenuator(att_dB):
    # Pozar 4th ed. matched T pad: K = 10^(A/20), series R1 = Z0 (K-1)/(K+1), shunt R2 = 2 Z0 K / (K^2-1)
    K = 10 ** (att_dB / 20)
    R1, R2 = Z0 * (K - 1) / (K + 1), 2 * Z0 * K / (K ** 2 - 1)
    m = DefinedGammaZ0(_freq(), z0=Z0)
    pad = m.resistor(R1) ** m.shunt_resistor(R2) ** m.resistor(R1)  # scikit-rf
    ratio = delivered_power(np.ones(3), pad.s)
    np.testing.assert_allclose(ratio, 10 ** (-att_dB / 10), rtol=1e-12)
    ideal = m.attenuator(-att_dB, d=0)  # scikit-rf ideal attenuator
    np.testing.assert_allclose(delivered_power(1.0, ideal.s[0]), 10 ** (-att_dB / 10), rtol=1e-12)


def test_mismatched_from_z_parameters():
    # hand computation (circuit theory): port 2 loaded by Z0, I2 = -Z21 I1 / (Z22 + Z0),
    # Zin = Z11 - Z12 Z21 / (Z22 + Z0); P_acc = |I1|^2 Re Zin / 2, P_del = |I2|^2 Z0 / 2
    Z = np.array([[30 + 20j, 15 - 5j], [15 - 5j, 80 + 40j]])
    zin = Z[0, 0] - Z[0, 1] * Z[1, 0] / (Z[1, 1] + Z0)
    expected = Z0 * abs(Z[1, 0] / (Z[1, 1] + Z0)) ** 2 / zin.real
    S = skrf.network.z2s(Z[None], z0=Z0)[0]  # scikit-rf
    assert abs(S[0, 0]) > 0.1  # really mismatched
    assert delivered_power(0.25, S) == pytest.approx(0.25 * expected, rel=1e-12)
    with pytest.raises(ValueError):
        delivered_power(1.0, np.eye(2))
