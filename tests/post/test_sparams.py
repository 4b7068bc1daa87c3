"""Checks of bodysweep.workflow.post.sparams against analytic results and scikit-rf."""
import numpy as np
import pytest
import skrf

from bodysweep.workflow.post.sparams import (
    accepted_power,
    dft,
    passivity,
    power_waves,
    reciprocity,
    smatrix_from_waves,
    write_touchstone,
)

Z0 = 50.0


def test_dft_gaussian_matches_analytic_fourier_transform():
    # analytic: F{exp(-(t-t0)^2/(2 tau^2))}(f) = tau sqrt(2 pi) exp(-2 pi^2 f^2 tau^2) exp(-j 2 pi f t0)
    tau, t0 = 0.4e-9, 3e-9
    t = np.arange(0, 8000) * 1e-12
    x = np.exp(-((t - t0) ** 2) / (2 * tau**2))
    f = np.linspace(0, 1.2e9, 7)
    ref = tau * np.sqrt(2 * np.pi) * np.exp(-2 * np.pi**2 * f**2 * tau**2) * np.exp(-2j * np.pi * f * t0)
    got = dft(x, t, f)
    assert got.shape == (7,)
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-9 * np.abs(ref).max())
    np.testing.assert_allclose(dft(x, t, f, one_sided=True), 2 * ref, atol=2e-9 * np.abs(ref).max())


def test_dft_damped_sinusoid_matches_laplace_transform():
    # analytic: F{exp(-alpha t) sin(w0 t) u(t)} = w0 / ((alpha + j w)^2 + w0^2)
    alpha, f0 = 2e8, 403e6
    w0 = 2 * np.pi * f0
    dt = 2e-12
    t = np.arange(0, 60000) * dt
    x = np.exp(-alpha * t) * np.sin(w0 * t)
    f = np.array([300e6, 403e6, 500e6])
    w = 2 * np.pi * f
    ref = w0 / ((alpha + 1j * w) ** 2 + w0**2)
    got = dft(np.stack([x, 2 * x]), t, f)  # leading axes are kept
    assert got.shape == (2, 3)
    np.testing.assert_allclose(got[0], ref, rtol=1e-4)
    np.testing.assert_allclose(got[1], 2 * ref, rtol=1e-4)


def test_dft_rejects_non_uniform_time_steps():
    t = np.array([0.0, 1.0, 2.5, 3.0]) * 1e-12
    with pytest.raises(ValueError, match="uniform"):
        dft(np.ones(4), t, [1e9])
    with pytest.raises(ValueError, match="samples"):
        dft(np.ones(3), np.arange(4) * 1e-12, [1e9])


@pytest.mark.parametrize("ZL", [50.0, 25.0, 100.0 + 30j, 10 - 80j, 1e-3])
def test_reflection_of_known_load(ZL):
    # Pozar, Microwave Engineering, 4th ed., eq. 2.35: Gamma = (ZL - Z0) / (ZL + Z0)
    Vs = 2.0 + 0.5j  # Thevenin source with internal resistance Z0, peak phasor
    I = Vs / (Z0 + ZL)
    V = ZL * I
    a, b = power_waves(V, I, Z0)
    np.testing.assert_allclose(b / a, (ZL - Z0) / (ZL + Z0), rtol=1e-12, atol=1e-15)
    # available power of the source |Vs|^2 / (8 R0) equals |a|^2/2 (analytic)
    np.testing.assert_allclose(0.5 * abs(a) ** 2, abs(Vs) ** 2 / (8 * Z0), rtol=1e-12)
    # accepted power: 0.5 |I|^2 Re ZL (analytic, peak phasors) = 0.5 (|a|^2 - |b|^2)
    P = accepted_power(V, I)
    np.testing.assert_allclose(P, 0.5 * abs(I) ** 2 * np.real(ZL), rtol=1e-12, atol=1e-18)
    np.testing.assert_allclose(P, 0.5 * (abs(a) ** 2 - abs(b) ** 2), rtol=1e-10, atol=1e-18)


def test_power_waves_complex_reference_match_scikit_rf():
    # scikit-rf z2s with s_def="power" implements Kurokawa's power waves for complex z0
    z0 = 40 + 15j
    ZL = 70 - 20j
    I = 1.0 / (np.conj(z0) + ZL)  # any drive; Gamma depends only on ZL, z0
    V = ZL * I
    a, b = power_waves(V, I, z0)
    ref = skrf.network.z2s(np.array([[[ZL]]]), z0=z0, s_def="power")[0, 0, 0]
    np.testing.assert_allclose(b / a, ref, rtol=1e-12)


def _tee_z(f_Hz):
    """Z matrix (nf, 2, 2) of a T: series arms Za, Zb, shunt Zc (analytic two-port)."""
    w = 2 * np.pi * f_Hz
    Za = 12.0 + 1j * w * 8e-9
    Zb = 33.0 + 1 / (1j * w * 4e-12)
    Zc = 20.0 + 1j * w * 3e-9 + 1 / (1j * w * 20e-12)
    Z = np.empty((f_Hz.size, 2, 2), complex)
    Z[:, 0, 0] = Za + Zc
    Z[:, 1, 1] = Zb + Zc
    Z[:, 0, 1] = Z[:, 1, 0] = Zc
    return Z


def _drive(Z, k, Zterm):
    """V, I (n_ports, nf) when port k is driven by 1 V behind Z0 and the others end in Zterm."""
    nf, n, _ = Z.shape
    Zs = np.full(n, complex(Zterm))
    Zs[k] = Z0
    M = Z + np.diag(Zs)[None]
    e = np.zeros((nf, n), complex)
    e[:, k] = 1.0
    I = np.linalg.solve(M, e[..., None])[..., 0]  # current into each port
    V = np.einsum("fij,fj->fi", Z, I)
    return V.T, I.T


@pytest.mark.parametrize("Zterm", [Z0, 30.0 + 10j])
def test_two_port_from_two_excitations_matches_scikit_rf_z2s(Zterm):
    # reference: scikit-rf z2s on the analytic Z matrix of a T network
    f = np.linspace(380e6, 430e6, 6)
    Z = _tee_z(f)
    ref = skrf.network.z2s(Z, z0=Z0)
    a = np.empty((2, 2, f.size), complex)
    b = np.empty_like(a)
    for k in range(2):
        V, I = _drive(Z, k, Zterm)
        a[k], b[k] = power_waves(V, I, Z0)
    S = smatrix_from_waves(a, b)
    np.testing.assert_allclose(S, ref, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(reciprocity(S), 0, atol=1e-12)  # reciprocal network (analytic)
    assert np.all(passivity(S) <= 1 + 1e-12)  # passive network
    # excitations given in the other order
    S2 = smatrix_from_waves(a[::-1], b[::-1], exc_ports=[1, 0])
    np.testing.assert_allclose(S2, ref, rtol=1e-10, atol=1e-12)


def test_only_port_one_excited_gives_first_column_and_nan():
    # matched termination: incident wave at port 2 is zero, so S_i1 = b_i / a_1 (scikit-rf z2s)
    f = np.linspace(380e6, 430e6, 4)
    Z = _tee_z(f)
    ref = skrf.network.z2s(Z, z0=Z0)
    V, I = _drive(Z, 0, Z0)
    a, b = power_waves(V, I, Z0)
    S = smatrix_from_waves(a[None], b[None], exc_ports=[0])
    np.testing.assert_allclose(S[:, :, 0], ref[:, :, 0], rtol=1e-10)
    assert np.all(np.isnan(S[:, :, 1]))
    # passivity only uses the known column: |S11|^2 + |S21|^2
    np.testing.assert_allclose(passivity(S), np.sum(np.abs(ref[:, :, 0]) ** 2, axis=1), rtol=1e-12)


def test_smatrix_rejects_bad_shapes_and_ports():
    a = np.ones((2, 2, 3))
    with pytest.raises(ValueError, match="n_exc, n_ports, nf"):
        smatrix_from_waves(a, np.ones((2, 3)))
    with pytest.raises(ValueError, match="outside"):
        smatrix_from_waves(a, a, exc_ports=[0, 5])


def test_passivity_and_reciprocity_of_hand_matrix():
    # analytic: S = [[0, 2], [0.5j, 0]] -> column sums 0.25 and 4, |S21 - S12| = |0.5j - 2|
    S = np.array([[[0, 2], [0.5j, 0]]])
    np.testing.assert_allclose(passivity(S), [4.0])
    np.testing.assert_allclose(reciprocity(S), [abs(0.5j - 2)])


def test_touchstone_round_trip_through_scikit_rf(tmp_path):
    # reference reader: skrf.Network(touchstone file)
    f = np.linspace(390e6, 416e6, 5)
    rng = np.random.default_rng(3)
    S = (rng.normal(size=(5, 2, 2)) + 1j * rng.normal(size=(5, 2, 2))) * 0.3
    out = write_touchstone(tmp_path / "sparams.s2p", f, S, 50, comments=["case abc", "port 1 external"])
    assert out.name == "sparams.s2p" and out.exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]  # no temporary left
    text = out.read_text()
    assert text.startswith("!case abc\n!port 1 external")
    n = skrf.Network(str(out))
    np.testing.assert_allclose(n.f, f, rtol=1e-15)
    np.testing.assert_allclose(n.s, S, rtol=1e-14, atol=1e-16)
    np.testing.assert_allclose(n.z0, 50)
    # one-port file gets the .s1p extension
    out1 = write_touchstone(tmp_path / "refl.s2p", f, S[:, :1, :1], comments="x")
    assert out1.suffix == ".s1p"
    np.testing.assert_allclose(skrf.Network(str(out1)).s, S[:, :1, :1], rtol=1e-14)
