"""Checks of how the parts of a scene sit relative to each other (beyond each part's own checks).

Errors (the arrangement cannot be what the user meant; :meth:`Scene.check` raises them):

- a concentrator that touches or crosses a conductor of the external or the implant antenna (it would
  short the antenna's feed or become part of the antenna); a cad concentrator (metal or dielectric) by
  points every 0.05 mm on its faces and by the conductor's outline points lying inside it;
- an implant whose capsule (or antenna, without capsule) reaches into the core of a limb (bone).

Warnings (the arrangement may be deliberate; ``bodysweep check`` prints them):

- the external antenna's conductors overhang the phantom's cut end or side (the field there sees a
  tissue edge that the real body does not have);
- the capsule (or implant antenna) straddles an interface between two tissue layers (which ones).

Pure geometry over the built primitives; no solver import.
"""
from __future__ import annotations

import numpy as np

from .anatomy import LabelVolume
from .phantoms import LayeredCylinder, LayeredSlab, LiquidBox
from .meshgeom import encloses, mesh_distance, outline_points, surface_points
from .primitives import Box, Cylinder, Polygon, Polyhedron, Wire, axis_index
from .shapes import distance_to_box, sample_points

#: closer than this (m), a concentrator counts as touching an antenna conductor (sampling step 0.1 mm / 2)
TOUCH_M = 0.05e-3
_STEP = 0.1e-3
_AX = "xyz"


def _segment_distance(p: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Distance from points ``p`` (n, 3) to the segment a-b."""
    d = b - a
    L2 = float(d @ d)
    t = np.zeros(len(p)) if L2 == 0 else np.clip((p - a) @ d / L2, 0.0, 1.0)
    return np.linalg.norm(p - (a + t[:, None] * d), axis=1)


def _inside_polygon(u: np.ndarray, v: np.ndarray, poly: np.ndarray) -> np.ndarray:
    """Even-odd rule (ray casting along +u) for points (u, v) and a closed polygon (m, 2)."""
    inside = np.zeros(len(u), dtype=bool)
    for (u1, v1), (u2, v2) in zip(poly, np.roll(poly, -1, axis=0)):
        crosses = (v1 > v) != (v2 > v)
        with np.errstate(divide="ignore", invalid="ignore"):
            uc = u1 + (v - v1) * (u2 - u1) / (v2 - v1)
        inside ^= crosses & (u < uc)
    return inside


def distance_to_primitive(points, prim) -> np.ndarray:
    """Euclidean distance from points (n, 3) to a primitive (0 inside), shape (n,).

    Exact for boxes, cylinders and polygons (sheets or extruded); a wire counts as the set of points within
    its radius of its polyline.
    """
    p = np.atleast_2d(np.asarray(points, dtype=float))
    if isinstance(prim, Box):
        lo, hi = prim.bounds()
        return distance_to_box(p, lo, hi)
    if isinstance(prim, Cylinder):  # solid cylinder with flat ends: axial and radial excess
        a, b = np.asarray(prim.start, float), np.asarray(prim.stop, float)
        L = float(np.linalg.norm(b - a))
        t = (p - a) @ ((b - a) / L)
        r = np.linalg.norm(p - a - t[:, None] * ((b - a) / L), axis=1)
        return np.hypot(np.maximum(np.maximum(-t, t - L), 0.0), np.maximum(r - prim.radius, 0.0))
    if isinstance(prim, Wire):
        pts = np.asarray(prim.points, dtype=float)
        d = np.min([_segment_distance(p, a, b) for a, b in zip(pts[:-1], pts[1:])], axis=0)
        return np.maximum(d - prim.radius, 0.0)
    if isinstance(prim, Polyhedron):  # a cad conductor: distance to its faces, 0 inside
        v, f = np.asarray(prim.vertices, dtype=float), np.asarray(prim.faces)
        return np.where(encloses(v, f, p), 0.0, mesh_distance(p, v, f))
    if isinstance(prim, Polygon):
        n = axis_index(prim.normal)
        a, b = prim.plane_axes()
        poly = np.asarray(prim.points, dtype=float)
        lo, hi = prim.elevation, prim.elevation + prim.thickness
        dn = np.maximum(np.maximum(lo - p[:, n], p[:, n] - hi), 0.0)
        inside = _inside_polygon(p[:, a], p[:, b], poly)
        edge = np.full(len(p), np.inf)
        q = np.zeros((len(p), 2))
        q[:, 0], q[:, 1] = p[:, a], p[:, b]
        for s, e in zip(poly, np.roll(poly, -1, axis=0)):
            edge = np.minimum(edge, _segment_distance(np.c_[q, np.zeros(len(p))], np.r_[s, 0.0], np.r_[e, 0.0]))
        return np.where(inside, dn, np.hypot(edge, dn))
    raise TypeError(type(prim).__name__)


def _conductors(placed, skip: tuple[str, ...]) -> list:
    return [p for p in placed.primitives if not p.material.startswith(skip)]  # a cad shell's cavity air too


def _gap(pts: np.ndarray, cond, prim) -> float:
    """Smallest distance from a concentrator's sample points to an antenna conductor (points near it only);
    0 when a point of the conductor lies inside a cad concentrator."""
    if not isinstance(prim, Polyhedron):
        return float(np.min(distance_to_primitive(pts, cond)))
    v, f = np.asarray(prim.vertices, dtype=float), np.asarray(prim.faces)
    if encloses(v, f, outline_points([cond])).any():
        return 0.0
    lo, hi = (np.asarray(b, dtype=float) for b in cond.bounds())
    near = pts[np.all((pts >= lo - 2 * TOUCH_M) & (pts <= hi + 2 * TOUCH_M), axis=1)]
    if not len(near):  # every face point is farther than 2 TOUCH_M from the conductor's bounding box
        return float(distance_to_box(pts, lo, hi).min())
    return float(np.min(distance_to_primitive(near, cond)))


def concentrator_contact_errors(scene, anchors) -> list[str]:
    """One message per concentrator that touches or crosses a conductor of either antenna."""
    from .antennas import CAPSULE_MATERIAL, CASING_MATERIAL

    antennas = [("external antenna", _conductors(scene.external.build(), (CASING_MATERIAL,)))]
    if scene.implant is not None:
        antennas.append(("implant antenna", _conductors(scene.implant.build(), (CAPSULE_MATERIAL,))))
    out = []
    for i, c in enumerate(scene.concentrators):
        name = f"concentrator {i} ({c.type})"
        for prim in c.build(anchors, name):
            pts, r = sample_points(prim, _STEP)
            if isinstance(prim, Polyhedron):  # a cad part: points on its faces; conductor points inside it
                pts, r = surface_points(prim.vertices, prim.faces, TOUCH_M), 0.0
            for who, conds in antennas:
                d = min(_gap(pts, q, prim) for q in conds) - r
                if d < TOUCH_M:
                    how = "crosses" if d <= 0 else f"touches ({d * 1e3:.2g} mm from)"
                    out.append(f"{name} {how} the {who}'s conductor: it would short or extend the antenna; move "
                               f"it at least {TOUCH_M * 1e3:g} mm away")
                    break
            else:
                continue
            break
    return out


def _surface_points(prim) -> np.ndarray:
    """Points on and inside a capsule or antenna primitive, dense enough (0.25 mm) for layer tests."""
    if isinstance(prim, Cylinder):
        s, e = np.asarray(prim.start), np.asarray(prim.stop)
        ax = e - s
        L = float(np.linalg.norm(ax))
        ax = ax / L
        u = np.cross(ax, [1.0, 0, 0] if abs(ax[0]) < 0.9 else [0, 1.0, 0])
        u /= np.linalg.norm(u)
        v = np.cross(ax, u)
        t = np.linspace(0, 2 * np.pi, 48, endpoint=False)
        ring = prim.radius * (np.cos(t)[:, None] * u + np.sin(t)[:, None] * v)
        out = [s + k * ax + ring for k in np.linspace(0.0, L, max(2, int(L / 0.25e-3) + 1))]
        return np.concatenate(out + [np.array([s, e])])
    pts, r = sample_points(prim, 0.25e-3)
    return pts


def layer_of(phantom, points) -> np.ndarray:
    """Index of the tissue layer holding each point (0 = outermost; the core of a limb = n_layers; for a label
    volume the tissue's place in its table), -1 outside or for phantoms without layers."""
    p = np.atleast_2d(np.asarray(points, dtype=float))
    out = np.full(len(p), -1, dtype=int)
    inside = phantom.contains(p) if hasattr(phantom, "contains") else np.zeros(len(p), bool)
    if isinstance(phantom, LayeredSlab):
        depth = -p[:, 2]
        bounds = np.cumsum([l.thickness_m for l in phantom.layers])
        out = np.where(inside, np.minimum(np.searchsorted(bounds, depth, side="left"), len(bounds) - 1), -1)
    elif isinstance(phantom, LayeredCylinder):
        a = axis_index(phantom.axis)
        rho = np.hypot(p[:, 1 - a], p[:, 2] + phantom.outer_radius_m)
        radii = phantom.radii()  # outer radius of each layer, then the core radius (decreasing)
        idx = np.sum(rho[:, None] < radii[None, 1:], axis=1)  # layers passed inward; n_layers = inside the core
        out = np.where(inside, idx, -1)
    elif isinstance(phantom, LabelVolume):
        out = phantom.tissue_index(p)
    return out


def _layer_names(phantom) -> list[str]:
    if isinstance(phantom, LayeredCylinder):
        return [f"{l.tissue} (layer {i})" for i, l in enumerate(phantom.layers)] + [f"{phantom.core_tissue} (core)"]
    if isinstance(phantom, LayeredSlab):
        return [f"{l.tissue} (layer {i})" for i, l in enumerate(phantom.layers)]
    if isinstance(phantom, LabelVolume):
        return phantom.tissue_names()
    return []


def _implant_points(scene):
    imp = scene.implant.build()
    keep = [p for p in imp.primitives if p.name == "implant_capsule"] or list(imp.primitives)
    what = "capsule" if scene.implant.capsule is not None else "antenna"
    return np.concatenate([_surface_points(p) for p in keep]), what


def implant_core_errors(scene) -> list[str]:
    """The implant's capsule (or antenna) reaching into a limb's core (bone)."""
    ph = scene.phantom
    if scene.implant is None or not isinstance(ph, LayeredCylinder):
        return []
    pts, what = _implant_points(scene)
    a = axis_index(ph.axis)
    rho = np.hypot(pts[:, 1 - a], pts[:, 2] + ph.outer_radius_m)
    into = ph.core_radius_m - float(np.min(rho))
    if into <= 1e-9:
        return []
    return [f"implant {what} reaches {into * 1e3:.3g} mm into the limb's core ({ph.core_tissue}, radius "
            f"{ph.core_radius_m * 1e3:g} mm) at depth_mm = {scene.implant.depth_m * 1e3:g}: place it in the soft tissue "
            f"(its deepest point must stay above {(ph.outer_radius_m - ph.core_radius_m) * 1e3:g} mm depth)"]


def implant_interface_warnings(scene) -> list[str]:
    """The implant's capsule (or antenna) straddling an interface between two tissue layers."""
    ph = scene.phantom
    names = _layer_names(ph)
    if scene.implant is None or not names:
        return []
    pts, what = _implant_points(scene)
    idx = np.unique(layer_of(ph, pts))
    idx = idx[idx >= 0]
    if len(idx) < 2:
        return []
    parts = [names[i] for i in idx]
    return [f"implant {what} straddles a tissue interface: it lies partly in {', '.join(parts[:-1])} and partly in "
            f"{parts[-1]} (deliberate? otherwise change depth_mm)"]


def overhang_warnings(scene) -> list[str]:
    """The external antenna's conductors reaching beyond the phantom's cut end (limb) or side (slab, box)."""
    from .antennas import CASING_MATERIAL

    ph = scene.phantom
    conds = _conductors(scene.external.build(), (CASING_MATERIAL,))
    if not conds:
        return []
    lo = np.min([c.bounds()[0] for c in conds], axis=0)
    hi = np.max([c.bounds()[1] for c in conds], axis=0)
    if isinstance(ph, LayeredCylinder):
        limits = {axis_index(ph.axis): ph.length_m / 2}
        what = "limb's end"
    elif isinstance(ph, (LayeredSlab, LiquidBox)):
        limits = {0: ph.size_x_m / 2, 1: ph.size_y_m / 2}
        what = "slab's side" if isinstance(ph, LayeredSlab) else "liquid box's side"
    else:
        return []
    out = []
    for a, h in limits.items():
        for sign, edge in ((-1, lo[a]), (1, hi[a])):
            over = sign * edge - h
            if over > 1e-9:
                out.append(f"external antenna overhangs the {what} {_AX[a]} = {sign * h * 1e3:g} mm by "
                           f"{over * 1e3:.3g} mm: the field there sees a tissue edge the body does not have "
                           "(deliberate? otherwise lengthen the phantom or move the antenna)")
    return out


def thin_wire_warnings(scene) -> list[str]:
    """Dipole antennas of wire without radius: their impedance follows the mesh cell beside the wire."""
    from .antennas import Dipole

    out = []
    for role, part in (("external", scene.external), ("implant", scene.implant)):
        el = getattr(part, "element", None)
        if isinstance(el, Dipole) and el.wire_radius_m == 0 and el.strip_width_m == 0:
            out.append(f"the {role} dipole is a wire without radius (scene.{role}.wire_radius_mm 0): its "
                       "S-parameters will follow the mesh cell beside it; give it wire_radius_mm or strip_width_mm")
    return out


def arrangement_errors(scene, anchors) -> list[str]:
    """Every error of :mod:`this module <bodysweep.geometry.arrangement>` for a scene."""
    return concentrator_contact_errors(scene, anchors) + implant_core_errors(scene)


def arrangement_warnings(scene) -> list[str]:
    """Every warning of :mod:`this module <bodysweep.geometry.arrangement>` for a scene."""
    return overhang_warnings(scene) + implant_interface_warnings(scene) + thin_wire_warnings(scene)
