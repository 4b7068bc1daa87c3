"""Passive concentrators: metal rods, rod pairs, crossed pairs, parallel arrays and rings in tissue.

Every concentrator is placed relative to a named anchor of the scene -- ``"implant"`` (the implant
antenna's centre), ``"surface"`` (the body-surface origin, (0, 0, 0)) or ``"external_feed"`` (the
centre of port 1) -- plus an offset. Anchored to ``"implant"``, it moves with the implant when a study
sweeps the implant depth.

Rods lie in a plane parallel to the body surface, at ``azimuth_deg`` from the x axis (counter-clockwise
seen from +z). A rod's cross-section is round (``radius_m`` > 0, any direction), square (``side_m`` > 0,
only along x or y) or a thin wire on the mesh (both 0). The round rods of a pair (and of crossed pairs) may
be insulated, as rods in tissue would be: a dielectric sleeve of ``thickness_m`` around each rod, its ends
included (:class:`Insulation`).
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping

import numpy as np

from .cad import CadConcentrator
from .primitives import AXES, PRIORITY_CONDUCTOR, PRIORITY_ENCAPSULATION, Box, Cylinder, Polygon, Primitive, Vec3, Wire
from .shapes import plane2xyz, xyz2polygon_points
from .specs import choice, construct, number, positive, vector
from .tissues import Dielectric

ANCHORS = ("implant", "surface", "external_feed")


def _anchor_point(anchors: Mapping[str, Vec3], name: str, part: str) -> np.ndarray:
    try:
        return np.asarray(anchors[name], dtype=float)
    except KeyError:
        raise ValueError(f"{part}: anchor {name!r} is not available in this scene; available: {sorted(anchors)}") \
            from None


def rod_primitive(name: str, conductor: str, start, stop, radius_m: float, side_m: float) -> Primitive:
    """One straight rod from ``start`` to ``stop`` (3-D, metres)."""
    s, e = np.asarray(start, dtype=float), np.asarray(stop, dtype=float)
    if np.allclose(s, e, rtol=0, atol=1e-15):
        raise ValueError(f"concentrator {name!r}: start and stop coincide; a rod needs a length > 0")
    if radius_m > 0:
        return Cylinder(name, conductor, tuple(s.tolist()), tuple(e.tolist()), radius_m, priority=PRIORITY_CONDUCTOR)
    if side_m > 0:
        d = e - s
        along = np.flatnonzero(np.abs(d) > 1e-12 * np.linalg.norm(d))
        if len(along) != 1:
            raise ValueError(f"concentrator {name!r}: a square rod must run along x, y or z; "
                             f"direction {tuple(np.round(d, 12))} is oblique (use radius_m)")
        h = np.full(3, side_m / 2)
        h[along[0]] = 0.0
        return Box(name, conductor, tuple((np.minimum(s, e) - h).tolist()), tuple((np.maximum(s, e) + h).tolist()),
                   priority=PRIORITY_CONDUCTOR)
    return Wire(name, conductor, (tuple(s.tolist()), tuple(e.tolist())))


class _Section:
    """Shared checks for a rod cross-section."""

    def _check_section(self, part: str):
        object.__setattr__(self, "radius_m", positive(part, "radius_m", self.radius_m, True))
        object.__setattr__(self, "side_m", positive(part, "side_m", self.side_m, True))
        if self.radius_m > 0 and self.side_m > 0:
            raise ValueError(f"{part}: give radius_m or side_m, not both (got {self.radius_m} m and {self.side_m} m)")
        choice(part, "anchor", self.anchor, ANCHORS)

    @property
    def half_thickness_m(self) -> float:
        """Largest distance from a rod's centre line to its surface."""
        return self.radius_m if self.radius_m > 0 else self.side_m / math.sqrt(2)

    def _base_dict(self) -> dict:
        return {"type": self.type, "anchor": self.anchor, "radius_m": self.radius_m, "side_m": self.side_m,
                "conductor": self.conductor}


def _direction(azimuth_deg: float) -> np.ndarray:
    a = math.radians(azimuth_deg)
    d = np.array([math.cos(a), math.sin(a), 0.0])
    d[np.abs(d) < 1e-15] = 0.0  # exact axis directions for 0, 90, 180, 270 degrees
    return d


@dataclass(frozen=True)
class Insulation:
    """A dielectric sleeve around each round rod: ``thickness_m`` of ``eps_r`` (loss ``loss_tangent``) over the
    rod's surface and beyond both of its ends. Carries no SAR (a plastic, not tissue)."""

    thickness_m: float
    eps_r: float
    loss_tangent: float = 0.0

    def __post_init__(self):
        part = "rod insulation"
        object.__setattr__(self, "thickness_m", positive(part, "thickness_m", self.thickness_m))
        object.__setattr__(self, "loss_tangent", positive(part, "loss_tangent", self.loss_tangent, True))
        if not number(part, "eps_r", self.eps_r) >= 1.0:
            raise ValueError(f"{part}: eps_r must be >= 1, got {self.eps_r}")
        object.__setattr__(self, "eps_r", float(self.eps_r))

    def material(self, name: str) -> Dielectric:
        return Dielectric(f"{name}_insulation", self.eps_r, loss_tangent=self.loss_tangent)

    def to_dict(self) -> dict:
        return {"thickness_m": self.thickness_m, "eps_r": self.eps_r, "loss_tangent": self.loss_tangent}


def _pair(name, conductor, centre, direction, rod_length, gap, radius, side, ins: Insulation | None = None,
          material_name: str | None = None) -> list[Primitive]:
    """Two collinear rods of ``rod_length`` each, separated by ``gap`` centred on ``centre``; with ``ins``,
    each in its sleeve (material named after ``material_name``)."""
    g, L = gap / 2, gap / 2 + rod_length
    ends = [(centre - L * direction, centre - g * direction), (centre + g * direction, centre + L * direction)]
    out: list[Primitive] = [rod_primitive(f"{name}_{k}", conductor, a, b, radius, side) for k, (a, b) in zip("ab", ends)]
    if ins is not None:
        mat = ins.material(material_name or name).name
        out += [Cylinder(f"{name}_{k}_insulation", mat, tuple((a - ins.thickness_m * direction).tolist()),
                         tuple((b + ins.thickness_m * direction).tolist()), radius + ins.thickness_m,
                         priority=PRIORITY_ENCAPSULATION) for k, (a, b) in zip("ab", ends)]
    return out


@dataclass(frozen=True)
class Rod(_Section):
    """A single straight rod from ``start_m`` to ``stop_m``, both relative to the anchor."""

    start_m: tuple[float, float, float]
    stop_m: tuple[float, float, float]
    anchor: str = "implant"
    radius_m: float = 0.0
    side_m: float = 0.0
    conductor: str = "pec"

    type = "rod"

    def __post_init__(self):
        self._check_section("rod")
        object.__setattr__(self, "start_m", vector("rod", "start_m", self.start_m, 3))
        object.__setattr__(self, "stop_m", vector("rod", "stop_m", self.stop_m, 3))
        if self.start_m == self.stop_m:
            raise ValueError(f"rod: start_m and stop_m coincide ({self.start_m}); a rod needs a length > 0")

    def build(self, anchors, name: str) -> list[Primitive]:
        a = _anchor_point(anchors, self.anchor, name)
        return [rod_primitive(name, self.conductor, a + self.start_m, a + self.stop_m, self.radius_m, self.side_m)]

    def to_dict(self) -> dict:
        return {**self._base_dict(), "start_m": list(self.start_m), "stop_m": list(self.stop_m)}


@dataclass(frozen=True)
class RodPair(_Section):
    """Two collinear rods of ``rod_length_m`` each with a ``gap_m`` between them, centred on anchor + offset."""

    rod_length_m: float
    gap_m: float
    anchor: str = "implant"
    offset_m: tuple[float, float, float] = (0.0, 0.0, 0.0)
    azimuth_deg: float = 0.0
    radius_m: float = 0.0
    side_m: float = 0.0
    conductor: str = "pec"
    insulation: Insulation | None = None

    type = "rod_pair"

    def __post_init__(self):
        part = self.type.replace("_", " ")
        self._check_section(part)
        object.__setattr__(self, "rod_length_m", positive(part, "rod_length_m", self.rod_length_m))
        object.__setattr__(self, "gap_m", positive(part, "gap_m", self.gap_m))
        object.__setattr__(self, "offset_m", vector(part, "offset_m", self.offset_m, 3))
        object.__setattr__(self, "azimuth_deg", number(part, "azimuth_deg", self.azimuth_deg))
        ins = self.insulation
        if isinstance(ins, Mapping):
            ins = construct(Insulation, ins, "rod insulation")
            object.__setattr__(self, "insulation", ins)
        if ins is not None:
            if not self.radius_m > 0:
                raise ValueError(f"{part}: insulation needs round rods (radius_m > 0), got radius_m = {self.radius_m}")
            if not self.gap_m > 2 * ins.thickness_m:
                raise ValueError(f"{part}: gap_m ({self.gap_m:.4g} m) must exceed twice the insulation thickness "
                                 f"({2 * ins.thickness_m:.4g} m) so that the two sleeves stay apart")

    def centre(self, anchors, name: str) -> np.ndarray:
        return _anchor_point(anchors, self.anchor, name) + np.asarray(self.offset_m)

    def materials(self, name: str) -> tuple[Dielectric, ...]:
        """Materials the concentrator brings (its insulation), named after ``name`` as in :meth:`build`."""
        return () if self.insulation is None else (self.insulation.material(name),)

    def build(self, anchors, name: str) -> list[Primitive]:
        return _pair(name, self.conductor, self.centre(anchors, name), _direction(self.azimuth_deg),
                     self.rod_length_m, self.gap_m, self.radius_m, self.side_m, self.insulation, name)

    def to_dict(self) -> dict:
        d = {**self._base_dict(), "rod_length_m": self.rod_length_m, "gap_m": self.gap_m,
             "offset_m": list(self.offset_m), "azimuth_deg": self.azimuth_deg}
        if self.insulation is not None:  # absent when not insulated: existing scenes keep their identity
            d["insulation"] = self.insulation.to_dict()
        return d


@dataclass(frozen=True)
class CrossedPairs(RodPair):
    """Two rod pairs sharing one centre, the second turned by ``angle_deg`` from the first."""

    angle_deg: float = 90.0

    type = "crossed_pairs"

    def __post_init__(self):
        super().__post_init__()
        object.__setattr__(self, "angle_deg", number("crossed pairs", "angle_deg", self.angle_deg))
        if math.isclose(math.sin(math.radians(self.angle_deg)), 0.0, abs_tol=1e-9):
            raise ValueError(f"crossed pairs: angle_deg must not be a multiple of 180 (the pairs would overlap), "
                             f"got {self.angle_deg}")

    def build(self, anchors, name: str) -> list[Primitive]:
        c = self.centre(anchors, name)
        args = (self.rod_length_m, self.gap_m, self.radius_m, self.side_m, self.insulation, name)
        return (_pair(f"{name}_p1", self.conductor, c, _direction(self.azimuth_deg), *args)
                + _pair(f"{name}_p2", self.conductor, c, _direction(self.azimuth_deg + self.angle_deg), *args))

    def to_dict(self) -> dict:
        return {**super().to_dict(), "angle_deg": self.angle_deg}


@dataclass(frozen=True)
class RodArray(_Section):
    """``count`` parallel rods (``gap_m`` 0) or gapped pairs (``gap_m`` > 0), ``spacing_m`` apart.

    The array is centred on anchor + offset; the elements are displaced perpendicular to their
    direction, within the plane parallel to the surface.
    """

    count: int
    spacing_m: float
    rod_length_m: float
    gap_m: float = 0.0
    anchor: str = "implant"
    offset_m: tuple[float, float, float] = (0.0, 0.0, 0.0)
    azimuth_deg: float = 0.0
    radius_m: float = 0.0
    side_m: float = 0.0
    conductor: str = "pec"

    type = "rod_array"

    def __post_init__(self):
        part = "rod array"
        self._check_section(part)
        if not isinstance(self.count, int) or isinstance(self.count, bool) or self.count < 1:
            raise ValueError(f"rod array: count must be an integer >= 1, got {self.count!r}")
        object.__setattr__(self, "spacing_m", positive(part, "spacing_m", self.spacing_m))
        object.__setattr__(self, "rod_length_m", positive(part, "rod_length_m", self.rod_length_m))
        object.__setattr__(self, "gap_m", positive(part, "gap_m", self.gap_m, True))
        object.__setattr__(self, "offset_m", vector(part, "offset_m", self.offset_m, 3))
        object.__setattr__(self, "azimuth_deg", number(part, "azimuth_deg", self.azimuth_deg))
        if self.spacing_m <= 2 * self.half_thickness_m:
            raise ValueError(f"rod array: spacing_m ({self.spacing_m} m) must exceed the rod thickness "
                             f"({2 * self.half_thickness_m:.4g} m) so that rods do not touch")

    def build(self, anchors, name: str) -> list[Primitive]:
        c0 = _anchor_point(anchors, self.anchor, name) + np.asarray(self.offset_m)
        d = _direction(self.azimuth_deg)
        across = _direction(self.azimuth_deg + 90.0)
        out: list[Primitive] = []
        for k in range(self.count):
            c = c0 + (k - (self.count - 1) / 2) * self.spacing_m * across
            if self.gap_m > 0:
                out += _pair(f"{name}_{k}", self.conductor, c, d, self.rod_length_m, self.gap_m,
                             self.radius_m, self.side_m)
            else:
                h = self.rod_length_m / 2
                out.append(rod_primitive(f"{name}_{k}", self.conductor, c - h * d, c + h * d,
                                         self.radius_m, self.side_m))
        return out

    def to_dict(self) -> dict:
        return {**self._base_dict(), "count": self.count, "spacing_m": self.spacing_m,
                "rod_length_m": self.rod_length_m, "gap_m": self.gap_m, "offset_m": list(self.offset_m),
                "azimuth_deg": self.azimuth_deg}


@dataclass(frozen=True)
class Ring:
    """A flat metal ring, closed (``split_gap_m`` 0) or split, centred on anchor + offset.

    Parameters
    ----------
    radius_m : float
        Centre-line radius.
    trace_width_m : float
    normal : {"x", "y", "z"}
        Normal of the ring's plane (plane axes as for loops, see ``shapes.PLANE_FRAMES``).
    split_gap_m : float
        Width of the cut (0 = closed ring).
    split_angle_deg : float
        Where the cut is, measured in the ring's plane from its u axis towards v.
    thickness_m : float
        0 for a zero-thickness sheet.
    segments : int
        Polygon segments around the ring.
    """

    radius_m: float
    trace_width_m: float
    anchor: str = "implant"
    offset_m: tuple[float, float, float] = (0.0, 0.0, 0.0)
    normal: str = "z"
    split_gap_m: float = 0.0
    split_angle_deg: float = -90.0
    thickness_m: float = 0.0
    segments: int = 48
    conductor: str = "pec"

    type = "ring"

    def __post_init__(self):
        part = "ring"
        choice(part, "anchor", self.anchor, ANCHORS)
        choice(part, "normal", self.normal, AXES)
        object.__setattr__(self, "radius_m", positive(part, "radius_m", self.radius_m))
        object.__setattr__(self, "trace_width_m", positive(part, "trace_width_m", self.trace_width_m))
        object.__setattr__(self, "split_gap_m", positive(part, "split_gap_m", self.split_gap_m, True))
        object.__setattr__(self, "thickness_m", positive(part, "thickness_m", self.thickness_m, True))
        object.__setattr__(self, "offset_m", vector(part, "offset_m", self.offset_m, 3))
        object.__setattr__(self, "split_angle_deg", number(part, "split_angle_deg", self.split_angle_deg))
        if not isinstance(self.segments, int) or self.segments < 8:
            raise ValueError(f"ring: segments must be an integer >= 8, got {self.segments!r}")
        ri = self.radius_m - self.trace_width_m / 2
        if ri <= 0:
            raise ValueError(f"ring: trace_width_m ({self.trace_width_m} m) must be less than twice the radius "
                             f"({2 * self.radius_m} m)")
        if self.split_gap_m >= 2 * ri:
            raise ValueError(f"ring: split_gap_m ({self.split_gap_m} m) must be smaller than the inner diameter "
                             f"({2 * ri:.4g} m)")

    @property
    def half_thickness_m(self) -> float:
        return 0.0

    def outline_uv(self) -> np.ndarray:
        """Polygon outline in the ring's plane coordinates, shape (n, 2) (a slit joins the edges of a closed ring)."""
        t0 = math.radians(self.split_angle_deg)
        ro, ri = self.radius_m + self.trace_width_m / 2, self.radius_m - self.trace_width_m / 2
        n = self.segments

        def arc(r):
            d = math.asin(self.split_gap_m / 2 / r) if self.split_gap_m > 0 else 0.0
            t = np.linspace(t0 + d, t0 + 2 * math.pi - d, n + 1)
            return np.stack([r * np.cos(t), r * np.sin(t)], 1)
        return np.concatenate([arc(ro), arc(ri)[::-1]])

    def build(self, anchors, name: str) -> list[Primitive]:
        c = _anchor_point(anchors, self.anchor, name) + np.asarray(self.offset_m)
        xyz = plane2xyz(self.outline_uv(), self.normal) + c
        from .primitives import axis_index
        elev = float(c[axis_index(self.normal)] - self.thickness_m / 2)
        return [Polygon(name, self.conductor, self.normal, elev, xyz2polygon_points(xyz, self.normal),
                        self.thickness_m, priority=PRIORITY_CONDUCTOR)]

    def to_dict(self) -> dict:
        return {"type": self.type, "anchor": self.anchor, "offset_m": list(self.offset_m), "radius_m": self.radius_m,
                "trace_width_m": self.trace_width_m, "normal": self.normal, "split_gap_m": self.split_gap_m,
                "split_angle_deg": self.split_angle_deg, "thickness_m": self.thickness_m,
                "segments": self.segments, "conductor": self.conductor}


Concentrator = Rod | RodPair | CrossedPairs | RodArray | Ring | CadConcentrator
CONCENTRATOR_TYPES: dict[str, type] = {c.type: c for c in (Rod, RodPair, CrossedPairs, RodArray, Ring, CadConcentrator)}


def concentrator_from_dict(d: Mapping) -> Concentrator:
    kind = d.get("type")
    if kind not in CONCENTRATOR_TYPES:
        raise ValueError(f"concentrator: type must be one of {sorted(CONCENTRATOR_TYPES)}, got {kind!r}")
    return construct(CONCENTRATOR_TYPES[kind], d, f"concentrator {kind}")
