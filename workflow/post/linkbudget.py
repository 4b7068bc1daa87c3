"""SAR-limited link budget: largest input power and the power then delivered to the implant.

Peak averaged SAR scales with the square of the field, hence linearly with the power accepted
at port 1. With ``peak`` the peak mass-averaged SAR per watt accepted (W/kg per W), the largest
accepted power keeping SAR at the limit is ``P_max = limit / peak``.

Delivered power (power waves, Pozar, *Microwave Engineering*, 4th ed., sec. 4.3): with incident
wave ``a1`` at port 1 and port 2 terminated in its reference impedance ``Z0`` (``a2 = 0``),

* ``b1 = S11 a1`` and ``b2 = S21 a1``;
* accepted power ``P_acc = |a1|^2 - |b1|^2 = |a1|^2 (1 - |S11|^2)``, so the incident power is
  ``P_inc = |a1|^2 = P_acc / (1 - |S11|^2)``;
* power into the matched load at port 2 ``P_del = |b2|^2 = |S21|^2 P_inc``

(power-wave normalisation ``P = |a|^2``; the factor 1/2 for peak phasors cancels in the ratios).
Together: ``P_del = P_acc |S21|^2 / (1 - |S11|^2)``.
"""
from __future__ import annotations

import numpy as np

__all__ = ["max_input_power", "delivered_power", "accepted2delivered_ratio"]


def max_input_power(peak_sar_per_W, limit_W_per_kg):
    """Largest power accepted at port 1 that keeps the peak averaged SAR at the limit.

    Parameters
    ----------
    peak_sar_per_W : float or numpy.ndarray
        Peak mass-averaged SAR per watt accepted, W/kg per W; must be finite and > 0.
    limit_W_per_kg : float or numpy.ndarray
        SAR limit in W/kg (broadcast against ``peak_sar_per_W``); must be finite and > 0.

    Returns
    -------
    float or numpy.ndarray
        ``limit / peak`` in W, shape of the broadcast inputs (float for scalar inputs).

    Raises
    ------
    ValueError
        If any peak or limit is not finite or <= 0.
    """
    peak = np.asarray(peak_sar_per_W, dtype=float)
    limit = np.asarray(limit_W_per_kg, dtype=float)
    bad = ~(np.isfinite(peak) & (peak > 0))
    if np.any(bad):
        raise ValueError(f"peak SAR per W must be finite and > 0 W/kg per W, got {peak[bad].ravel()[:5]}")
    bad = ~(np.isfinite(limit) & (limit > 0))
    if np.any(bad):
        raise ValueError(f"SAR limit must be finite and > 0 W/kg, got {limit[bad].ravel()[:5]}")
    p = limit / peak
    return float(p) if p.ndim == 0 else p


def accepted2delivered_ratio(S):
    """Ratio of power into the matched port-2 load to power accepted at port 1.

    Parameters
    ----------
    S : array_like, complex, shape (2, 2) or (nf, 2, 2)
        S-matrix (``S[..., 1, 0]`` is S21) referenced to the port impedances.

    Returns
    -------
    float or numpy.ndarray
        ``|S21|^2 / (1 - |S11|^2)``, float for shape (2, 2), shape (nf,) otherwise.

    Raises
    ------
    ValueError
        If S has the wrong shape or ``|S11| >= 1`` (no power accepted at port 1).
    """
    S = np.asarray(S, dtype=complex)
    if S.shape[-2:] != (2, 2) or S.ndim not in (2, 3):
        raise ValueError(f"S must have shape (2, 2) or (nf, 2, 2), got {S.shape}")
    s11 = np.abs(S[..., 0, 0])
    if np.any(~np.isfinite(s11)) or np.any(s11 >= 1.0):
        raise ValueError(f"|S11| must be < 1 for power to be accepted at port 1, got max |S11| = {np.max(s11)}")
    g = np.abs(S[..., 1, 0]) ** 2 / (1.0 - s11 ** 2)
    return float(g) if g.ndim == 0 else g


def delivered_power(p_accepted_W, S):
    """Power into the matched (``Z0``) load at port 2 for a given power accepted at port 1.

    ``P_del = P_acc |S21|^2 / (1 - |S11|^2)``: incident power ``P_acc / (1 - |S11|^2)`` and
    ``b2 = S21 a1`` with port 2 matched (``a2 = 0``); see the module docstring.

    Parameters
    ----------
    p_accepted_W : float or numpy.ndarray
        Power accepted at port 1 in W, >= 0; scalar or shape (nf,).
    S : array_like, complex, shape (2, 2) or (nf, 2, 2)
        S-matrix at the frequency (or frequencies).

    Returns
    -------
    float or numpy.ndarray
        Delivered power in W; float for scalar power and shape (2, 2), else shape (nf,).

    Raises
    ------
    ValueError
        If the accepted power is negative or not finite, or as :func:`accepted2delivered_ratio`.
    """
    p = np.asarray(p_accepted_W, dtype=float)
    bad = ~(np.isfinite(p) & (p >= 0))
    if np.any(bad):
        raise ValueError(f"accepted power must be finite and >= 0 W, got {p[bad].ravel()[:5]}")
    out = p * np.asarray(accepted2delivered_ratio(S))
    return float(out) if out.ndim == 0 else out
