"""Warnings for finished cases whose numbers may be wrong although the run itself succeeded.

A case keeps ``status: ok``; each suspicion becomes one entry ``{"code": ..., "message": ...}`` of
``metrics.json["warnings"]`` and one clause of the ``warnings`` column of the summary table.

Codes
-----
``sar_cube_truncated``
    The peak averaging cube of some mass touches a cut face of the phantom (a face that is not body
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


def cube_reach_m(side_m: float, face_cube: bool) -> float:
    """How far from the peak voxel's centre its averaging cube may extend, per axis.

    A centred cube (valid or enclosed voxel) reaches ``side / 2``; a face cube (the voxel lies on one
    face of its cube, IEC/IEEE 62704-1 step for surface voxels) may reach a whole ``side`` on the far side,
    so that side is used (conservative: the face cube's direction is not recorded).
    """
    return float(side_m) if face_cube else 0.5 * float(side_m)


def truncation_warnings(sar_rows: Iterable[Mapping], phantom: Mapping,
                        grid_bounds_m: Sequence[Sequence[float]] | None, tol_m: float = 1e-6) -> list[dict]:
    """``sar_cube_truncated`` warnings for the peak cubes that touch a cut face or the grid's edge.

    Parameters
    ----------
    sar_rows : iterable of mapping
        ``mass_kg``, ``location_m`` (peak voxel centre), ``cube_side_m``, ``face_cube`` (bool), as in
        ``metrics.json["sar"]``; rows without a side are skipped.
    phantom : mapping
        SI phantom spec dict.
    grid_bounds_m : ((x0, x1), (y0, y1), (z0, z1)) or None
        Outer edges of the SAR grid.
    tol_m : float
        A cube within this distance of a face touches it.
    """
    faces = cut_faces(phantom)
    out = []
    for row in sar_rows:
        side = row.get("cube_side_m")
        loc = row.get("location_m")
        if side is None or not loc or not all(isinstance(v, (int, float)) and math.isfinite(v) for v in [side, *loc]):
            continue
        reach = cube_reach_m(side, bool(row.get("face_cube")))
        hits = [name for a, c, name in faces if abs(float(loc[a]) - c) <= reach + tol_m]
        if grid_bounds_m is not None:
            for a in range(3):
                lo, hi = (float(v) for v in grid_bounds_m[a])
                if float(loc[a]) - reach <= lo + tol_m or float(loc[a]) + reach >= hi - tol_m:
                    hits.append(f"the edge of the SAR grid along {_AXES[a]}")
        if hits:
            m_g = float(row["mass_kg"]) * 1e3
            where = ", ".join(f"{v * 1e3:.1f}" for v in loc)
            out.append({"code": "sar_cube_truncated", "mass_g": m_g,
                        "message": f"peak {m_g:g} g cube ({side * 1e3:.1f} mm side, voxel at [{where}] mm) touches "
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
                        "ill-conditioned, match the external antenna or compare with matched_link_efficiency_dB "
                        "(excite: [1, 2])"}]


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
    return out


def warnings_text(warnings: Iterable[Mapping]) -> str:
    """The summary table's ``warnings`` cell: the messages joined by ``"; "`` (empty when none)."""
    return "; ".join(str(w.get("message", "")) for w in warnings or [] if w)
