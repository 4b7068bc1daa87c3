"""Port and matching figures of a case: input impedance, mismatch loss, implant power per matching variant.

All functions are pure and work on the S-matrix at one frequency, referenced to a real impedance ``Z0``.

Implant power at the SAR limit
------------------------------
The SAR limit caps the power *accepted* at port 1, ``P_lim = limit / peak SAR per W accepted``. What then
reaches the implant depends on the matching networks (lossless) a designer puts at each end:

``unmatched``
    both ports at the reference impedance, no matching network: a transmitter of available power ``P_lim``
    with internal impedance ``Z0`` drives port 1, the implant load is ``Z0``. Transducer gain with
    ``Gamma_S = Gamma_L = 0`` (Pozar, *Microwave Engineering*, 4th ed., sec. 12.1):
    ``P = |S21|^2 P_lim``. Port 1 then accepts ``P_lim (1 - |S11|^2)``, so SAR stays under the limit by
    the mismatch loss.
``tx_matched``
    port 1 conjugate-matched (the transmitter's available power is all accepted, ``P_lim``), implant load
    ``Z0``: operating power gain with ``Gamma_L = 0`` (Pozar sec. 12.1), ``P = P_lim |S21|^2 / (1 - |S11|^2)``.
``both_matched``
    both ends conjugate-matched (simultaneous conjugate match, Pozar sec. 12.3): the accepted power
    ``P_lim`` is all available power and the gain is the maximum available gain,
    ``P = P_lim MAG``. Needs the full 2x2 S-matrix (port 2 excited) and ``K > 1``.

Own derivation (stated): the SAR per watt accepted is computed with the implant port terminated in
``Z0``. A different implant load changes the implant antenna's current and hence its re-radiated field;
this changes the SAR pattern by a fraction of order MAG of the accepted power (the power the matched implant
takes out of the field), negligible for a weakly coupled link. ``unmatched`` and ``tx_matched`` keep the
implant port on ``Z0`` as in the solve and need no such assumption; when MAG exceeds
:data:`STRONG_COUPLING` the case is flagged.
"""
from __future__ import annotations

import math

import numpy as np

from .twoport import max_available_gain, rollett_k

__all__ = ["input_impedance", "mismatch_loss_dB", "implant_power_variants", "port_figures", "VARIANTS",
           "STRONG_COUPLING"]

#: the matching variants, in the order of increasing implant power
VARIANTS = ("unmatched", "tx_matched", "both_matched")

#: power ratio (delivered / accepted) above which the SAR computed with the implant port at Z0 is flagged
#: for the matched variants (own choice: 10 % of the accepted power leaves through the implant)
STRONG_COUPLING = 0.1


def _finite(z) -> bool:
    z = complex(z)
    return math.isfinite(z.real) and math.isfinite(z.imag)


def input_impedance(s_ii: complex, z0_ohm: float) -> complex:
    """Input impedance of a port from its reflection coefficient: ``Z0 (1 + S) / (1 - S)``.

    With the other ports terminated in ``Z0`` (the S-parameter reference), this is the impedance a
    matching network at that port sees (Pozar sec. 2.3, reflection coefficient of a load).

    Raises
    ------
    ValueError
        If ``S`` is not finite or equals 1 (open circuit: infinite impedance).
    """
    s = complex(s_ii)
    if not _finite(s):
        raise ValueError(f"reflection coefficient must be finite, got {s}")
    if abs(1 - s) < 1e-15:
        raise ValueError("reflection coefficient 1: open circuit, infinite impedance")
    return complex(z0_ohm) * (1 + s) / (1 - s)


def mismatch_loss_dB(s_ii: complex) -> float:
    """Mismatch loss ``-10 log10(1 - |S|^2)`` in dB: accepted power below the incident (available) power.

    Common practice (Pozar sec. 2.3, return loss and mismatch). ``inf`` for ``|S| >= 1``.
    """
    m = abs(complex(s_ii))
    if not math.isfinite(m):
        raise ValueError(f"reflection coefficient must be finite, got {s_ii}")
    return math.inf if m >= 1 else -10.0 * math.log10(1.0 - m * m)


def implant_power_variants(p_lim_W: float, S) -> dict:
    """Power into the implant load at the SAR-limited accepted power ``p_lim_W``, per matching variant.

    Parameters
    ----------
    p_lim_W : float
        SAR-limited power accepted at port 1, W (finite, >= 0).
    S : array_like, complex, shape (2, 2)
        S-matrix at the case frequency; a column of a port never excited is NaN.

    Returns
    -------
    dict
        ``{variant: W or None}`` for each of :data:`VARIANTS` and ``reason``: ``{variant: text}`` for each
        variant that has no value (see the module docstring for the definitions).
    """
    p = float(p_lim_W)
    if not (math.isfinite(p) and p >= 0):
        raise ValueError(f"accepted power must be finite and >= 0 W, got {p_lim_W}")
    S = np.asarray(S, dtype=complex)
    if S.shape != (2, 2):
        raise ValueError(f"S must have shape (2, 2), got {S.shape}")
    out: dict = {v: None for v in VARIANTS}
    reason: dict = {}
    s11, s21 = S[0, 0], S[1, 0]
    if _finite(s11) and _finite(s21):
        out["unmatched"] = p * abs(s21) ** 2
        if abs(s11) < 1:
            out["tx_matched"] = p * abs(s21) ** 2 / (1 - abs(s11) ** 2)
        else:
            reason["tx_matched"] = f"|S11| = {abs(s11):.6g} >= 1: port 1 accepts no power"
    else:
        reason["unmatched"] = reason["tx_matched"] = "S11 or S21 not computed"
    if not np.all(np.isfinite(S)):
        reason["both_matched"] = "needs port 2 excited (excite: [1, 2])"
    else:
        gain, is_mag = max_available_gain(S[None], return_flag=True)
        if bool(is_mag[0]) and math.isfinite(float(gain[0])):
            out["both_matched"] = p * float(gain[0])
        else:
            k = float(rollett_k(S[None])[0])
            reason["both_matched"] = (f"no simultaneous conjugate match: Rollett K = {k:.6g} <= 1 "
                                      "(a passive link has K >= 1; the S-matrix is not accurate enough)")
    out["reason"] = reason
    return out


def port_figures(S, z0_ohm: float, excited: list[int]) -> dict:
    """Input impedances, mismatch losses and the Rollett factor of a case at its frequency.

    Parameters
    ----------
    S : array_like, complex, shape (n, n), n = 1 or 2
        S-matrix at the case frequency (NaN where not computed).
    z0_ohm : float
        Real reference impedance of the ports.
    excited : list of int
        Excited ports (1-based).

    Returns
    -------
    dict
        ``Zin1_ohm``, ``Zin2_ohm`` ([re, im] or None), ``mismatch_loss_port1_dB``,
        ``mismatch_loss_port2_dB``, ``rollett_K`` (float or None), ``port2_reason`` (why the port-2
        figures are missing, else None).
    """
    S = np.asarray(S, dtype=complex)
    n = S.shape[0]
    out = {"Zin1_ohm": None, "Zin2_ohm": None, "mismatch_loss_port1_dB": None, "mismatch_loss_port2_dB": None,
           "rollett_K": None, "port2_reason": None}
    for p in (1, 2):
        if p > n or p not in excited or not _finite(S[p - 1, p - 1]):
            continue
        try:
            z = input_impedance(S[p - 1, p - 1], z0_ohm)
            out[f"Zin{p}_ohm"] = [z.real, z.imag]
        except ValueError:
            pass
        ml = mismatch_loss_dB(S[p - 1, p - 1])
        out[f"mismatch_loss_port{p}_dB"] = ml if math.isfinite(ml) else None
    if n < 2:
        out["port2_reason"] = "no implant port (one-port scene)"
    elif 2 not in excited:
        out["port2_reason"] = "port 2 not excited: add excite: [1, 2] to the study for Z at port 2, K and both-ends matching"
    elif np.all(np.isfinite(S[:2, :2])):
        k = float(rollett_k(S[None, :2, :2])[0])
        out["rollett_K"] = k if math.isfinite(k) else None
    return out
