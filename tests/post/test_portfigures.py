"""Port and matching figures (workflow/post/portfigures.py) against scikit-rf and circuit theory."""
import math

import numpy as np
import pytest
import skrf

from bodysweep.workflow.post.portfigures import (implant_power_variants, input_impedance, mismatch_loss_dB,
                                                 port_figures)
from bodysweep.workflow.post.twoport import conjugate_match, transducer_gain

Z0 = 50.0


def _passive_reciprocal(seed, nf=20):
    """Random passive reciprocal two-ports from Z = R + jX, R positive definite (circuit theory)."""
    rng = np.random.default_rng(seed)
    L = rng.normal(size=(nf, 2, 2)) * 40
    R = L @ np.transpose(L, (0, 2, 1)) + np.eye(2)
    X = rng.normal(size=(nf, 2, 2)) * 60
    return skrf.network.z2s(R + 1j * (X + np.transpose(X, (0, 2, 1))), z0=Z0)


def test_input_impedance_and_mismatch_loss_match_scikit_rf():
    S = _passive_reciprocal(3)
    ntw = skrf.Network(frequency=skrf.Frequency.from_f(np.arange(1, 21) * 1e8, unit="Hz"), s=S, z0=Z0)
    for k in range(S.shape[0]):
        # scikit-rf: the one-port S11 as an impedance
        assert input_impedance(S[k, 0, 0], Z0) == pytest.approx(complex(ntw.s11.z[k, 0, 0]), rel=1e-10)
        # mismatch loss = -10 log10(1 - |Gamma|^2) (Pozar, Microwave Engineering, 4th ed., sec. 2.3)
        assert mismatch_loss_dB(S[k, 0, 0]) == pytest.approx(-10 * np.log10(1 - ntw.s_mag[k, 0, 0] ** 2), rel=1e-10)
    # analytic: a 50 ohm load reflects nothing; Gamma = 1/3 is 100 ohm
    assert mismatch_loss_dB(0.0) == 0.0 and input_impedance(1 / 3, Z0) == pytest.approx(100.0)
    assert math.isinf(mismatch_loss_dB(1.0))
    with pytest.raises(ValueError):
        input_impedance(1.0, Z0)


def test_implant_power_variants_against_scikit_rf_and_transducer_gain():
    S = _passive_reciprocal(7)
    ntw = skrf.Network(frequency=skrf.Frequency.from_f(np.arange(1, 21) * 1e8, unit="Hz"), s=S, z0=Z0)
    mag = ntw.max_gain  # scikit-rf maximum available gain
    gs, gl = conjugate_match(S)
    for k in range(S.shape[0]):
        r = implant_power_variants(0.25, S[k])
        assert r["reason"] == {}
        assert r["unmatched"] == pytest.approx(0.25 * abs(S[k, 1, 0]) ** 2, rel=1e-12)
        assert r["tx_matched"] == pytest.approx(0.25 * abs(S[k, 1, 0]) ** 2 / (1 - abs(S[k, 0, 0]) ** 2), rel=1e-12)
        assert r["both_matched"] == pytest.approx(0.25 * mag[k], rel=1e-9)
        # at the simultaneous conjugate match the whole available power is accepted, so the
        # transducer gain there equals delivered / accepted (Pozar sec. 12.3)
        assert r["both_matched"] == pytest.approx(0.25 * transducer_gain(S[k], gs[k], gl[k])[0], rel=1e-9)
        assert r["unmatched"] <= r["tx_matched"] <= r["both_matched"] * (1 + 1e-12)


def test_port2_missing_is_said_not_guessed():
    S = np.array([[0.5 + 0.2j, np.nan], [0.01 - 0.02j, np.nan]])
    r = implant_power_variants(1.0, S)
    assert r["both_matched"] is None and "excite: [1, 2]" in r["reason"]["both_matched"]
    assert r["tx_matched"] == pytest.approx(abs(S[1, 0]) ** 2 / (1 - abs(S[0, 0]) ** 2))
    f = port_figures(S, Z0, [1])
    assert f["Zin2_ohm"] is None and f["rollett_K"] is None and "not excited" in f["port2_reason"]
    assert f["Zin1_ohm"] == pytest.approx([input_impedance(S[0, 0], Z0).real, input_impedance(S[0, 0], Z0).imag])
    f1 = port_figures(S[:1, :1], Z0, [1])
    assert f1["port2_reason"] == "no implant port (one-port scene)"


def test_active_two_port_has_no_both_ends_match():
    # |S21| > 1 with K < 1 (a potentially unstable amplifier, Pozar sec. 12.2): no simultaneous match
    S = np.array([[0.9, 0.2], [3.0, 0.9]], dtype=complex)
    r = implant_power_variants(1.0, S)
    assert r["both_matched"] is None and "Rollett K" in r["reason"]["both_matched"]
