"""Checks of bodysweep.workflow.post.twoport against scikit-rf and analytic two-ports."""
import numpy as np
import pytest
import skrf

from bodysweep.workflow.post.twoport import (
    conjugate_match,
    delta,
    is_unconditionally_stable,
    max_available_gain,
    max_stable_gain,
    rollett_k,
    transducer_gain,
)

Z0 = 50.0


def _random_passive_reciprocal_s(nf, seed):
    """S (nf, 2, 2) from random symmetric Z = R + jX with R positive definite (passive, reciprocal)."""
    rng = np.random.default_rng(seed)
    L = rng.normal(size=(nf, 2, 2)) * 40
    R = L @ np.transpose(L, (0, 2, 1)) + 1.0 * np.eye(2)
    X = rng.normal(size=(nf, 2, 2)) * 60
    X = X + np.transpose(X, (0, 2, 1))
    return skrf.network.z2s(R + 1j * X, z0=Z0)


def _network(S):
    return skrf.Network(frequency=skrf.Frequency.from_f(np.arange(1, S.shape[0] + 1) * 1e6, unit="Hz"), s=S, z0=Z0)


def test_k_and_mag_match_scikit_rf_on_random_passive_reciprocal_networks():
    # reference: scikit-rf Network.stability and Network.max_gain
    S = _random_passive_reciprocal_s(200, seed=11)
    ntw = _network(S)
    K = rollett_k(S)
    np.testing.assert_allclose(K, ntw.stability, rtol=1e-10)
    assert np.all(K >= 1 - 1e-9)  # passive two-port: K >= 1 (Pozar sec. 12.2)
    g, is_mag = max_available_gain(S, return_flag=True)
    np.testing.assert_allclose(g, ntw.max_gain, rtol=1e-9)
    assert np.all(g <= 1 + 1e-12)
    np.testing.assert_allclose(max_stable_gain(S), ntw.max_stable_gain, rtol=1e-12)
    np.testing.assert_allclose(delta(S), S[:, 0, 0] * S[:, 1, 1] - S[:, 0, 1] * S[:, 1, 0])
    assert is_mag.mean() > 0.95


def test_conjugate_matched_transducer_gain_equals_mag():
    # Pozar sec. 12.3: with Gamma_S, Gamma_L of the simultaneous conjugate match, G_T = G_T,max;
    # reference value scikit-rf Network.max_gain
    S = _random_passive_reciprocal_s(100, seed=5)
    ntw = _network(S)
    gs, gl = conjugate_match(S)
    ok = rollett_k(S) > 1 + 1e-9
    gt = transducer_gain(S, gs, gl)
    np.testing.assert_allclose(gt[ok], ntw.max_gain[ok], rtol=1e-8)
    assert np.all(np.abs(gs[ok]) < 1) and np.all(np.abs(gl[ok]) < 1)
    # conjugate match: Gamma_in = conj(Gamma_S) (Pozar sec. 12.1, Gamma_in = S11 + S12 S21 GL / (1 - S22 GL))
    gin = S[:, 0, 0] + S[:, 0, 1] * S[:, 1, 0] * gl / (1 - S[:, 1, 1] * gl)
    np.testing.assert_allclose(gin[ok], np.conj(gs[ok]), atol=1e-8)
    # no termination beats it: random passive terminations give lower G_T (definition of maximum)
    rng = np.random.default_rng(1)
    for _ in range(20):
        r1 = np.sqrt(rng.uniform(0, 1, S.shape[0])) * np.exp(2j * np.pi * rng.uniform(size=S.shape[0]))
        r2 = np.sqrt(rng.uniform(0, 1, S.shape[0])) * np.exp(2j * np.pi * rng.uniform(size=S.shape[0]))
        assert np.all(transducer_gain(S, r1, r2)[ok] <= gt[ok] * (1 + 1e-9))


@pytest.mark.parametrize("L_dB", [0.5, 3.0, 20.0, 60.0])
def test_matched_attenuator_mag_is_minus_its_loss(L_dB):
    # matched T attenuator, k = 10^(L/20): series arms Z0 (k-1)/(k+1), shunt 2 Z0 k/(k^2-1)
    # (analytic: S11 = S22 = 0, S21 = 1/k) -> MAG = |S21|^2 = -L dB
    k = 10 ** (L_dB / 20)
    Ra = Z0 * (k - 1) / (k + 1)
    Rc = 2 * Z0 * k / (k**2 - 1)
    Z = np.array([[[Ra + Rc, Rc], [Rc, Ra + Rc]]])
    S = skrf.network.z2s(Z, z0=Z0)
    np.testing.assert_allclose(np.abs(S[0, 0, 0]), 0, atol=1e-12)
    g = max_available_gain(S)
    np.testing.assert_allclose(10 * np.log10(g), -L_dB, rtol=1e-9)
    np.testing.assert_allclose(transducer_gain(S), 10 ** (-L_dB / 10), rtol=1e-9)


def test_unilateral_network_mag():
    # Pozar sec. 12.3, unilateral case: G_TU,max = |S21|^2 / ((1 - |S11|^2)(1 - |S22|^2))
    S = np.array([[[0.5 * np.exp(-1j), 0.0], [3.0 * np.exp(0.4j), 0.3j]]])
    ref = 9.0 / ((1 - 0.25) * (1 - 0.09))
    np.testing.assert_allclose(max_available_gain(S), [ref], rtol=1e-12)
    assert np.isinf(rollett_k(S)[0])


def test_potentially_unstable_device_returns_flagged_msg():
    # K < 1: maximum stable gain |S21/S12| is returned (scikit-rf Network.max_gain does the same)
    S = np.array([[[0.9 * np.exp(-1.0j), 0.1 * np.exp(1.2j)], [5.0 * np.exp(2.0j), 0.8 * np.exp(-0.6j)]]])
    K = rollett_k(S)
    assert K[0] < 1
    g, is_mag = max_available_gain(S, return_flag=True)
    assert not is_mag[0]
    np.testing.assert_allclose(g, [50.0], rtol=1e-12)
    np.testing.assert_allclose(g, _network(S).max_gain, rtol=1e-12)
    assert not is_unconditionally_stable(S)[0]
    assert np.all(np.isnan(conjugate_match(S)[0]))


def test_uncoupled_ports_give_zero_gain():
    # analytic: S21 = S12 = 0 -> no power reaches port 2
    S = np.array([[[0.2, 0.0], [0.0, -0.4]]])
    assert max_available_gain(S)[0] == 0.0
    with pytest.raises(ValueError, match=r"\(nf, 2, 2\)"):
        rollett_k(np.zeros((3, 3, 3)))
