"""Two-port power gains and stability from S-parameters.

References: D. M. Pozar, *Microwave Engineering*, 4th ed., Wiley 2012: sec. 12.1 (two-port power
gains: transducer gain, Gamma_in / Gamma_out), sec. 12.2 (stability: Rollett factor K and
Delta = S11 S22 - S12 S21, K > 1 and |Delta| < 1 for unconditional stability), sec. 12.3
(design for maximum gain: simultaneous conjugate match and G_T,max). Equation numbers are not
quoted here on purpose; the formulas are written out in each docstring.

For a passive network (a radio link between two antennas through tissue) K >= 1 always, and
the maximum available gain is the link efficiency reached when both ends are conjugate-matched
with lossless networks.
"""
from __future__ import annotations

import numpy as np

__all__ = [
    "delta",
    "rollett_k",
    "is_unconditionally_stable",
    "max_available_gain",
    "max_stable_gain",
    "conjugate_match",
    "transducer_gain",
]


def _s2(S) -> np.ndarray:
    S = np.asarray(S, dtype=complex)
    if S.ndim == 2:
        S = S[None]
    if S.ndim != 3 or S.shape[1:] != (2, 2):
        raise ValueError(f"two-port functions need S of shape (nf, 2, 2), got {np.shape(S)}")
    return S


def delta(S) -> np.ndarray:
    """Determinant ``Delta = S11 S22 - S12 S21`` (Pozar sec. 12.2).

    Parameters
    ----------
    S : array_like, complex, shape (nf, 2, 2)

    Returns
    -------
    numpy.ndarray, complex, shape (nf,)
    """
    S = _s2(S)
    return S[:, 0, 0] * S[:, 1, 1] - S[:, 0, 1] * S[:, 1, 0]


def rollett_k(S) -> np.ndarray:
    """Rollett stability factor ``K = (1 - |S11|^2 - |S22|^2 + |Delta|^2) / (2 |S12 S21|)``.

    Pozar sec. 12.2. ``inf`` where ``S12 S21 = 0`` (unilateral or uncoupled).

    Parameters
    ----------
    S : array_like, complex, shape (nf, 2, 2)

    Returns
    -------
    numpy.ndarray, float, shape (nf,)
    """
    S = _s2(S)
    num = 1 - np.abs(S[:, 0, 0]) ** 2 - np.abs(S[:, 1, 1]) ** 2 + np.abs(delta(S)) ** 2
    den = 2 * np.abs(S[:, 0, 1] * S[:, 1, 0])
    out = np.full(num.shape, np.inf)
    np.divide(num, den, out=out, where=den != 0)
    return out


def is_unconditionally_stable(S) -> np.ndarray:
    """``K > 1`` and ``|Delta| < 1`` (Rollett / Pozar sec. 12.2), shape (nf,) bool."""
    return (rollett_k(S) > 1) & (np.abs(delta(S)) < 1)


def max_stable_gain(S) -> np.ndarray:
    """``|S21| / |S12|`` (linear), shape (nf,); ``inf`` where ``S12 = 0`` and ``S21 != 0``."""
    S = _s2(S)
    s21, s12 = np.abs(S[:, 1, 0]), np.abs(S[:, 0, 1])
    out = np.full(s21.shape, np.inf)
    out[(s21 == 0) & (s12 == 0)] = np.nan
    np.divide(s21, s12, out=out, where=s12 != 0)
    return out


def max_available_gain(S, *, return_flag: bool = False):
    """Maximum available gain (linear), the maximum stable gain where ``K <= 1``.

    For ``K > 1``: ``MAG = |S21/S12| (K - sqrt(K^2 - 1))`` (Pozar sec. 12.3, G_T,max under a
    simultaneous conjugate match). It is evaluated in the algebraically equal form
    ``|S21|^2 / (B/2 + sqrt(B^2/4 - |S12 S21|^2))`` with ``B = 1 - |S11|^2 - |S22|^2 + |Delta|^2``,
    which stays finite for a unilateral network (``S12 = 0`` gives
    ``|S21|^2 / ((1 - |S11|^2)(1 - |S22|^2))``) and has no cancellation for weak links.

    For ``K <= 1`` no simultaneous conjugate match exists; the maximum stable gain
    ``|S21/S12|`` is returned instead and flagged (``return_flag``). A passive reciprocal
    lossless network has ``K = 1`` and gain 1.

    Parameters
    ----------
    S : array_like, complex, shape (nf, 2, 2)
    return_flag : bool, optional
        Also return a bool array, true where the value is a true MAG (``K > 1``), false where it is
        the maximum stable gain.

    Returns
    -------
    gain : numpy.ndarray, float, shape (nf,)
    is_mag : numpy.ndarray, bool, shape (nf,)  (only with ``return_flag=True``)
    """
    S = _s2(S)
    K = rollett_k(S)
    is_mag = K > 1
    s21, s12 = np.abs(S[:, 1, 0]), np.abs(S[:, 0, 1])
    B = 1 - np.abs(S[:, 0, 0]) ** 2 - np.abs(S[:, 1, 1]) ** 2 + np.abs(delta(S)) ** 2
    root = np.sqrt(np.clip(0.25 * B**2 - (s12 * s21) ** 2, 0, None))
    den = 0.5 * B + root
    gain = max_stable_gain(S)
    with np.errstate(divide="ignore", invalid="ignore"):
        mag = s21**2 / den
    gain = np.where(is_mag, mag, gain)
    gain = np.where(is_mag & (s21 == 0), 0.0, gain)
    return (gain, is_mag) if return_flag else gain


def conjugate_match(S):
    """Source and load reflection coefficients of the simultaneous conjugate match.

    Pozar sec. 12.3: ``Gamma_S = (B1 - sqrt(B1^2 - 4|C1|^2)) / (2 C1)``,
    ``Gamma_L = (B2 - sqrt(B2^2 - 4|C2|^2)) / (2 C2)`` with
    ``B1 = 1 + |S11|^2 - |S22|^2 - |Delta|^2``, ``B2 = 1 + |S22|^2 - |S11|^2 - |Delta|^2``,
    ``C1 = S11 - Delta conj(S22)``, ``C2 = S22 - Delta conj(S11)`` (minus sign for ``B > 0``, the
    root inside the unit circle). NaN where ``K <= 1`` (no such match); 0 where ``C = 0``.

    Parameters
    ----------
    S : array_like, complex, shape (nf, 2, 2)

    Returns
    -------
    gamma_s, gamma_l : numpy.ndarray, complex, shape (nf,)
    """
    S = _s2(S)
    s11, s22 = S[:, 0, 0], S[:, 1, 1]
    D = delta(S)
    B1 = 1 + np.abs(s11) ** 2 - np.abs(s22) ** 2 - np.abs(D) ** 2
    B2 = 1 + np.abs(s22) ** 2 - np.abs(s11) ** 2 - np.abs(D) ** 2
    C1 = s11 - D * np.conj(s22)
    C2 = s22 - D * np.conj(s11)

    def root(Bv, Cv):
        disc = np.sqrt(np.clip(Bv**2 - 4 * np.abs(Cv) ** 2, 0, None))
        # (B - sign(B) disc)/(2C) written as 2 conj(C) / (B + sign(B) disc) (no cancellation)
        sgn = np.where(Bv >= 0, 1.0, -1.0)
        den = Bv + sgn * disc
        with np.errstate(divide="ignore", invalid="ignore"):
            g = 2 * np.conj(Cv) / den
        return np.where(np.abs(Cv) == 0, 0j, g)

    ok = rollett_k(S) > 1
    gs = np.where(ok, root(B1, C1), np.nan + 0j)
    gl = np.where(ok, root(B2, C2), np.nan + 0j)
    return gs, gl


def transducer_gain(S, gs=0.0, gl=0.0) -> np.ndarray:
    """Transducer power gain ``G_T = P_load / P_available_from_source`` (Pozar sec. 12.1).

    ``G_T = |S21|^2 (1 - |Gs|^2)(1 - |GL|^2) / |(1 - S11 Gs)(1 - S22 GL) - S12 S21 Gs GL|^2``

    Parameters
    ----------
    S : array_like, complex, shape (nf, 2, 2)
    gs, gl : complex or array_like, shape (nf,)
        Source and load reflection coefficients (referred to the S-parameter reference
        impedance). ``gs = gl = 0`` gives ``|S21|^2``.

    Returns
    -------
    numpy.ndarray, float, shape (nf,)
    """
    S = _s2(S)
    gs = np.asarray(gs, dtype=complex)
    gl = np.asarray(gl, dtype=complex)
    s11, s12, s21, s22 = S[:, 0, 0], S[:, 0, 1], S[:, 1, 0], S[:, 1, 1]
    num = np.abs(s21) ** 2 * (1 - np.abs(gs) ** 2) * (1 - np.abs(gl) ** 2)
    den = np.abs((1 - s11 * gs) * (1 - s22 * gl) - s12 * s21 * gs * gl) ** 2
    return num / den
