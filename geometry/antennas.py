"""Antennas: straight centre-fed dipoles and planar loops (single turn or spiral), external or implanted.

An *element* (:class:`Dipole`, :class:`Loop`) is built around its own centre; a *placement*
(:class:`ExternalAntenna`, :class:`ImplantAntenna`) puts it above the body (standoff, optional
casing) or inside it (depth, optional capsule) and carries its lumped :class:`Port`.
Port 1 is the external antenna, port 2 the implant. Feed gaps are axis-aligned.

Loop frame: a loop with normal ``n`` lies in the plane of ``(u, v) = PLANE_FRAMES[n]``
(normal z: (x, y); normal x: (y, z); normal y: (x, z)); its feed gap sits at the ``v``-minimum
side and runs along ``u``, so a loop standing on the body (normal x or y) is fed at its bottom.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping

import numpy as np

from .model import ElementBuild, MeshHint
from .primitives import (PRIORITY_CONDUCTOR, PRIORITY_ENCAPSULATION, AXES, Box, Cylinder, Polygon, Port,
                         Primitive, Vec3, Wire, axis_index)
from .shapes import PLANE_FRAMES, plane2xyz, strip_outline, translate, xyz2polygon_points
from .specs import choice, construct, number, positive, vector
from .tissues import Dielectric


def _hint_lines(axis: str, values, reason: str) -> list[MeshHint]:
    return [MeshHint(axis, float(v), float(v), 0.0, reason) for v in values]


@dataclass(frozen=True)
class Dipole:
    """Centre-fed straight dipole.

    Parameters
    ----------
    length_m : float
        Tip-to-tip length including the feed gap.
    feed_gap_m : float
        Gap between the two arms, where the port sits.
    axis : {"x", "y", "z"}
        Direction of the dipole (external antennas: x or y only).
    wire_radius_m : float
        0 (default) for a thin wire on the mesh; > 0 for a solid round conductor.
    strip_width_m : float
        > 0 for a flat strip (zero-thickness sheet) instead of a wire; excludes ``wire_radius_m``.
    conductor : str
        Material name of the metal (``"pec"`` or a declared conductor).
    """

    length_m: float
    feed_gap_m: float
    axis: str = "x"
    wire_radius_m: float = 0.0
    strip_width_m: float = 0.0
    conductor: str = "pec"

    type = "dipole"

    def __post_init__(self):
        part = "dipole"
        object.__setattr__(self, "length_m", positive(part, "length_m", self.length_m))
        object.__setattr__(self, "feed_gap_m", positive(part, "feed_gap_m", self.feed_gap_m))
        object.__setattr__(self, "wire_radius_m", positive(part, "wire_radius_m", self.wire_radius_m, True))
        object.__setattr__(self, "strip_width_m", positive(part, "strip_width_m", self.strip_width_m, True))
        choice(part, "axis", self.axis, AXES)
        if self.feed_gap_m >= self.length_m:
            raise ValueError(f"dipole: feed_gap_m ({self.feed_gap_m} m) must be shorter than length_m "
                             f"({self.length_m} m)")
        if self.wire_radius_m > 0 and self.strip_width_m > 0:
            raise ValueError(f"dipole: give wire_radius_m or strip_width_m, not both "
                             f"(got {self.wire_radius_m} m and {self.strip_width_m} m)")

    @property
    def strip_normal(self) -> str:
        """Normal of the strip's plane: z for horizontal dipoles, y for a vertical one."""
        return "y" if self.axis == "z" else "z"

    def build(self, name: str) -> ElementBuild:
        a = axis_index(self.axis)
        e = np.zeros(3)
        e[a] = 1.0
        L, g = self.length_m / 2, self.feed_gap_m / 2
        arms = [(-L * e, -g * e), (g * e, L * e)]
        prims: list[Primitive] = []
        hints = _hint_lines(self.axis, (-L, -g, g, L), f"{name} dipole ends and feed gap")
        fs, fe = -g * e, g * e
        if self.strip_width_m > 0:
            n = self.strip_normal
            wdir = np.zeros(3)
            wdir[3 - a - axis_index(n)] = self.strip_width_m / 2
            for i, (s, t) in enumerate(arms):
                quad = np.array([s - wdir, t - wdir, t + wdir, s + wdir])
                prims.append(Polygon(f"{name}_arm{i}", self.conductor, n, 0.0, xyz2polygon_points(quad, n),
                                     priority=PRIORITY_CONDUCTOR))
            fs, fe = fs - wdir, fe + wdir
            w_ax = AXES[3 - a - axis_index(n)]
            hints += _hint_lines(w_ax, (-self.strip_width_m / 2, self.strip_width_m / 2), f"{name} strip edges")
            hints += _hint_lines(n, (0.0,), f"{name} strip plane")
        elif self.wire_radius_m > 0:
            for i, (s, t) in enumerate(arms):
                prims.append(Cylinder(f"{name}_arm{i}", self.conductor, tuple(s), tuple(t), self.wire_radius_m,
                                      priority=PRIORITY_CONDUCTOR))
        else:
            for i, (s, t) in enumerate(arms):
                prims.append(Wire(f"{name}_arm{i}", self.conductor, (tuple(s), tuple(t))))
        return ElementBuild(tuple(prims), tuple(map(float, fs)), tuple(map(float, fe)), self.axis, tuple(hints))

    def to_dict(self) -> dict:
        return {"type": self.type, "length_m": self.length_m, "feed_gap_m": self.feed_gap_m, "axis": self.axis,
                "wire_radius_m": self.wire_radius_m, "strip_width_m": self.strip_width_m,
                "conductor": self.conductor}


@dataclass(frozen=True)
class Loop:
    """Planar loop: circular or square, one turn or a spiral of ``turns`` turns, fed through a small gap.

    Parameters
    ----------
    shape : {"circular", "square"}
    radius_m : float
        Circular loops: centre-line radius of the (outer) turn.
    side_m : float
        Square loops: centre-line side length of the (outer) turn.
    trace_width_m : float
        Width of the flat trace (zero-thickness sheet).
    feed_gap_m : float
        Width of the gap across which the port sits (along the plane's u axis).
    turns : int
        1 for a simple loop; >= 2 for a spiral whose inner end returns to the feed over a bridge
        raised by ``bridge_height_m`` along the normal.
    pitch_m : float
        Centre-line spacing between successive turns (spirals only; > trace width).
    normal : {"x", "y", "z"}
    segments_per_turn : int
        Polyline segments per turn of a circular loop (staircased by FDTD anyway; 32-64 is plenty).
    bridge_height_m : float
    conductor : str
    """

    shape: str
    trace_width_m: float
    feed_gap_m: float
    radius_m: float = 0.0
    side_m: float = 0.0
    turns: int = 1
    pitch_m: float = 0.0
    normal: str = "z"
    segments_per_turn: int = 48
    bridge_height_m: float = 1e-3
    conductor: str = "pec"

    type = "loop"

    def __post_init__(self):
        part = "loop"
        choice(part, "shape", self.shape, ("circular", "square"))
        choice(part, "normal", self.normal, AXES)
        for k in ("trace_width_m", "feed_gap_m", "bridge_height_m"):
            object.__setattr__(self, k, positive(part, k, getattr(self, k)))
        for k in ("radius_m", "side_m", "pitch_m"):
            object.__setattr__(self, k, positive(part, k, getattr(self, k), True))
        if self.shape == "circular" and not self.radius_m > 0:
            raise ValueError(f"loop: a circular loop needs radius_m > 0, got {self.radius_m} m")
        if self.shape == "square" and not self.side_m > 0:
            raise ValueError(f"loop: a square loop needs side_m > 0, got {self.side_m} m")
        if self.shape == "circular" and self.side_m:
            raise ValueError(f"loop: side_m ({self.side_m} m) is for square loops; circular loops take radius_m")
        if self.shape == "square" and self.radius_m:
            raise ValueError(f"loop: radius_m ({self.radius_m} m) is for circular loops; square loops take side_m")
        if not isinstance(self.turns, int) or isinstance(self.turns, bool) or self.turns < 1:
            raise ValueError(f"loop: turns must be an integer >= 1, got {self.turns!r}")
        if not isinstance(self.segments_per_turn, int) or self.segments_per_turn < 8:
            raise ValueError(f"loop: segments_per_turn must be an integer >= 8, got {self.segments_per_turn!r}")
        h = self.half_size
        w, g, p = self.trace_width_m, self.feed_gap_m, self.pitch_m
        if self.turns > 1 and not p > w:
            raise ValueError(f"loop: pitch_m ({p} m) must exceed trace_width_m ({w} m) so that turns do not touch")
        inner = h - (self.turns - 1) * p if self.turns == 1 else h - self.turns * p
        if not inner - w / 2 > g / 2 + w:
            raise ValueError(f"loop: the innermost turn (half size {inner:.4g} m) is too small for trace_width_m "
                             f"{w} m and feed_gap_m {g} m; use fewer turns, a smaller pitch or a larger loop")

    @property
    def half_size(self) -> float:
        """Centre-line radius (circular) or half side (square) of the outer turn."""
        return self.radius_m if self.shape == "circular" else self.side_m / 2

    # ------------------------------------------------------------------ centre lines in (u, v)
    def _single_outline(self) -> np.ndarray:
        R, w, g = self.half_size, self.trace_width_m, self.feed_gap_m
        ro, ri = R + w / 2, R - w / 2
        if self.shape == "square":
            return np.array([(g / 2, -ro), (ro, -ro), (ro, ro), (-ro, ro), (-ro, -ro), (-g / 2, -ro),
                             (-g / 2, -ri), (-ri, -ri), (-ri, ri), (ri, ri), (ri, -ri), (g / 2, -ri)])
        n = self.segments_per_turn

        def arc(r, reverse):
            d = math.asin(g / 2 / r)
            t = np.linspace(-math.pi / 2 + d, 1.5 * math.pi - d, n + 1)
            pts = np.stack([r * np.cos(t), r * np.sin(t)], 1)
            return pts[::-1] if reverse else pts
        return np.concatenate([arc(ro, False), arc(ri, True)])

    def _spiral_centreline(self) -> np.ndarray:
        R, p, g, N = self.half_size, self.pitch_m, self.feed_gap_m, self.turns
        if self.shape == "square":
            a = [R - k * p for k in range(N + 1)]
            pts = [(g / 2, -a[0])]
            for k in range(N):
                pts += [(a[k], -a[k]), (a[k], a[k]), (-a[k], a[k]), (-a[k], -a[k + 1])]
            pts.append((-g / 2, -a[N]))
            return np.asarray(pts)
        t0 = -math.pi / 2 + math.asin(g / 2 / R)

        def r_of(t):
            return R - p * (t - t0) / (2 * math.pi)
        t1 = -math.pi / 2 + 2 * math.pi * N - math.asin(g / 2 / (R - N * p))
        for _ in range(50):  # fixed point: end exactly at u = -g/2
            t1 = -math.pi / 2 + 2 * math.pi * N - math.asin(g / 2 / r_of(t1))
        t = np.linspace(t0, t1, int(math.ceil(self.segments_per_turn * (t1 - t0) / (2 * math.pi))) + 1)
        r = r_of(t)
        return np.stack([r * np.cos(t), r * np.sin(t)], 1)

    def build(self, name: str) -> ElementBuild:
        n, (u_ax, v_ax) = self.normal, PLANE_FRAMES[self.normal]
        R, w, g = self.half_size, self.trace_width_m, self.feed_gap_m
        prims: list[Primitive] = []

        def sheet(outline_uv, label, w_off=0.0):
            xyz = plane2xyz(outline_uv, n, w_off)
            return Polygon(f"{name}_{label}", self.conductor, n, float(w_off), xyz2polygon_points(xyz, n),
                           priority=PRIORITY_CONDUCTOR)
        hints = _hint_lines(u_ax, (-g / 2, g / 2), f"{name} feed gap")
        hints += _hint_lines(n, (0.0,), f"{name} trace plane")
        hints += _hint_lines(v_ax, (-R - w / 2, -R + w / 2), f"{name} trace at the feed")
        if self.turns == 1:
            prims.append(sheet(self._single_outline(), "trace"))
        else:
            c = self._spiral_centreline()
            prims.append(sheet(strip_outline(c, w), "trace"))
            h = self.bridge_height_m
            e_u, e_v = float(c[-1, 0]), float(c[-1, 1])
            bridge = np.array([(e_u - w / 2, -R), (e_u + w / 2, -R), (e_u + w / 2, e_v), (e_u - w / 2, e_v)])
            prims.append(sheet(bridge, "bridge", h))
            pad = np.array([(e_u - w / 2, -R - w / 2), (e_u + w / 2, -R - w / 2),
                            (e_u + w / 2, -R + w / 2), (e_u - w / 2, -R + w / 2)])
            prims.append(sheet(pad, "pad"))
            for label, (uu, vv) in (("via_inner", (e_u, e_v)), ("via_outer", (e_u, -R))):
                ends = plane2xyz([(uu, vv), (uu, vv)], n)
                ends[1, axis_index(n)] = h
                prims.append(Wire(f"{name}_{label}", self.conductor, tuple(map(tuple, ends))))
            hints += _hint_lines(n, (h,), f"{name} bridge plane")
        fs, fe = plane2xyz([(-g / 2, -R - w / 2), (g / 2, -R + w / 2)], n)
        return ElementBuild(tuple(prims), tuple(map(float, fs)), tuple(map(float, fe)), u_ax, tuple(hints))

    def to_dict(self) -> dict:
        return {"type": self.type, "shape": self.shape, "radius_m": self.radius_m, "side_m": self.side_m,
                "trace_width_m": self.trace_width_m, "feed_gap_m": self.feed_gap_m, "turns": self.turns,
                "pitch_m": self.pitch_m, "normal": self.normal, "segments_per_turn": self.segments_per_turn,
                "bridge_height_m": self.bridge_height_m, "conductor": self.conductor}


from .cad import CadPart, CadShell  # noqa: E402
from .planar import PLANAR_TYPES, InvertedF, MeanderLine, Spiral  # noqa: E402

Element = Dipole | Loop | InvertedF | MeanderLine | Spiral | CadPart
ELEMENT_TYPES: dict[str, type] = {"dipole": Dipole, "loop": Loop, **PLANAR_TYPES, "cad": CadPart}


EXTERNAL_TYPES = ("dipole", "loop", "cad")  # planar boards are implant antennas


def _element_from(d: Mapping, part: str, allowed=tuple(ELEMENT_TYPES)) -> Element:
    kind = d.get("type")
    if kind not in allowed:
        raise ValueError(f"{part}: type must be one of {sorted(allowed)}, got {kind!r}")
    return construct(ELEMENT_TYPES[kind], d, f"{part} {kind}")


def _dielectric_from(d: Mapping, name: str, part: str) -> Dielectric:
    try:
        return Dielectric(name, **d)
    except TypeError as e:
        raise ValueError(f"{part}: {e}; allowed keys: eps_r, loss_tangent, sigma_S_per_m") from None


@dataclass(frozen=True)
class PlacedAntenna:
    """A placed antenna: its conductors and casing/capsule, its port, its centre, its mesh hints.

    ``bounds()`` covers every primitive, the casing or capsule included.
    """

    primitives: tuple[Primitive, ...]
    port: Port
    centre: Vec3
    hints: tuple[MeshHint, ...]
    materials: tuple[Dielectric, ...] = ()

    def bounds(self) -> tuple[Vec3, Vec3]:
        los, his = zip(*(p.bounds() for p in self.primitives))
        return (tuple(min(v[i] for v in los) for i in range(3)),  # type: ignore[return-value]
                tuple(max(v[i] for v in his) for i in range(3)))


def _move_hints(hints, offset) -> tuple[MeshHint, ...]:
    out = []
    for h in hints:
        o = float(offset[axis_index(h.axis)])
        out.append(MeshHint(h.axis, h.lo + o, h.hi + o, h.max_cell, h.reason))
    return tuple(out)


def _place(eb: ElementBuild, offset, name: str, number: int, impedance: float):
    prims = tuple(translate(p, offset) for p in eb.primitives)
    port = Port(f"port{number}_{name}", number, tuple(np.add(eb.feed_start, offset).tolist()),
                tuple(np.add(eb.feed_stop, offset).tolist()), eb.feed_axis, impedance)
    return prims, port, _move_hints(eb.hints, offset)


def _bounds_of(prims) -> tuple[np.ndarray, np.ndarray]:
    los, his = zip(*(p.bounds() for p in prims))
    return np.min(np.asarray(los), 0), np.max(np.asarray(his), 0)


CASING_MATERIAL = "external_casing"
CAPSULE_MATERIAL = "implant_capsule"


def _refuse_cutting_shell(shell: CadShell, eb: ElementBuild, part: str, what: str) -> None:
    """A cad capsule or casing must enclose the element's conductors and feed (see CadShell.outside_points)."""
    out = shell.outside_points(eb)
    if len(out):
        q = out[0] * 1e3
        raise ValueError(f"{part}: the cad {what} {shell.file} cuts the antenna: {len(out)} checked point(s) of "
                         f"its conductors or feed lie outside it, e.g. ({q[0]:.4g}, {q[1]:.4g}, {q[2]:.4g}) mm from "
                         f"the antenna's origin; check offset_mm, rotation_deg and unit of the {what}")


@dataclass(frozen=True)
class ExternalAntenna:
    """An element above the body.

    Parameters
    ----------
    element : Dipole or Loop
    position_m : (x, y)
        Lateral position of the element's centre.
    standoff_m : float
        Gap between the body surface (z = 0) and the lowest point of the antenna (its casing if any).
        The scene refuses antennas that reach below z = 0.
    casing_thickness_m : float
        0 for no casing; otherwise a dielectric box this much larger than the conductors on every side.
    casing : Dielectric or None
        Casing material (named ``external_casing``), required when the thickness is > 0.
    impedance_ohm : float
    casing_part : CadShell or None
        A casing read from an STL file instead of the box (``casing_thickness_m`` then 0); it must
        enclose the conductors and the feed. The standoff is measured to its lowest point.
    """

    element: Element
    position_m: tuple[float, float] = (0.0, 0.0)
    standoff_m: float = 0.0
    casing_thickness_m: float = 0.0
    casing: Dielectric | None = None
    impedance_ohm: float = 50.0
    casing_part: CadShell | None = None

    def __post_init__(self):
        part = f"external {self.element.type}"
        if isinstance(self.element, Dipole) and self.element.axis == "z":
            raise ValueError(f"{part}: axis must be 'x' or 'y' for an external dipole, got 'z'")
        object.__setattr__(self, "position_m", vector(part, "position_m", self.position_m, 2))
        object.__setattr__(self, "standoff_m", number(part, "standoff_m", self.standoff_m))
        object.__setattr__(self, "casing_thickness_m",
                           positive(part, "casing thickness_m", self.casing_thickness_m, True))
        object.__setattr__(self, "impedance_ohm", positive(part, "impedance_ohm", self.impedance_ohm))
        if self.casing_thickness_m > 0 and self.casing is None:
            raise ValueError(f"{part}: a casing of thickness {self.casing_thickness_m} m needs eps_r")
        if self.casing_part is not None:
            if self.casing_thickness_m > 0:
                raise ValueError(f"{part}: a cad casing takes no thickness_m (its file gives the walls)")
            _refuse_cutting_shell(self.casing_part, self.element.build("external"), part, "casing")

    def build(self) -> PlacedAntenna:
        eb = self.element.build("external")
        lo, _ = _bounds_of(eb.primitives)
        t = self.casing_thickness_m
        if self.casing_part is not None:
            lo[2] = min(lo[2], float(self.casing_part.mesh()[0][:, 2].min()))
        offset = np.array([self.position_m[0], self.position_m[1], self.standoff_m + t - lo[2]])
        prims, port, hints = _place(eb, offset, "external", 1, self.impedance_ohm)
        mats: tuple = eb.materials
        if self.casing_part is not None:
            prims = prims + tuple(self.casing_part.primitives(offset))
            hints = hints + tuple(self.casing_part.hints(offset))
            mats = mats + self.casing_part.materials()
        if t > 0:
            lo, hi = _bounds_of(prims)
            prims = prims + (Box("external_casing", CASING_MATERIAL, tuple((lo - t).tolist()),
                                 tuple((hi + t).tolist()), priority=PRIORITY_ENCAPSULATION),)
            mats = mats + (self.casing,)
        return PlacedAntenna(prims, port, tuple(offset.tolist()), hints, mats)  # type: ignore[arg-type]

    def to_dict(self) -> dict:
        d = self.element.to_dict()
        d.update(position_m=list(self.position_m), standoff_m=self.standoff_m, impedance_ohm=self.impedance_ohm)
        if self.casing_thickness_m > 0:
            d["casing"] = {"thickness_m": self.casing_thickness_m, **self.casing.to_inline_dict()}
        if self.casing_part is not None:
            d["casing"] = self.casing_part.to_dict()
        return d

    @classmethod
    def from_dict(cls, d: Mapping) -> "ExternalAntenna":
        d = dict(d)
        place = {k: d.pop(k) for k in ("position_m", "standoff_m", "impedance_ohm") if k in d}
        casing = d.pop("casing", None)
        if casing is not None and dict(casing).get("shape") == "cad":
            place["casing_part"] = CadShell.from_dict(casing, CASING_MATERIAL, "external antenna casing")
        elif casing is not None:
            casing = dict(casing)
            casing.pop("shape", None) if casing.get("shape") == "box" else None
            if "thickness_m" not in casing:
                raise ValueError(f"external antenna casing: needs thickness_m, got {casing!r}")
            place["casing_thickness_m"] = casing.pop("thickness_m")
            place["casing"] = _dielectric_from(casing, CASING_MATERIAL, "external antenna casing")
        return cls(_element_from(d, "external antenna", EXTERNAL_TYPES), **place)


@dataclass(frozen=True)
class Capsule:
    """Dielectric body around an implant antenna, centred on it.

    ``shape`` "box" uses ``size_m`` (sx, sy, sz); "cylinder" uses ``radius_m``, ``length_m`` and ``axis``.
    """

    shape: str
    material: Dielectric
    size_m: tuple[float, float, float] = (0.0, 0.0, 0.0)
    radius_m: float = 0.0
    length_m: float = 0.0
    axis: str = "x"

    def __post_init__(self):
        part = "implant capsule"
        choice(part, "shape", self.shape, ("box", "cylinder"))
        choice(part, "axis", self.axis, AXES)
        object.__setattr__(self, "size_m", vector(part, "size_m", self.size_m, 3))
        if self.shape == "box":
            for i, a in enumerate(AXES):
                positive(part, f"size_m[{i}] ({a})", self.size_m[i])
        else:
            object.__setattr__(self, "radius_m", positive(part, "radius_m", self.radius_m))
            object.__setattr__(self, "length_m", positive(part, "length_m", self.length_m))

    def primitive(self, centre) -> Box | Cylinder:
        c = np.asarray(centre, dtype=float)
        if self.shape == "box":
            h = np.asarray(self.size_m) / 2
            return Box("implant_capsule", CAPSULE_MATERIAL, tuple((c - h).tolist()), tuple((c + h).tolist()),
                       priority=PRIORITY_ENCAPSULATION)
        e = np.zeros(3)
        e[axis_index(self.axis)] = self.length_m / 2
        return Cylinder("implant_capsule", CAPSULE_MATERIAL, tuple((c - e).tolist()), tuple((c + e).tolist()),
                        self.radius_m, priority=PRIORITY_ENCAPSULATION)

    def contains(self, points, centre) -> np.ndarray:
        p = np.atleast_2d(np.asarray(points, dtype=float)) - np.asarray(centre, dtype=float)
        tol = 1e-12
        if self.shape == "box":
            return np.all(np.abs(p) <= np.asarray(self.size_m) / 2 + tol, axis=1)
        a = axis_index(self.axis)
        rho = np.linalg.norm(np.delete(p, a, axis=1), axis=1)
        return (rho <= self.radius_m + tol) & (np.abs(p[:, a]) <= self.length_m / 2 + tol)

    def to_dict(self) -> dict:
        d: dict = {"shape": self.shape}
        if self.shape == "box":
            d["size_m"] = list(self.size_m)
        else:
            d.update(radius_m=self.radius_m, length_m=self.length_m, axis=self.axis)
        d.update(self.material.to_inline_dict())
        return d

    @classmethod
    def from_dict(cls, d: Mapping) -> "Capsule":
        d = dict(d)
        if d.get("shape") == "cad":
            return CadShell.from_dict(d, CAPSULE_MATERIAL, "implant capsule")
        geo = {k: d.pop(k) for k in ("shape", "size_m", "radius_m", "length_m", "axis") if k in d}
        if "shape" not in geo:
            raise ValueError(f"implant capsule: needs shape 'box', 'cylinder' or 'cad', got {dict(d, **geo)!r}")
        return cls(material=_dielectric_from(d, CAPSULE_MATERIAL, "implant capsule"), **geo)


@dataclass(frozen=True)
class ImplantAntenna:
    """An element inside the body at ``depth_m`` below the surface (centre at z = -depth), in a capsule.

    Parameters
    ----------
    element : Dipole or Loop
    depth_m : float
        > 0.
    position_m : (x, y)
    capsule : Capsule or None
    impedance_ohm : float
    """

    element: Element
    depth_m: float
    position_m: tuple[float, float] = (0.0, 0.0)
    capsule: Capsule | CadShell | None = None
    impedance_ohm: float = 50.0

    def __post_init__(self):
        part = f"implant {self.element.type}"
        object.__setattr__(self, "depth_m", positive(part, "depth_m", self.depth_m))
        object.__setattr__(self, "position_m", vector(part, "position_m", self.position_m, 2))
        object.__setattr__(self, "impedance_ohm", positive(part, "impedance_ohm", self.impedance_ohm))
        if isinstance(self.capsule, CadShell):
            _refuse_cutting_shell(self.capsule, self.element.build("implant"), part, "capsule")
        elif self.capsule is not None:
            from .shapes import sample_points
            eb = self.element.build("implant")
            pts = np.concatenate([sample_points(p, 1e9)[0] for p in eb.primitives]
                                 + [np.asarray([eb.feed_start, eb.feed_stop])])
            bad = ~self.capsule.contains(pts, (0.0, 0.0, 0.0))
            if bad.any():
                q = pts[bad][0]
                raise ValueError(f"{part}: the antenna does not fit in its {self.capsule.shape} capsule; "
                                 f"point ({q[0]:.4g}, {q[1]:.4g}, {q[2]:.4g}) m from the centre is outside")

    @property
    def centre(self) -> Vec3:
        return (self.position_m[0], self.position_m[1], -self.depth_m)

    def build(self) -> PlacedAntenna:
        eb = self.element.build("implant")
        prims, port, hints = _place(eb, self.centre, "implant", 2, self.impedance_ohm)
        mats: tuple = eb.materials
        if isinstance(self.capsule, CadShell):
            prims = prims + tuple(self.capsule.primitives(self.centre))
            mats = mats + self.capsule.materials()
            hints = hints + tuple(self.capsule.hints(self.centre))
        elif self.capsule is not None:
            prims = prims + (self.capsule.primitive(self.centre),)
            mats = mats + (self.capsule.material,)
        return PlacedAntenna(prims, port, self.centre, hints, mats)

    def to_dict(self) -> dict:
        d = self.element.to_dict()
        d.update(depth_m=self.depth_m, position_m=list(self.position_m), impedance_ohm=self.impedance_ohm)
        if self.capsule is not None:
            d["capsule"] = self.capsule.to_dict()
        return d

    @classmethod
    def from_dict(cls, d: Mapping) -> "ImplantAntenna":
        d = dict(d)
        place = {k: d.pop(k) for k in ("depth_m", "position_m", "impedance_ohm") if k in d}
        if "depth_m" not in place:
            raise ValueError("implant antenna: missing key depth_m")
        capsule = d.pop("capsule", None)
        if capsule is not None:
            place["capsule"] = Capsule.from_dict(capsule)
        return cls(_element_from(d, "implant antenna"), **place)
