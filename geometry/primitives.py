"""Solver-neutral primitives: the vocabulary every builder emits and every solver adapter reads.

All lengths are in metres, all frequencies in hertz, conductivity in S/m, density in kg/m^3.

Coordinate convention (shared by every builder)
-----------------------------------------------
* The body surface nearest the external antenna is the plane ``z = 0``.
* Tissue lies at ``z < 0``; air, and the external antenna, at ``z > 0``.
* ``x`` and ``y`` are lateral. Implant depth ``d`` puts the implant centre at ``z = -d``.

Priorities
----------
Where primitives overlap, the higher ``priority`` wins (the solver adapter passes it on).
Use the constants below so that metal beats dielectric and inner beats outer.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Literal

Vec3 = tuple[float, float, float]
Axis = Literal["x", "y", "z"]
AXES: tuple[str, str, str] = ("x", "y", "z")

# priority bands: tissue layers count upward from PRIORITY_TISSUE (deeper / inner layer = higher)
PRIORITY_TISSUE = 10
PRIORITY_ENCAPSULATION = 50
PRIORITY_CONDUCTOR = 100
PRIORITY_PORT = 200


def axis_index(axis: str) -> int:
    """Map ``'x'|'y'|'z'`` to 0, 1, 2, with an error that says what is allowed."""
    try:
        return AXES.index(axis)
    except ValueError:
        raise ValueError(f"axis must be one of 'x', 'y', 'z', got {axis!r}") from None


def _vec(v, what: str) -> Vec3:
    try:
        t = tuple(float(c) for c in v)
    except TypeError:
        raise ValueError(f"{what} must be three numbers (x, y, z) in metres, got {v!r}") from None
    if len(t) != 3:
        raise ValueError(f"{what} must be three numbers (x, y, z) in metres, got {v!r}")
    return t  # type: ignore[return-value]


@dataclass(frozen=True)
class Material:
    """A material with its properties already evaluated at the case frequency.

    Parameters
    ----------
    name : str
        Unique name inside a scene (e.g. ``"muscle"``, ``"capsule_wall"``, ``"copper"``).
    kind : {"dielectric", "conductor", "pec"}
        ``dielectric`` uses ``eps_r`` and ``sigma_S_per_m``; ``conductor`` is a metal of finite
        conductivity ``sigma_S_per_m``; ``pec`` is a perfect electric conductor.
    eps_r : float
        Relative permittivity (>= 1).
    sigma_S_per_m : float
        Conductivity in S/m (>= 0).
    density_kg_m3 : float
        Mass density, needed for SAR. 0 for materials that carry no SAR (air, plastics, metals).
    is_tissue : bool
        True for materials whose absorbed power counts as SAR.
    """

    name: str
    kind: Literal["dielectric", "conductor", "pec"] = "dielectric"
    eps_r: float = 1.0
    sigma_S_per_m: float = 0.0
    density_kg_m3: float = 0.0
    is_tissue: bool = False

    def __post_init__(self):
        if not self.name:
            raise ValueError("material name must not be empty")
        if self.kind not in ("dielectric", "conductor", "pec"):
            raise ValueError(f"material {self.name!r}: kind must be dielectric, conductor or pec, got {self.kind!r}")
        if not self.eps_r >= 1.0:
            raise ValueError(f"material {self.name!r}: eps_r must be >= 1, got {self.eps_r}")
        if not self.sigma_S_per_m >= 0.0:
            raise ValueError(f"material {self.name!r}: sigma_S_per_m must be >= 0, got {self.sigma_S_per_m}")
        if not self.density_kg_m3 >= 0.0:
            raise ValueError(f"material {self.name!r}: density_kg_m3 must be >= 0, got {self.density_kg_m3}")
        if self.is_tissue and self.density_kg_m3 <= 0.0:
            raise ValueError(f"material {self.name!r}: a tissue needs density_kg_m3 > 0 for SAR")

    def to_dict(self) -> dict:
        return {"name": self.name, "kind": self.kind, "eps_r": self.eps_r, "sigma_S_per_m": self.sigma_S_per_m,
                "density_kg_m3": self.density_kg_m3, "is_tissue": self.is_tissue}

    @classmethod
    def from_dict(cls, d: dict) -> "Material":
        return cls(**d)


@dataclass(frozen=True)
class Box:
    """Axis-aligned box between two opposite corners ``start`` and ``stop``."""

    name: str
    material: str
    start: Vec3
    stop: Vec3
    priority: int = PRIORITY_TISSUE
    kind: Literal["box"] = field(default="box", init=False)

    def __post_init__(self):
        object.__setattr__(self, "start", _vec(self.start, f"box {self.name!r} start"))
        object.__setattr__(self, "stop", _vec(self.stop, f"box {self.name!r} stop"))
        for i, a in enumerate(AXES):
            if self.start[i] == self.stop[i]:
                raise ValueError(f"box {self.name!r} has zero size along {a} ({self.start[i]} m); give it a thickness")

    def bounds(self) -> tuple[Vec3, Vec3]:
        lo = tuple(min(a, b) for a, b in zip(self.start, self.stop))
        hi = tuple(max(a, b) for a, b in zip(self.start, self.stop))
        return lo, hi  # type: ignore[return-value]


@dataclass(frozen=True)
class VoxelBox(Box):
    """A box of voxels of one tissue from a segmented label volume.

    A box like any other for the engine; the mesher does not treat its faces as layer faces (the
    label volume asks for lines where the tissue changes instead, and one voxel thick is not a layer).
    """

    kind: Literal["voxel_box"] = field(default="voxel_box", init=False)  # type: ignore[assignment]


@dataclass(frozen=True)
class Cylinder:
    """Solid circular cylinder of ``radius`` with axis from ``start`` to ``stop`` (any direction)."""

    name: str
    material: str
    start: Vec3
    stop: Vec3
    radius: float
    priority: int = PRIORITY_TISSUE
    kind: Literal["cylinder"] = field(default="cylinder", init=False)

    def __post_init__(self):
        object.__setattr__(self, "start", _vec(self.start, f"cylinder {self.name!r} start"))
        object.__setattr__(self, "stop", _vec(self.stop, f"cylinder {self.name!r} stop"))
        if not self.radius > 0:
            raise ValueError(f"cylinder {self.name!r}: radius must be > 0, got {self.radius} m")
        if self.start == self.stop:
            raise ValueError(f"cylinder {self.name!r}: start and stop coincide; give it a length")

    def bounds(self) -> tuple[Vec3, Vec3]:
        """Smallest axis-aligned box around the cylinder (flat end discs).

        An end disc of radius ``r`` normal to the unit axis ``u`` reaches ``r sqrt(1 - u_i^2)`` along
        coordinate ``i`` (analytic): nothing along the cylinder's own axis, ``r`` across it.
        """
        d = [b - a for a, b in zip(self.start, self.stop)]
        norm = math.sqrt(sum(c * c for c in d))
        reach = [self.radius * math.sqrt(max(0.0, 1.0 - (c / norm) ** 2)) for c in d]
        lo = tuple(min(a, b) - e for a, b, e in zip(self.start, self.stop, reach))
        hi = tuple(max(a, b) + e for a, b, e in zip(self.start, self.stop, reach))
        return lo, hi  # type: ignore[return-value]

    def along_axis(self) -> int | None:
        """0, 1 or 2 when the cylinder's axis runs along x, y or z; None when it is oblique."""
        along = [i for i in range(3) if self.start[i] != self.stop[i]]
        return along[0] if len(along) == 1 else None


@dataclass(frozen=True)
class Wire:
    """Conductor along a polyline through ``points``; ``radius`` 0 means a thin wire on the mesh.

    With ``radius`` > 0 the solid is every point within ``radius`` of the polyline (round ends and
    joints, as the engine's wire primitive fills it), so it reaches ``radius`` past each end point.
    """

    name: str
    material: str
    points: tuple[Vec3, ...]
    radius: float = 0.0
    priority: int = PRIORITY_CONDUCTOR
    kind: Literal["wire"] = field(default="wire", init=False)

    def __post_init__(self):
        pts = tuple(_vec(p, f"wire {self.name!r} point") for p in self.points)
        if len(pts) < 2:
            raise ValueError(f"wire {self.name!r} needs at least two points, got {len(pts)}")
        object.__setattr__(self, "points", pts)
        if not self.radius >= 0:
            raise ValueError(f"wire {self.name!r}: radius must be >= 0, got {self.radius} m")

    def bounds(self) -> tuple[Vec3, Vec3]:
        lo = tuple(min(p[i] for p in self.points) - self.radius for i in range(3))
        hi = tuple(max(p[i] for p in self.points) + self.radius for i in range(3))
        return lo, hi  # type: ignore[return-value]


@dataclass(frozen=True)
class Polygon:
    """Planar polygon in the plane normal to ``normal`` at ``elevation``, extruded by ``thickness``.

    ``points`` are 2-D in the plane's two remaining axes in cyclic order (normal ``z`` -> (x, y),
    normal ``x`` -> (y, z), normal ``y`` -> (z, x)). ``thickness`` 0 means a zero-thickness sheet
    (a printed trace). Used for strips, traces and rings.
    """

    name: str
    material: str
    normal: Axis
    elevation: float
    points: tuple[tuple[float, float], ...]
    thickness: float = 0.0
    priority: int = PRIORITY_CONDUCTOR
    kind: Literal["polygon"] = field(default="polygon", init=False)

    def __post_init__(self):
        axis_index(self.normal)
        pts = tuple((float(p[0]), float(p[1])) for p in self.points)
        if len(pts) < 3:
            raise ValueError(f"polygon {self.name!r} needs at least three points, got {len(pts)}")
        object.__setattr__(self, "points", pts)
        if not self.thickness >= 0:
            raise ValueError(f"polygon {self.name!r}: thickness must be >= 0, got {self.thickness} m")

    def plane_axes(self) -> tuple[int, int]:
        n = axis_index(self.normal)
        return (n + 1) % 3, (n + 2) % 3

    def bounds(self) -> tuple[Vec3, Vec3]:
        n = axis_index(self.normal)
        a, b = self.plane_axes()
        lo = [0.0, 0.0, 0.0]
        hi = [0.0, 0.0, 0.0]
        lo[a], hi[a] = min(p[0] for p in self.points), max(p[0] for p in self.points)
        lo[b], hi[b] = min(p[1] for p in self.points), max(p[1] for p in self.points)
        lo[n], hi[n] = self.elevation, self.elevation + self.thickness
        return tuple(lo), tuple(hi)  # type: ignore[return-value]


@dataclass(frozen=True)
class Polyhedron:
    """Closed solid bounded by triangles: ``vertices`` shape (n, 3) in metres, ``faces`` shape (m, 3).

    Each face lists three vertex indexes. The surface must be closed (every edge shared by exactly
    two faces); :func:`bodysweep.geometry.cad.check_closed` checks it where a mesh enters a scene.
    """

    name: str
    material: str
    vertices: tuple[Vec3, ...]
    faces: tuple[tuple[int, int, int], ...]
    priority: int = PRIORITY_CONDUCTOR
    kind: Literal["polyhedron"] = field(default="polyhedron", init=False)

    def __post_init__(self):
        v = tuple(_vec(q, f"polyhedron {self.name!r} vertex") for q in self.vertices)
        f = tuple(tuple(int(i) for i in t) for t in self.faces)
        if len(v) < 4 or len(f) < 4:
            raise ValueError(f"polyhedron {self.name!r} needs at least 4 vertices and 4 faces, "
                             f"got {len(v)} and {len(f)}")
        for t in f:
            if len(t) != 3 or min(t) < 0 or max(t) >= len(v):
                raise ValueError(f"polyhedron {self.name!r}: face {t} must be three vertex indexes "
                                 f"from 0 to {len(v) - 1}")
        object.__setattr__(self, "vertices", v)
        object.__setattr__(self, "faces", f)

    def bounds(self) -> tuple[Vec3, Vec3]:
        lo = tuple(min(q[i] for q in self.vertices) for i in range(3))
        hi = tuple(max(q[i] for q in self.vertices) for i in range(3))
        return lo, hi  # type: ignore[return-value]


@dataclass(frozen=True)
class Port:
    """A lumped port across a feed gap from ``start`` to ``stop``.

    The gap is an axis-aligned segment or thin box; ``axis`` is the direction of the port
    voltage (from ``start`` to ``stop``, positive when ``stop`` is above ``start`` on that axis).
    ``number`` is 1 for the external antenna and 2 for the implant antenna.
    """

    name: str
    number: int
    start: Vec3
    stop: Vec3
    axis: Axis
    impedance_ohm: float = 50.0
    kind: Literal["port"] = field(default="port", init=False)

    def __post_init__(self):
        object.__setattr__(self, "start", _vec(self.start, f"port {self.name!r} start"))
        object.__setattr__(self, "stop", _vec(self.stop, f"port {self.name!r} stop"))
        i = axis_index(self.axis)
        if self.start[i] == self.stop[i]:
            raise ValueError(f"port {self.name!r}: the feed gap has zero length along {self.axis}; "
                             "give the antenna a feed gap > 0")
        if not self.impedance_ohm > 0:
            raise ValueError(f"port {self.name!r}: impedance_ohm must be > 0, got {self.impedance_ohm}")
        if self.number < 1:
            raise ValueError(f"port {self.name!r}: number must be >= 1, got {self.number}")

    def bounds(self) -> tuple[Vec3, Vec3]:
        lo = tuple(min(a, b) for a, b in zip(self.start, self.stop))
        hi = tuple(max(a, b) for a, b in zip(self.start, self.stop))
        return lo, hi  # type: ignore[return-value]

    @property
    def centre(self) -> Vec3:
        return tuple(0.5 * (a + b) for a, b in zip(self.start, self.stop))  # type: ignore[return-value]


Primitive = Box | VoxelBox | Cylinder | Wire | Polygon | Polyhedron
PRIMITIVE_KINDS = {"box": Box, "voxel_box": VoxelBox, "cylinder": Cylinder, "wire": Wire, "polygon": Polygon, "polyhedron": Polyhedron}


def primitive_to_dict(p: Primitive | Port) -> dict:
    """Plain, JSON-ready dict of a primitive or port (tuples become lists)."""
    out: dict = {}
    for k in p.__dataclass_fields__:
        v = getattr(p, k)
        if isinstance(v, tuple):
            v = [list(x) if isinstance(x, tuple) else x for x in v]
        out[k] = v
    return out


def primitive_from_dict(d: dict) -> Primitive | Port:
    """Inverse of :func:`primitive_to_dict`."""
    d = dict(d)
    kind = d.pop("kind")
    if kind == "port":
        return Port(**d)
    try:
        cls = PRIMITIVE_KINDS[kind]
    except KeyError:
        raise ValueError(f"unknown primitive kind {kind!r}; allowed: {sorted(PRIMITIVE_KINDS)} or 'port'") from None
    for k in ("points", "vertices", "faces"):
        if k in d:
            d[k] = tuple(tuple(p) for p in d[k])
    return cls(**d)
