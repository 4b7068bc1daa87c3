"""Uncertainty budget arithmetic (GUM, JCGM 100:2008), pure functions over plain numbers.

Each component is a deviation ``a`` (the change of a quantity when one input of the simulation is
changed) taken as the half-width of a distribution; its standard uncertainty is ``u = |a| / divisor``
with the divisor of that distribution (JCGM 100:2008 §4.3.7 rectangular: sqrt 3; §4.3.9 triangular:
sqrt 6; a normal distribution quoted at one standard deviation: 1; U-shaped: sqrt 2). Uncorrelated
components combine by root-sum-square (§5.1.2 with unit sensitivity coefficients, the deviations being
already in the quantity's unit) and the expanded uncertainty is ``U = k u_c`` with ``k = 2`` (§6.2).

Quantities and the unit of their deviations:

- peak averaged SAR per mass, SAR-limited accepted power, implant power per matching variant: relative
  (fraction);
- S11, S21: dB (the difference of ``20 log10 |S|``).

The power-balance component comes from the case's own metrics: radiated power is not computed, so only
the part of ``(absorbed + delivered) / accepted`` above 1 is counted (no radiation explains it); it
applies to the per-watt quantities (SAR, SAR-limited and implant powers), not to S-parameters.
"""
from __future__ import annotations

import math
from typing import Iterable, Mapping

#: divisor of each distribution (JCGM 100:2008 §4.3.7, §4.3.9)
DIVISORS = {"rectangular": math.sqrt(3.0), "triangular": math.sqrt(6.0), "normal": 1.0, "u-shaped": math.sqrt(2.0)}
#: distribution of each component: every deviation here is a largest observed change, counted as the
#: half-width of a rectangular distribution (as IEC/IEEE 62704-1 §7 does for mesh and boundary)
COMPONENT_DISTRIBUTION = {"mesh": "rectangular", "boundary": "rectangular", "tissue": "rectangular",
                          "power_balance": "rectangular", "end_criterion": "rectangular"}
#: coverage factor of the expanded uncertainty (JCGM 100:2008 §6.2, about 95 % for a normal distribution)
K = 2.0


def standard_uncertainty(deviation: float, distribution: str) -> float:
    """``|deviation| / divisor`` of the distribution."""
    return abs(float(deviation)) / DIVISORS[distribution]


def combined(standard: Iterable[float]) -> float:
    """Root-sum-square of standard uncertainties (NaN if any is NaN)."""
    return math.sqrt(sum(float(u) ** 2 for u in standard))


def expanded(u_c: float, k: float = K) -> float:
    return k * float(u_c)


def _num(v) -> float:
    return float(v) if isinstance(v, (int, float)) and not isinstance(v, bool) and v is not None else math.nan


def _db(pair) -> float:
    if isinstance(pair, (list, tuple)) and len(pair) == 2:
        m = math.hypot(_num(pair[0]), _num(pair[1]))
        return 20.0 * math.log10(m) if m > 0 else math.nan
    return math.nan


def _mass_tag(mass_kg: float) -> str:
    return f"{round(float(mass_kg) * 1e3, 6):g}g"


#: implant power variants of ``metrics.json["limits"][i]["implant_power_W"]`` (as in the summary)
IMPLANT_VARIANTS = ("unmatched", "tx_matched", "both_matched")


def quantities(metrics: Mapping) -> dict[str, tuple[float, str]]:
    """The budgeted quantities of one case: ``name -> (value, "relative" | "dB")``.

    Names: ``peak_SAR_<m>g`` per averaging mass, ``S11``, ``S21``, ``sar_limited_accepted`` and
    ``implant_power_<variant>`` per matching variant with a value (of the most restrictive limit, as in
    the summary table).
    """
    out: dict[str, tuple[float, str]] = {}
    for s in metrics.get("sar") or []:
        out[f"peak_SAR_{_mass_tag(s.get('mass_kg', math.nan))}"] = (_num(s.get("peak_W_per_kg_per_W")), "relative")
    out["S11"] = (_db(metrics.get("S11")), "dB")
    if metrics.get("S21") is not None:
        out["S21"] = (_db(metrics.get("S21")), "dB")
    lims = [(_num(l.get("sar_limited_accepted_W")), i) for i, l in enumerate(metrics.get("limits") or [])]
    lims = [x for x in lims if x[0] == x[0]]
    if lims:
        p_acc, i = min(lims)
        out["sar_limited_accepted"] = (p_acc, "relative")
        powers = metrics["limits"][i].get("implant_power_W") or {}
        for v in IMPLANT_VARIANTS:
            p = _num(powers.get(v))
            if p == p:
                out[f"implant_power_{v}"] = (p, "relative")
    return out


def deviation(base: float, changed: float, kind: str) -> float:
    """``(changed - base) / base`` for relative quantities, ``changed - base`` for dB ones (NaN if undefined)."""
    if not (math.isfinite(base) and math.isfinite(changed)):
        return math.nan
    if kind == "dB":
        return changed - base
    return (changed - base) / base if base != 0 else math.nan


def run_deviations(base_metrics: Mapping, run_metrics: Mapping) -> dict[str, float]:
    """Deviation of each quantity of a component run from its case."""
    b, r = quantities(base_metrics), quantities(run_metrics)
    return {q: deviation(v, r[q][0], kind) if q in r else math.nan for q, (v, kind) in b.items()}


def power_balance_deviations(metrics: Mapping) -> dict[str, float]:
    """The power-balance component of one case: ``max(0, balance - 1)`` for per-watt quantities, 0 dB for S."""
    bal = _num(metrics.get("energy_balance"))
    excess = max(0.0, bal - 1.0) if math.isfinite(bal) else math.nan
    return {q: (0.0 if kind == "dB" else excess) for q, (v, kind) in quantities(metrics).items()}


def budget_rows(deviations: Mapping[str, Mapping[str, float]], kinds: Mapping[str, str]) -> list[dict]:
    """Budget table rows of one case.

    Parameters
    ----------
    deviations : mapping
        ``component -> {quantity: deviation}``.
    kinds : mapping
        ``quantity -> "relative" | "dB"``.

    Returns
    -------
    list of dict
        Per quantity: one row per component (``component``, ``deviation``, ``distribution``, ``divisor``,
        ``standard_uncertainty``), then ``combined`` (root-sum-square) and ``expanded`` (k = 2) rows.
    """
    rows = []
    for q, kind in kinds.items():
        us = []
        for comp, devs in deviations.items():
            dist = COMPONENT_DISTRIBUTION[comp]
            a = float(devs.get(q, math.nan))
            u = standard_uncertainty(a, dist) if math.isfinite(a) else math.nan
            us.append(u)
            rows.append({"quantity": q, "unit": kind, "component": comp, "deviation": a, "distribution": dist,
                         "divisor": DIVISORS[dist], "standard_uncertainty": u})
        u_c = combined(us) if us else math.nan
        rows.append({"quantity": q, "unit": kind, "component": "combined", "deviation": math.nan,
                     "distribution": "", "divisor": math.nan, "standard_uncertainty": u_c})
        rows.append({"quantity": q, "unit": kind, "component": f"expanded (k={K:g})", "deviation": math.nan,
                     "distribution": "", "divisor": math.nan, "standard_uncertainty": expanded(u_c)})
    return rows


def conservative_power(allowed_W: float, expanded_rel_sar: float) -> float:
    """SAR-limited power at the upper end of the SAR uncertainty: ``P / (1 + U_rel)``."""
    if not (math.isfinite(allowed_W) and math.isfinite(expanded_rel_sar)):
        return math.nan
    return allowed_W / (1.0 + expanded_rel_sar)
