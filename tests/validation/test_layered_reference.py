"""The analytic layered-medium reference itself, checked against textbook closed forms."""
import numpy as np
import pytest

from bodysweep.workflow.reference.layered_planewave import C0, ETA0, propagation, complex_permittivity, solve_layers


def test_single_interface_matches_fresnel_normal_incidence():
    # Pozar, Microwave Engineering, 4th ed., sec. 1.7: Gamma = (eta2 - eta1)/(eta2 + eta1) at normal incidence.
    f = 433e6
    er, s = 56.9, 0.805
    _, eta2 = propagation(complex_permittivity(er, s, f), f)
    sol = solve_layers(f, [(er, s, 0.01)], below=(er, s))  # the layer continues into the half-space
    assert sol.gamma_surface == pytest.approx((eta2 - ETA0) / (eta2 + ETA0), rel=1e-12)


def test_lossless_half_wave_slab_is_transparent():
    # Orfanidis, Electromagnetic Waves and Antennas, ch. 5 (single dielectric slab): a slab of
    # thickness lambda/2 in the medium reflects nothing at normal incidence (analytic).
    f, er = 1e9, 4.0
    lam = C0 / f / np.sqrt(er)
    sol = solve_layers(f, [(er, 0.0, lam / 2)])
    assert abs(sol.gamma_surface) < 1e-12


def test_quarter_wave_matching_layer():
    # Pozar, Microwave Engineering, 4th ed., sec. 2.5: a quarter-wave layer of impedance sqrt(Z0 ZL)
    # between air and a lossless half-space eps_r = 9 matches it (eps_r of the layer = 3).
    f = 2.45e9
    lam = C0 / f / np.sqrt(3.0)
    sol = solve_layers(f, [(3.0, 0.0, lam / 4)], below=(9.0, 0.0))
    assert abs(sol.gamma_surface) < 1e-12


def test_field_continuity_and_decay_in_lossy_stack():
    # Tangential E is continuous at every interface (Maxwell boundary condition); inside a thick lossy
    # layer the forward wave decays as exp(-alpha u) (analytic).
    f = 915e6
    layers = [(41.3, 0.87, 0.002), (5.46, 0.051, 0.005), (55.0, 0.95, 0.2)]
    sol = solve_layers(f, layers)
    for u in sol.interfaces_m[1:-1]:
        e_above, e_below = sol.e_field([u - 1e-12, u + 1e-12])
        assert abs(e_above - e_below) < 1e-9
    alpha = propagation(complex_permittivity(55.0, 0.95, f), f)[0].real
    u1, u2 = 0.05, 0.07
    ratio = abs(sol.e_field([u2])[0]) / abs(sol.e_field([u1])[0])
    assert ratio == pytest.approx(np.exp(-alpha * (u2 - u1)), rel=1e-3)  # backward wave negligible this deep
    # power balance: 1 - |Gamma|^2 equals the power entering the stack (Poynting, analytic)
    e0 = sol.e_field([0.0])[0]
    h0 = e0 / sol.z_in
    s_in = 0.5 * np.real(e0 * np.conj(h0))
    assert s_in / (0.5 / ETA0) == pytest.approx(sol.power_transmitted_fraction(), rel=1e-9)
