"""Normally incident plane wave on a stack of planar layers: exact transmission-line solution.

Each layer is a homogeneous, isotropic, non-magnetic medium with complex relative permittivity
``eps_c = eps_r - j sigma / (omega eps0)`` (time convention ``exp(+j omega t)``). The stack starts at
depth ``u = 0`` (the surface, incident side is air) and each layer has a thickness; below the last layer a
half-space medium closes the stack (air, or the last tissue continued).

The input impedance is carried from the bottom up with the lossy-line recursion

    Z_in = eta_i (Z_L + eta_i tanh(gamma_i d_i)) / (eta_i + Z_L tanh(gamma_i d_i))

(Pozar, Microwave Engineering, 4th ed., eq. 2.91 in its lossy-line form; Orfanidis, Electromagnetic
Waves and Antennas, ch. 6, "multilayer structures"), and the fields are carried down from the surface
with forward / backward wave amplitudes in each layer.

Phasors are peak values.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

EPS0 = 8.8541878128e-12  # F/m, CODATA 2018
MU0 = 1.25663706212e-6  # H/m, CODATA 2018
C0 = 299792458.0  # m/s, exact
ETA0 = np.sqrt(MU0 / EPS0)


def complex_permittivity(eps_r: float, sigma_S_per_m: float, f_Hz: float) -> complex:
    """``eps_r - j sigma / (omega eps0)`` for the ``exp(+j omega t)`` convention."""
    return complex(eps_r, -sigma_S_per_m / (2 * np.pi * f_Hz * EPS0))


def propagation(eps_c: complex, f_Hz: float) -> tuple[complex, complex]:
    """Propagation constant ``gamma = alpha + j beta`` (1/m, Re >= 0) and wave impedance ``eta`` (ohm)."""
    omega = 2 * np.pi * f_Hz
    gamma = 1j * omega * np.sqrt(MU0 * EPS0 * eps_c + 0j)
    if gamma.real < 0:
        gamma = -gamma
    eta = 1j * omega * MU0 / gamma
    return complex(gamma), complex(eta)


@dataclass(frozen=True)
class LayeredSolution:
    """Result of :func:`solve_layers`.

    Attributes
    ----------
    gamma_surface : complex
        Reflection coefficient of the electric field at the surface, ``E_refl / E_inc``.
    z_in : complex
        Input wave impedance of the stack at the surface (ohm).
    interfaces_m : ndarray, shape (n_layers + 1,)
        Depths of the layer tops and of the last bottom (m).
    """

    f_Hz: float
    gamma_surface: complex
    z_in: complex
    interfaces_m: np.ndarray
    _a: tuple  # forward amplitudes at each layer top
    _b: tuple  # backward amplitudes at each layer top
    _gamma: tuple
    _eta: tuple
    _bottom: tuple  # (gamma, eta, a, b) of the closing half-space, referenced to the last interface

    def e_field(self, depth_m: np.ndarray, e_inc: complex = 1.0) -> np.ndarray:
        """Complex E-field phasor (V/m) at the given depths (m, >= 0) for an incident amplitude ``e_inc``."""
        u = np.atleast_1d(np.asarray(depth_m, dtype=float))
        out = np.empty(u.shape, dtype=complex)
        tops = self.interfaces_m
        for k, uk in np.ndenumerate(u):
            i = int(np.searchsorted(tops, uk, side="right") - 1)
            if uk < 0:
                raise ValueError(f"depth must be >= 0 (inside the stack), got {uk} m")
            if i >= len(self._a):
                g, _, a, b = self._bottom
                s = uk - tops[-1]
            else:
                g, a, b = self._gamma[i], self._a[i], self._b[i]
                s = uk - tops[i]
            out[k] = e_inc * (a * np.exp(-g * s) + b * np.exp(g * s))
        return out

    def power_transmitted_fraction(self) -> float:
        """Fraction of incident power that enters the stack, ``1 - |Gamma|^2``."""
        return 1.0 - abs(self.gamma_surface) ** 2


def solve_layers(f_Hz: float, layers: list[tuple[float, float, float]], below: tuple[float, float] = (1.0, 0.0)
                 ) -> LayeredSolution:
    """Solve a normally incident plane wave from air onto ``layers``.

    Parameters
    ----------
    f_Hz : float
        Frequency.
    layers : list of (eps_r, sigma_S_per_m, thickness_m)
        From the surface inward.
    below : (eps_r, sigma_S_per_m)
        Half-space closing the stack (default air).

    Returns
    -------
    LayeredSolution
        Surface reflection coefficient and a field evaluator (fields normalised to unit incident E).
    """
    if not layers:
        raise ValueError("need at least one layer (eps_r, sigma_S_per_m, thickness_m)")
    props = [propagation(complex_permittivity(er, s, f_Hz), f_Hz) for er, s, _ in layers]
    thick = [float(d) for _, _, d in layers]
    if any(d <= 0 for d in thick):
        raise ValueError(f"layer thicknesses must be > 0, got {thick}")
    g_b, eta_b = propagation(complex_permittivity(below[0], below[1], f_Hz), f_Hz)
    # impedance looking into the top of each layer, bottom-up
    z_top = [0j] * len(layers)
    z_load = eta_b
    for i in range(len(layers) - 1, -1, -1):
        g, eta = props[i]
        t = np.tanh(g * thick[i])
        z_top[i] = eta * (z_load + eta * t) / (eta + z_load * t)
        z_load = z_top[i]
    gam = (z_top[0] - ETA0) / (z_top[0] + ETA0)
    # fields top-down; at the surface E = 1 + Gamma (unit incident), H = E / Z_in
    e_top = 1.0 + gam
    a_list, b_list = [], []
    for i, (g, eta) in enumerate(props):
        h_top = e_top / z_top[i]
        a = 0.5 * (e_top + eta * h_top)
        b = 0.5 * (e_top - eta * h_top)
        a_list.append(complex(a))
        b_list.append(complex(b))
        d = thick[i]
        e_bot = a * np.exp(-g * d) + b * np.exp(g * d)
        h_bot = (a * np.exp(-g * d) - b * np.exp(g * d)) / eta
        e_top = e_bot
        _h_next = h_bot
    # closing half-space carries only a forward wave
    a_b = complex(e_top)
    interfaces = np.concatenate([[0.0], np.cumsum(thick)])
    return LayeredSolution(f_Hz=f_Hz, gamma_surface=complex(gam), z_in=complex(z_top[0]), interfaces_m=interfaces,
                           _a=tuple(a_list), _b=tuple(b_list), _gamma=tuple(p[0] for p in props),
                           _eta=tuple(p[1] for p in props), _bottom=(g_b, eta_b, a_b, 0j))


def sar_profile(sol: LayeredSolution, depth_m: np.ndarray, layers: list[tuple[float, float, float]],
                densities_kg_m3: list[float], e_inc: complex = 1.0) -> np.ndarray:
    """Local SAR ``sigma |E|^2 / (2 rho)`` (W/kg) at ``depth_m`` inside the layers (peak phasors)."""
    u = np.atleast_1d(np.asarray(depth_m, dtype=float))
    idx = np.searchsorted(sol.interfaces_m, u, side="right") - 1
    if np.any(idx < 0) or np.any(idx >= len(layers)):
        raise ValueError("SAR depths must lie inside the layers")
    sigma = np.array([layers[i][1] for i in idx])
    rho = np.array([densities_kg_m3[i] for i in idx])
    e = sol.e_field(u, e_inc)
    return sigma * np.abs(e) ** 2 / (2 * rho)
