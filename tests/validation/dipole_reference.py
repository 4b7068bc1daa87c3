"""References for the free-space dipole cases: NEC-2 method of moments, induced EMF, Friis.

Used by ``test_dipoles.py`` and ``benchmarks/validation_antennas.py``; nothing here touches openEMS.

* :func:`nec_impedance` - input impedance of a straight centre-fed wire dipole from NEC-2 (the
  ``necpp`` package, nec2++), thin-wire kernel, delta-gap voltage source on the centre segment.
* :func:`induced_emf_impedance` - Balanis, Antenna Theory, 3rd ed., eq. 4-70 (radiation resistance,
  sinusoidal current) and eq. 8-60b (reactance with the wire radius), referred to the feed by
  ``1 / sin^2(kl/2)`` (Balanis eq. 4-79 / 8-61); gives 73.1 + j42.5 ohm at l = lambda / 2 (eq. 4-93).
* :func:`friis_s21_squared` - ``|S21|^2 = (1 - |S11|^2)(1 - |S22|^2) G1 G2 (lambda / 4 pi R)^2``
  (Pozar, Microwave Engineering, 4th ed., sec. 14.1 (Friis formula) with the impedance-mismatch factors
  of both antennas; polarisation matched).
* :func:`resonance` - where the reactance crosses zero from below, and the resistance there.

An FDTD wire that is only a line of zeroed tangential E (no sub-cell model) behaves like a round wire of
radius about 0.2 times the lateral cell size: 0.230 (Noda & Yokoyama, IEEE Trans. EMC 2002) or 0.199
(Asada, Baba et al., IEEE Trans. EMC 57(6), 2015, DOI 10.1109/TEMC.2015.2424976). :data:`WIRE_RADIUS_RANGE`
spans both, and the comparison of the resistance at resonance is made over that range of radii.
"""
from __future__ import annotations

import math

import numpy as np

C0 = 299_792_458.0  # m/s, SI definition
ETA0 = 376.730313668  # ohm, free-space wave impedance (CODATA 2018)
G_HALF_WAVE = 1.64  # directivity of a half-wave dipole, Balanis, Antenna Theory, 3rd ed., sec. 4.6 (1.643)
#: equivalent radius of an FDTD line wire as a fraction of the lateral cell size (see the module docstring)
WIRE_RADIUS_RANGE = (0.199, 0.230)


def nec_impedance(length_m: float, radius_m: float, f_Hz, segments: int = 51) -> np.ndarray:
    """Input impedance (ohm) of a centre-fed straight wire dipole in free space from NEC-2.

    Parameters
    ----------
    length_m, radius_m : float
        Tip-to-tip length and wire radius.
    f_Hz : array_like, shape (nf,)
    segments : int
        Odd number of segments; the centre one carries the delta-gap source.

    Returns
    -------
    numpy.ndarray, complex, shape (nf,)
    """
    import necpp

    if segments % 2 == 0:
        raise ValueError(f"nec_impedance: segments must be odd, got {segments}")
    out = []
    for f in np.atleast_1d(np.asarray(f_Hz, float)):
        nec = necpp.nec_create()
        try:
            for rc in (necpp.nec_wire(nec, 1, segments, 0, 0, -length_m / 2, 0, 0, length_m / 2, radius_m, 1, 1),
                       necpp.nec_geometry_complete(nec, 0),
                       necpp.nec_gn_card(nec, -1, 0, 0, 0, 0, 0, 0, 0),  # free space
                       necpp.nec_fr_card(nec, 0, 1, f / 1e6, 0),
                       necpp.nec_ex_card(nec, 0, 1, (segments + 1) // 2, 0, 1.0, 0, 0, 0, 0, 0),
                       necpp.nec_xq_card(nec, 0)):
                if rc != 0:
                    raise RuntimeError(f"necpp: {necpp.nec_error_message()}")
            out.append(complex(necpp.nec_impedance_real(nec, 0), necpp.nec_impedance_imag(nec, 0)))
        finally:
            necpp.nec_delete(nec)
    return np.array(out)


def induced_emf_impedance(length_m: float, radius_m: float, f_Hz) -> np.ndarray:
    """Input impedance (ohm) of a thin dipole by the induced-EMF method (sinusoidal current).

    Balanis, Antenna Theory, 3rd ed., eq. 4-70 (R) and eq. 8-60b (X, with radius ``a``), divided by
    ``sin^2(kl/2)`` to refer them from the current maximum to the feed. Returns shape (nf,).
    """
    from scipy.special import sici

    f = np.atleast_1d(np.asarray(f_Hz, float))
    k = 2 * np.pi * f / C0
    kl = k * length_m
    si = lambda x: sici(x)[0]  # noqa: E731
    ci = lambda x: sici(x)[1]  # noqa: E731
    g = np.euler_gamma
    R = ETA0 / (2 * np.pi) * (g + np.log(kl) - ci(kl) + 0.5 * np.sin(kl) * (si(2 * kl) - 2 * si(kl))
                              + 0.5 * np.cos(kl) * (g + np.log(kl / 2) + ci(2 * kl) - 2 * ci(kl)))
    X = ETA0 / (4 * np.pi) * (2 * si(kl) + np.cos(kl) * (2 * si(kl) - si(2 * kl))
                              - np.sin(kl) * (2 * ci(kl) - ci(2 * kl) - ci(2 * k * radius_m ** 2 / length_m)))
    return (R + 1j * X) / np.sin(kl / 2) ** 2


def resonance(f_Hz, Z) -> tuple[float, float]:
    """First frequency where Im Z crosses zero from below (linear interpolation) and Re Z there."""
    f, Z = np.asarray(f_Hz, float), np.asarray(Z, complex)
    X = Z.imag
    k = np.nonzero((X[:-1] < 0) & (X[1:] >= 0))[0]
    if not len(k):
        raise ValueError(f"no resonance (reactance crossing zero upwards) in {f[0]:.4g} ... {f[-1]:.4g} Hz")
    k = int(k[0])
    t = -X[k] / (X[k + 1] - X[k])
    return float(f[k] + t * (f[k + 1] - f[k])), float(Z.real[k] + t * (Z.real[k + 1] - Z.real[k]))


def interpolate(f_Hz, Z, f0: float) -> complex:
    """Z at ``f0`` by linear interpolation of real and imaginary parts."""
    return complex(np.interp(f0, f_Hz, np.real(Z)), np.interp(f0, f_Hz, np.imag(Z)))


def s2z(S, z0: float = 50.0):
    """Input impedance from a reflection coefficient: ``Z = Z0 (1 + S11) / (1 - S11)`` (Pozar, 4th ed., eq. 2.35 solved for Z)."""
    S = np.asarray(S, complex)
    return z0 * (1 + S) / (1 - S)


def friis_s21_squared(f_Hz, distance_m: float, s11, s22, g1: float = G_HALF_WAVE, g2: float = G_HALF_WAVE):
    """``|S21|^2`` of a far-field link between two co-polarised antennas (Friis with mismatch)."""
    lam = C0 / np.asarray(f_Hz, float)
    return (1 - np.abs(s11) ** 2) * (1 - np.abs(s22) ** 2) * g1 * g2 * (lam / (4 * math.pi * distance_m)) ** 2
