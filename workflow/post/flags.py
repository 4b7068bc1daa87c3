"""Warnings for finished cases whose numbers may be wrong although the run itself succeeded.

Each suspicion becomes one plain string ``"<code>: <message>"`` of ``metrics.json["warnings"]`` (beside
the finish step's other warnings), so the case's status is ``warning`` and the summary's ``warnings``
column lists it.

Codes
-----
``sar_cube_truncated``
    The averaging cube of the reported peak of some mass touches a cut face of the phantom (a face that is not body
    surface: the ends of a limb, the sides and bottom of a slab or liquid box) or the edge of the SAR
    grid. The tissue beyond that face is missing from the model, so the peak is a truncation artefact.
``accepted_power_low``
    Less than :data:`MIN_ACCEPTED_FRACTION` of the incident power is accepted at port 1
    (``1 - |S11|^2``). Every per-watt figure (SAR per W, allowed input power) divides by this small
    difference of two large numbers and is ill-conditioned.
``energy_balance``
    ``(absorbed + delivered) / accepted`` outside ``[0, 1 + ENERGY_BALANCE_EXCESS]``: radiated power is
    never negative, so more power leaving through losses and the implant port than enters at port 1
    means the accepted power (or the fields) are wrong by at least that much.
``end_criterion``
    An excitation did not reach its energy-decay end criterion.
``pulse_tail``
    The engine's energy criterion stopped an excitation a little before the pulse's energy still to come had
    fallen to the end criterion (at most ten times more was still to come, else the run fails): the
    spectrum is cut by that share.
``thin_wire``
    An antenna is a dipole of wire without a radius (``wire_radius_mm: 0`` and no ``strip_width_mm``): a line of
    metal edges with no cross-section. Its effective radius is a fraction of the mesh cell beside it, so its
    feed impedance and coupling follow the mesh and have no mesh-independent value (halving the cells at
    such an implant wire moved |S21| by 2.6 dB in ``benchmarks/mesh_economy.py``; README, Mesh economy).
``mesh_component``
    The mesh component of the uncertainty budget exceeds a threshold (added by the budget, see
    :mod:`bodysweep.workflow.post.uncertainty`).

Pure functions over plain dicts and arrays; nothing here reads files.
"""
from __future__ import annotations

import math
from typing import Iterable, Mapping, Sequence

#: accepted / incident power at port 1 below which per-watt figures are flagged (a few percent)
MIN_ACCEPTED_FRACTION = 0.05
#: tolerated excess of (absorbed + delivered) over accepted power (numerical noise of the two sums)
ENERGY_BALANCE_EXCESS = 0.05

#: between the warnings of one case in the summary's ``warnings`` column
WARNING_SEPARATOR = " | "

_AXES = "xyz"


def cut_faces(phantom: Mapping) -> list[tuple[int, float, str]]:
    """Planes where the phantom's tissue is cut off by the model, not by the body surface.

    Parameters
    ----------
    phantom : mapping
        SI phantom spec dict (``scene["phantom"]``, as in ``case.json``).

    Returns
    -------
    list of (axis index, coordinate in m, name)
        ``layered_cylinder``: its two ends; ``layered_slab`` and ``liquid_box``: the four sides and the
        bottom (``z = 0`` is the body surface); ``none`` and unknown types: no face.
    """
    kind = phantom.get("type")
    if kind == "layered_cylinder":
        a = _AXES.index(phantom.get("axis", "y"))
        h = float(phantom["length_m"]) / 2
        return [(a, -h, f"the limb's end {_AXES[a]} = {-h * 1e3:g} mm"),
                (a, h, f"the limb's end {_AXES[a]} = {h * 1e3:g} mm")]
    if kind in ("layered_slab", "liquid_box"):
        hx, hy = float(phantom["size_x_m"]) / 2, float(phantom["size_y_m"]) / 2
        if kind == "layered_slab":
            bottom = -sum(float(l["thickness_m"]) for l in phantom.get("layers", []))
        else:
            bottom = -float(phantom["depth_m"])
        what = "slab" if kind == "layered_slab" else "liquid box"
        out = [(0, -hx, f"the {what}'s side x = {-hx * 1e3:g} mm"), (0, hx, f"the {what}'s side x = {hx * 1e3:g} mm"),
               (1, -hy, f"the {what}'s side y = {-hy * 1e3:g} mm"), (1, hy, f"the {what}'s side y = {hy * 1e3:g} mm")]
        if bottom < 0:
            out.append((2, bottom, f"the {what}'s bottom z = {bottom * 1e3:g} mm"))
        return out
    return []


def truncation_warnings(sar_rows: Iterable[Mapping], phantom: Mapping,
                        grid_bounds_m: Sequence[Sequence[float]] | None, tol_m: float = 1e-6) -> list[dict]:
    """``sar_cube_truncated`` warnings for the peak cubes that touch a cut face or the grid's edge.

    Parameters
    ----------
    sar_rows : iterable of mapping
        ``mass_kg``, ``cube_centre_m`` (centre of the averaging cube of the reported peak) and
        ``cube_side_m``, as in ``metrics.json["sar"]``; rows without them are skipped.
    phantom : mapping
        SI phantom spec dict.
    grid_bounds_m : ((x0, x1), (y0, y1), (z0, z1)) or None
        Outer edges of the SAR grid.
    tol_m : float
        A cube face within this distance of a cut face touches it.
    """
    faces = cut_faces(phantom)
    out = []
    for row in sar_rows:
        side = row.get("cube_side_m")
        centre = row.get("cube_centre_m")
        if side is None or not centre or not all(isinstance(v, (int, float)) and math.isfinite(v)
                                                 for v in [side, *centre]):
            continue
        reach = 0.5 * float(side)
        hits = [name for a, c, name in faces if abs(float(centre[a]) - c) <= reach + tol_m]
        if grid_bounds_m is not None:
            for a in range(3):
                lo, hi = (float(v) for v in grid_bounds_m[a])
                if float(centre[a]) - reach <= lo + tol_m or float(centre[a]) + reach >= hi - tol_m:
                    hits.append(f"the edge of the SAR grid along {_AXES[a]}")
        if hits:
            m_g = float(row["mass_kg"]) * 1e3
            where = ", ".join(f"{v * 1e3:.1f}" for v in centre)
            out.append({"code": "sar_cube_truncated", "mass_g": m_g,
                        "message": f"peak {m_g:g} g cube ({side * 1e3:.1f} mm side, centre [{where}] mm) touches "
                                   f"{' and '.join(dict.fromkeys(hits))}: the peak is a truncation artefact, "
                                   "enlarge the phantom or move the antenna away from that face"})
    return out


def accepted_fraction(s11: complex) -> float:
    """Accepted over incident power at port 1, ``1 - |S11|^2`` (Pozar, Microwave Engineering, eq. 2.38)."""
    return 1.0 - abs(complex(s11)) ** 2


def normalisation_warning(s11: complex | None) -> list[dict]:
    """``accepted_power_low`` when ``1 - |S11|^2`` is below :data:`MIN_ACCEPTED_FRACTION`."""
    if s11 is None or not math.isfinite(abs(complex(s11))):
        return []
    frac = accepted_fraction(s11)
    if frac >= MIN_ACCEPTED_FRACTION:
        return []
    s11_dB = 20 * math.log10(max(abs(complex(s11)), 1e-300))
    return [{"code": "accepted_power_low", "accepted_fraction": frac,
             "message": f"only {frac * 100:.2g} % of the incident power is accepted at port 1 (S11 = {s11_dB:.3g} dB, "
                        f"below {MIN_ACCEPTED_FRACTION * 100:g} %): the per-watt SAR and allowed input power are "
                        "ill-conditioned, match the external antenna or use the matched link figures "
                        "(implant_power_tx_matched_dBm, implant_power_both_matched_dBm with excite: [1, 2])"}]


def energy_balance(absorbed_per_W: float | None, s11: complex | None, s21: complex | None) -> float | None:
    """``(absorbed + delivered) / accepted`` at port 1 (radiated power not included).

    ``delivered / accepted = |S21|^2 / (1 - |S11|^2)`` is the power into the implant port's matched
    load per watt accepted (Pozar, Microwave Engineering, §11.1 power-wave definitions); without an
    implant port it is 0.
    """
    if absorbed_per_W is None or s11 is None or not math.isfinite(float(absorbed_per_W)):
        return None
    frac = accepted_fraction(s11)
    if not frac > 0:
        return None
    delivered = abs(complex(s21)) ** 2 / frac if s21 is not None and math.isfinite(abs(complex(s21))) else 0.0
    return float(absorbed_per_W) + delivered


def balance_warning(balance: float | None) -> list[dict]:
    """``energy_balance`` when the balance lies outside ``[0, 1 + ENERGY_BALANCE_EXCESS]``."""
    if balance is None:
        return []
    if 0.0 <= balance <= 1.0 + ENERGY_BALANCE_EXCESS:
        return []
    return [{"code": "energy_balance", "balance": balance,
             "message": f"(absorbed + delivered) / accepted power = {balance:.4g}, outside [0, "
                        f"{1 + ENERGY_BALANCE_EXCESS:g}] (radiation cannot be negative): the accepted power or the "
                        "fields are wrong by at least that much"}]


def decay_warning(decay_reached: bool | None) -> list[dict]:
    """``end_criterion`` when an excitation did not reach its energy-decay end criterion."""
    if decay_reached is False:
        return [{"code": "end_criterion", "message": "the energy-decay end criterion was not reached: "
                 "S-parameters and fields are truncated in time, raise solver.max_timesteps"}]
    return []


def pulse_tail_warning(tail_dB: float | None, end_criterion_dB: float | None = None) -> list[dict]:
    """``pulse_tail`` when an excitation was stopped with ``tail_dB`` of the pulse's energy still to come."""
    if tail_dB is None:
        return []
    crit = "" if end_criterion_dB is None else f" (end criterion {float(end_criterion_dB):g} dB)"
    return [{"code": "pulse_tail", "message": f"the engine's energy criterion stopped an excitation with "
             f"{float(tail_dB):.1f} dB of the excitation pulse's energy still to come{crit}: S-parameters and "
             "fields miss that share of the pulse, lower solver.end_criterion_dB"}]


_ROLES = (("external", "external antenna (port 1)"), ("implant", "implant antenna (port 2)"))


def thin_wire_warnings(scene: Mapping) -> list[dict]:
    """``thin_wire`` for each dipole antenna of wire without a radius (see the module's codes)."""
    out = []
    for role, name in _ROLES:
        el = scene.get(role) or {}
        if el.get("type") != "dipole":
            continue
        if float(el.get("wire_radius_m") or 0.0) > 0.0 or float(el.get("strip_width_m") or 0.0) > 0.0:
            continue
        out.append({"code": "thin_wire", "part": role,
                    "message": f"the {name} is a wire without radius (scene.{role}.wire_radius_mm 0): its "
                               "S-parameters follow the mesh cell beside the wire and have no mesh-independent "
                               f"value; give scene.{role}.wire_radius_mm or strip_width_mm"})
    return out


def _pair(v) -> complex | None:
    if isinstance(v, (list, tuple)) and len(v) == 2 and all(isinstance(x, (int, float)) for x in v):
        return complex(float(v[0]), float(v[1]))
    return None


def case_warnings(metrics: Mapping, scene: Mapping, grid_bounds_m=None) -> list[dict]:
    """Every warning of one finished case from its metrics (``metrics.json`` content) and SI scene."""
    s11, s21 = _pair(metrics.get("S11")), _pair(metrics.get("S21"))
    out = truncation_warnings(metrics.get("sar") or [], scene.get("phantom") or {}, grid_bounds_m)
    out += normalisation_warning(s11)
    out += balance_warning(energy_balance(metrics.get("absorbed_fraction_all"), s11, s21))
    out += decay_warning(metrics.get("decay_reached"))
    out += pulse_tail_warning(metrics.get("pulse_tail_dB"))
    out += thin_wire_warnings(scene)
    return out


def warning_lines(warnings: Iterable[Mapping]) -> list[str]:
    """The warnings as ``metrics.json["warnings"]`` holds them: one plain string ``"<code>: <message>"`` each."""
    return [f"{w.get('code', 'warning')}: {w.get('message', '')}" for w in warnings or [] if w]
