"""Parts drawn elsewhere: closed triangle meshes read from STL files (antennas, capsules, casings, concentrators).

A :class:`CadPart` is an element like a dipole or a loop: it is built around its own origin (the file's
origin, scaled by ``unit``, rotated, then moved by ``offset_m``) and the external or implant placement
puts it in the scene. Its feed gap runs from ``feed_start_m`` to ``feed_stop_m``, two points given in
the part's own coordinates (metres, before rotation and offset) that move with it.

The file's sha256 is part of the spec, so of the case identity; the vertices are not. Building from a
spec with a hash re-reads the file and refuses it if its content changed.

Checks on the mesh (each refusal is one line naming the file and the defect): readable STL, at least
four triangles, no triangle of zero area, closed (every edge shared by exactly two triangles), and a
size between :data:`MIN_PART_M` and :data:`MAX_PART_M` (a part 1000 times too big or too small is a
wrong ``unit``).

Besides the fed :class:`CadPart`, three passive parts use the same reading, checks and placement:
:class:`CadShell` (an implant's capsule or an external antenna's casing, a dielectric that must enclose
the antenna's conductors) and :class:`CadConcentrator` (a metal or dielectric part in tissue, placed by
anchor like the other concentrators). Their mesh hints are lines on the planes of their faces that are
perpendicular to an axis and lie inside the bounding box (inner walls, steps), where a wall thinner than
the bounding box would otherwise fall between lines; the bounding faces themselves get lines from the
mesher as for any primitive.
"""
from __future__ import annotations

import functools
import hashlib
import io
import math
import struct
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .model import ElementBuild, MeshHint
from .meshgeom import encloses, inner_plane_hints, outline_points, shells
from .primitives import AXES, PRIORITY_CONDUCTOR, PRIORITY_ENCAPSULATION, Polyhedron, axis_index
from .specs import choice, number, vector
from .tissues import Dielectric

#: length of one file unit in metres
UNITS = {"m": 1.0, "mm": 1e-3, "um": 1e-6}
#: largest and smallest overall size (metres) of a part: implant and body-worn antennas fit well inside
MAX_PART_M = 1.0
MIN_PART_M = 1e-5


def _mm(v) -> str:
    return "(" + ", ".join(f"{c * 1e3:.4g}" for c in v) + ") mm"


@functools.lru_cache(maxsize=32)
def _read(path: str, mtime_ns: int, size: int) -> tuple[np.ndarray, np.ndarray, str]:
    """Checked vertices (k, 3) in file units, outward faces (m, 3) and sha256 of one STL file (cached per path,
    modification time and size; read-only arrays)."""
    from stl import mesh as stl_mesh

    data = Path(path).read_bytes()
    digest = hashlib.sha256(data).hexdigest()
    try:
        tris = np.asarray(stl_mesh.Mesh.from_file(path, fh=io.BytesIO(data)).vectors, dtype=float)  # the hashed bytes
    except (ValueError, AssertionError, RuntimeError, struct.error, IndexError, TypeError, UnicodeDecodeError) as e:
        raise ValueError(f"not a readable STL file ({str(e).splitlines()[0] if str(e) else type(e).__name__})") \
            from None
    if tris.ndim != 3 or len(tris) == 0:
        raise ValueError("holds no triangles")
    if not np.all(np.isfinite(tris)):
        raise ValueError("holds coordinates that are not finite numbers")
    scale = float(np.ptp(tris.reshape(-1, 3), axis=0).max()) or 1.0
    key = np.round(tris.reshape(-1, 3) / (1e-9 * scale)).astype(np.int64)  # merge corners closer than 1e-9 of the size
    _, first, inverse = np.unique(key, axis=0, return_index=True, return_inverse=True)
    vertices = tris.reshape(-1, 3)[first]
    faces = inverse.reshape(-1, 3)
    defect = check_closed(vertices, faces)
    if defect:
        raise ValueError(defect)
    tri = vertices[faces]
    volume = float(np.einsum("ij,ij->i", tri[:, 0], np.cross(tri[:, 1], tri[:, 2])).sum()) / 6.0
    if volume < 0:  # faces listed clockwise seen from outside: turn them so that normals point out
        faces = faces[:, [0, 2, 1]]
    vertices.flags.writeable = False  # shared by every caller through the cache
    faces.flags.writeable = False
    return vertices, faces, digest


def check_closed(vertices: np.ndarray, faces: np.ndarray) -> str | None:
    """The first defect of a triangle mesh as text (None when it is closed and non-degenerate).

    Closed means every undirected edge is shared by exactly two triangles (common practice for a
    watertight, manifold surface).
    """
    if len(faces) < 4:
        return f"has {len(faces)} triangle(s); a closed solid needs at least 4"
    tri = vertices[faces]
    area2 = np.linalg.norm(np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0]), axis=1)
    size = float(np.ptp(vertices, axis=0).max())
    bad = np.flatnonzero((area2 <= 1e-12 * size * size) | (faces[:, 0] == faces[:, 1]) | (faces[:, 1] == faces[:, 2])
                         | (faces[:, 0] == faces[:, 2]))
    if len(bad):
        return f"triangle {int(bad[0])} has zero area ({len(bad)} degenerate triangle(s))"
    edges = np.sort(np.concatenate([faces[:, [0, 1]], faces[:, [1, 2]], faces[:, [2, 0]]]), axis=1)
    uniq, counts = np.unique(edges, axis=0, return_counts=True)
    odd = np.flatnonzero(counts != 2)
    if len(odd):
        a, b = vertices[uniq[odd[0]]]
        return (f"is not closed: {len(odd)} edge(s) not shared by exactly two triangles, e.g. between "
                f"({', '.join(f'{c:.4g}' for c in a)}) and ({', '.join(f'{c:.4g}' for c in b)}) in file units")
    return None


def load_mesh(file: str, unit: str) -> tuple[np.ndarray, np.ndarray, str]:
    """Checked mesh of an STL file: vertices (k, 3) in metres, faces (m, 3), sha256 of the file.

    Raises
    ------
    ValueError
        One line naming the file and its defect (missing, unreadable, open, degenerate, implausible size).
    """
    p = Path(file)
    where = f"cad file {file}"
    try:
        st = p.stat()
    except OSError:
        raise ValueError(f"{where}: no such file (a relative path is read from the study file's folder)") from None
    if not p.is_file():
        raise ValueError(f"{where}: not a file")
    try:
        v, f, digest = _read(str(p.resolve()), st.st_mtime_ns, st.st_size)
    except ValueError as e:
        raise ValueError(f"{where}: {e}") from None
    v = v * UNITS[unit]
    size = float(np.ptp(v, axis=0).max())
    if size > MAX_PART_M:
        raise ValueError(f"{where}: the part is {size * 1e3:.6g} mm across with unit {unit!r}, larger than "
                         f"{MAX_PART_M * 1e3:g} mm; check unit (m, mm or um)")
    if size < MIN_PART_M:
        raise ValueError(f"{where}: the part is {size * 1e3:.6g} mm across with unit {unit!r}, smaller than "
                         f"{MIN_PART_M * 1e3:g} mm; check unit (m, mm or um)")
    return v, f, digest


def rotation_matrix(rotation_deg) -> np.ndarray:
    """Rotation about x, then y, then z (fixed axes, right hand), angles in degrees; shape (3, 3)."""
    ax, ay, az = (math.radians(float(a)) for a in rotation_deg)
    cx, sx, cy, sy, cz, sz = math.cos(ax), math.sin(ax), math.cos(ay), math.sin(ay), math.cos(az), math.sin(az)
    rx = np.array([[1, 0, 0], [0, cx, -sx], [0, sx, cx]])
    ry = np.array([[cy, 0, sy], [0, 1, 0], [-sy, 0, cy]])
    rz = np.array([[cz, -sz, 0], [sz, cz, 0], [0, 0, 1]])
    m = rz @ ry @ rx
    m[np.abs(m) < 1e-15] = 0.0  # quarter turns stay exact
    return m


@dataclass(frozen=True)
class CadPart:
    """A conductor read from an STL file.

    Parameters
    ----------
    file : str
        Path of the STL file (the study loader makes a relative path absolute from the study's folder).
    feed_start_m, feed_stop_m : (x, y, z)
        Ends of the feed gap in the part's own coordinates (metres, before rotation and offset).
    feed_axis : {"x", "y", "z"}
        Direction of the port voltage in the scene (after rotation).
    unit : {"m", "mm", "um"}
        Length of one file unit.
    offset_m : (x, y, z)
        Shift of the part after rotation, relative to the placement's centre.
    rotation_deg : (about x, about y, about z)
        Rotation of the part about its file origin, applied x, then y, then z.
    conductor : str
        Material name of the metal.
    sha256 : str
        Content hash of the file; empty to take the file as it is now, otherwise the file must still match.
    """

    file: str
    feed_start_m: tuple[float, float, float]
    feed_stop_m: tuple[float, float, float]
    feed_axis: str
    unit: str = "mm"
    offset_m: tuple[float, float, float] = (0.0, 0.0, 0.0)
    rotation_deg: tuple[float, float, float] = (0.0, 0.0, 0.0)
    conductor: str = "pec"
    sha256: str = ""

    type = "cad"

    def __post_init__(self):
        part = f"cad part {self.file}"
        if not isinstance(self.file, str) or not self.file:
            raise ValueError(f"cad part: file must be a path to an STL file, got {self.file!r}")
        choice(part, "unit", self.unit, tuple(UNITS))
        choice(part, "feed_axis", self.feed_axis, AXES)
        for k in ("feed_start_m", "feed_stop_m", "offset_m", "rotation_deg"):
            object.__setattr__(self, k, vector(part, k, getattr(self, k), 3))
        v, _, digest = load_mesh(self.file, self.unit)
        if self.sha256 and self.sha256 != digest:
            raise ValueError(f"cad file {self.file}: its content changed since the case was made (sha256 "
                             f"{digest[:12]}, the case has {self.sha256[:12]}); expand the study again")
        object.__setattr__(self, "sha256", digest)
        lo, hi = v.min(0), v.max(0)
        tol = 1e-6 * float(np.ptp(v, axis=0).max())
        for k in ("feed_start_m", "feed_stop_m"):
            q = np.asarray(getattr(self, k))
            if np.any(q < lo - tol) or np.any(q > hi + tol):
                raise ValueError(f"cad file {self.file}: {k[:-2]}_mm {_mm(q)} is outside the part, which spans "
                                 f"{_mm(lo)} to {_mm(hi)} in its own coordinates")
        gap = rotation_matrix(self.rotation_deg) @ (np.asarray(self.feed_stop_m) - np.asarray(self.feed_start_m))
        i = axis_index(self.feed_axis)
        if abs(gap[i]) <= 1e-9:
            raise ValueError(f"cad file {self.file}: the feed gap from feed_start_mm to feed_stop_mm has no length "
                             f"along feed_axis {self.feed_axis} after rotation_deg {list(self.rotation_deg)}")

    def build(self, name: str) -> ElementBuild:
        v, f, _ = load_mesh(self.file, self.unit)
        r = rotation_matrix(self.rotation_deg)
        off = np.asarray(self.offset_m)
        verts = v @ r.T + off
        solid = Polyhedron(f"{name}_cad", self.conductor, tuple(map(tuple, verts.tolist())),
                           tuple(map(tuple, f.tolist())), priority=PRIORITY_CONDUCTOR)
        fs = r @ np.asarray(self.feed_start_m) + off
        fe = r @ np.asarray(self.feed_stop_m) + off
        lo, hi = verts.min(0), verts.max(0)
        hints = []
        for i, a in enumerate(AXES):
            hints += [MeshHint(a, float(x), float(x), 0.0, f"{name} cad part bounding box") for x in (lo[i], hi[i])]
            if fs[i] != fe[i]:
                hints += [MeshHint(a, float(x), float(x), 0.0, f"{name} cad feed gap") for x in (fs[i], fe[i])]
        return ElementBuild((solid,), tuple(map(float, fs)), tuple(map(float, fe)), self.feed_axis, tuple(hints))

    def to_dict(self) -> dict:
        return {"type": self.type, "file": self.file, "sha256": self.sha256, "unit": self.unit,
                "feed_start_m": list(self.feed_start_m), "feed_stop_m": list(self.feed_stop_m),
                "feed_axis": self.feed_axis, "offset_m": list(self.offset_m),
                "rotation_deg": list(self.rotation_deg), "conductor": self.conductor}


# ---------------------------------------------------------------------------------------- passive parts
#: the same anchor names as ``concentrators.ANCHORS`` (that module imports this one; a test checks they agree)
CONCENTRATOR_ANCHORS = ("implant", "surface", "external_feed")


def placed_vertices(file: str, unit: str, rotation_deg, offset_m) -> tuple[np.ndarray, np.ndarray]:
    """Vertices (k, 3) in metres after rotation about the file origin and the offset, and the faces (m, 3)."""
    v, f, _ = load_mesh(file, unit)
    return v @ rotation_matrix(rotation_deg).T + np.asarray(offset_m, dtype=float), f


@dataclass(frozen=True)
class CadShell:
    """A dielectric capsule (implant) or casing (external antenna) read from an STL file.

    Placed like the element it holds: the file's origin, scaled by ``unit``, rotated by ``rotation_deg``
    and moved by ``offset_m``, is the element's own origin (the implant's centre; for the external
    antenna the origin of its element before the standoff lifts it). It must enclose every conductor of
    the element and its feed gap.

    Parameters
    ----------
    file : str
    material : Dielectric
        Named ``implant_capsule`` or ``external_casing``; the primitive carries the same name.
    unit, offset_m, rotation_deg, sha256
        As for :class:`CadPart`.
    """

    file: str
    material: Dielectric
    unit: str = "mm"
    offset_m: tuple[float, float, float] = (0.0, 0.0, 0.0)
    rotation_deg: tuple[float, float, float] = (0.0, 0.0, 0.0)
    sha256: str = ""

    shape = "cad"

    def __post_init__(self):
        part = f"{self.material.name.replace('_', ' ')} {self.file}"
        if not isinstance(self.file, str) or not self.file:
            raise ValueError(f"{self.material.name.replace('_', ' ')}: file must be a path to an STL file, "
                             f"got {self.file!r}")
        choice(part, "unit", self.unit, tuple(UNITS))
        for k in ("offset_m", "rotation_deg"):
            object.__setattr__(self, k, vector(part, k, getattr(self, k), 3))
        _, _, digest = load_mesh(self.file, self.unit)
        if self.sha256 and self.sha256 != digest:
            raise ValueError(f"cad file {self.file}: its content changed since the case was made (sha256 "
                             f"{digest[:12]}, the case has {self.sha256[:12]}); expand the study again")
        object.__setattr__(self, "sha256", digest)

    def mesh(self, origin=(0.0, 0.0, 0.0)) -> tuple[np.ndarray, np.ndarray]:
        """Vertices (k, 3) with the element's origin at ``origin``, faces (m, 3)."""
        return placed_vertices(self.file, self.unit, self.rotation_deg, np.add(self.offset_m, origin))

    @property
    def cavity_material(self) -> Dielectric:
        """Air (eps_r 1) filling the shell's cavities, named after the shell."""
        return Dielectric(f"{self.material.name}_cavity", 1.0)

    def _shells(self, origin=(0.0, 0.0, 0.0)):
        v, f = self.mesh(origin)
        return v, shells(v, f)

    def primitives(self, centre) -> list[Polyhedron]:
        """The solid (every face: cavities stay open by the even-odd rule) and one air part per cavity, which
        outranks the solid so that a cavity is air (not tissue) however the engine fills a shell with holes."""
        v, parts = self._shells(centre)
        verts = tuple(map(tuple, v.tolist()))
        solid = np.concatenate([p for p, _ in parts])
        out = [Polyhedron(self.material.name, self.material.name, verts, tuple(map(tuple, solid.tolist())),
                          priority=PRIORITY_ENCAPSULATION)]
        for k, (p, depth) in enumerate(q for q in parts if q[1] % 2 == 1):
            out.append(Polyhedron(f"{self.material.name}_cavity{k}", self.cavity_material.name, verts,
                                  tuple(map(tuple, p[:, [0, 2, 1]].tolist())), priority=PRIORITY_ENCAPSULATION + 1))
        return out

    def materials(self) -> tuple[Dielectric, ...]:
        has_cavity = any(d % 2 == 1 for _, d in self._shells()[1])
        return (self.material, self.cavity_material) if has_cavity else (self.material,)

    def hints(self, centre) -> list[MeshHint]:
        v, f = self.mesh(centre)
        return inner_plane_hints(v, f, self.material.name, "cad")

    def outside_points(self, eb: ElementBuild) -> np.ndarray:
        """Points of the element's conductors and feed (its own coordinates) that the shell does not enclose.

        Checked: every vertex of a box, polygon or polyhedron and points every :data:`.meshgeom.CHECK_STEP_M` along
        their edges, wire polylines, a cylinder's rim at both ends, and both feed-gap ends.
        """
        v, parts = self._shells()
        outer = np.concatenate([p for p, d in parts if d == 0])  # cavities count as enclosed
        pts = np.concatenate([np.asarray([eb.feed_start, eb.feed_stop], dtype=float), outline_points(eb.primitives)])
        return pts[~encloses(v, outer, pts)]

    def to_dict(self) -> dict:
        return {"shape": self.shape, "file": self.file, "sha256": self.sha256, "unit": self.unit,
                "offset_m": list(self.offset_m), "rotation_deg": list(self.rotation_deg),
                **self.material.to_inline_dict()}

    @classmethod
    def from_dict(cls, d, material_name: str, part: str) -> "CadShell":
        d = dict(d)
        d.pop("shape", None)
        geo = {k: d.pop(k) for k in ("file", "unit", "offset_m", "rotation_deg", "sha256") if k in d}
        if "file" not in geo:
            raise ValueError(f"{part}: a cad shape needs file (an STL file)")
        try:
            material = Dielectric(material_name, **d)
        except TypeError as e:
            raise ValueError(f"{part}: {e}; allowed keys: file, unit, offset_mm, rotation_deg, sha256, eps_r, "
                             "loss_tangent, sigma_S_per_m") from None
        return cls(material=material, **geo)


@dataclass(frozen=True)
class CadConcentrator:
    """A passive part in tissue read from an STL file: metal (``conductor``) or dielectric (``eps_r``).

    Placed by ``anchor`` like the other concentrators: the file's origin, scaled, rotated by
    ``rotation_deg``, then moved by ``offset_m`` from the anchor point.

    Parameters
    ----------
    file, unit, offset_m, rotation_deg, sha256
        As for :class:`CadPart`.
    anchor : {"implant", "surface", "external_feed"}
    conductor : str
        Metal of the part ('pec' or a declared conductor); empty for a dielectric part. Default 'pec'
        unless ``eps_r`` is given.
    eps_r, loss_tangent, sigma_S_per_m : float or None
        A dielectric part: relative permittivity and loss tangent or conductivity (no SAR).
    """

    file: str
    unit: str = "mm"
    anchor: str = "implant"
    offset_m: tuple[float, float, float] = (0.0, 0.0, 0.0)
    rotation_deg: tuple[float, float, float] = (0.0, 0.0, 0.0)
    conductor: str = ""
    eps_r: float | None = None
    loss_tangent: float | None = None
    sigma_S_per_m: float | None = None
    sha256: str = ""

    type = "cad"

    def __post_init__(self):
        part = f"cad concentrator {self.file}"
        if not isinstance(self.file, str) or not self.file:
            raise ValueError(f"cad concentrator: file must be a path to an STL file, got {self.file!r}")
        choice(part, "unit", self.unit, tuple(UNITS))
        choice(part, "anchor", self.anchor, CONCENTRATOR_ANCHORS)
        for k in ("offset_m", "rotation_deg"):
            object.__setattr__(self, k, vector(part, k, getattr(self, k), 3))
        if self.eps_r is None:
            if self.loss_tangent is not None or self.sigma_S_per_m is not None:
                raise ValueError(f"{part}: loss_tangent and sigma_S_per_m describe a dielectric part; give eps_r too")
            object.__setattr__(self, "conductor", self.conductor or "pec")
        else:
            if self.conductor:
                raise ValueError(f"{part}: give conductor (a metal part) or eps_r (a dielectric part), not both "
                                 f"(got conductor {self.conductor!r} and eps_r {self.eps_r})")
            object.__setattr__(self, "eps_r", number(part, "eps_r", self.eps_r))
            self.dielectric("check")  # its own checks: eps_r >= 1, one loss figure
        _, _, digest = load_mesh(self.file, self.unit)
        if self.sha256 and self.sha256 != digest:
            raise ValueError(f"cad file {self.file}: its content changed since the case was made (sha256 "
                             f"{digest[:12]}, the case has {self.sha256[:12]}); expand the study again")
        object.__setattr__(self, "sha256", digest)

    @property
    def half_thickness_m(self) -> float:
        return 0.0

    def dielectric(self, name: str) -> Dielectric | None:
        if self.eps_r is None:
            return None
        return Dielectric(name, self.eps_r, self.loss_tangent, self.sigma_S_per_m)

    def _mesh(self, anchors, name: str) -> tuple[np.ndarray, np.ndarray]:
        try:
            a = np.asarray(anchors[self.anchor], dtype=float)
        except KeyError:
            raise ValueError(f"{name}: anchor {self.anchor!r} is not available in this scene; available: "
                             f"{sorted(anchors)}") from None
        return placed_vertices(self.file, self.unit, self.rotation_deg, a + np.asarray(self.offset_m))

    def build(self, anchors, name: str) -> list[Polyhedron]:
        v, f = self._mesh(anchors, name)
        metal = self.eps_r is None
        return [Polyhedron(name, self.conductor if metal else f"{name}_dielectric", tuple(map(tuple, v.tolist())),
                           tuple(map(tuple, f.tolist())),
                           priority=PRIORITY_CONDUCTOR if metal else PRIORITY_ENCAPSULATION)]

    def materials(self, name: str) -> tuple[Dielectric, ...]:
        """The inline material of a dielectric part (named after the part), none for a metal one."""
        d = self.dielectric(f"{name}_dielectric")
        return () if d is None else (d,)

    def hints(self, anchors, name: str) -> list[MeshHint]:
        v, f = self._mesh(anchors, name)
        return inner_plane_hints(v, f, name, "cad concentrator")

    def to_dict(self) -> dict:
        d = {"type": self.type, "file": self.file, "sha256": self.sha256, "unit": self.unit, "anchor": self.anchor,
             "offset_m": list(self.offset_m), "rotation_deg": list(self.rotation_deg), "conductor": self.conductor}
        if self.eps_r is not None:
            d["eps_r"] = self.eps_r
            d.update({k: getattr(self, k) for k in ("loss_tangent", "sigma_S_per_m") if getattr(self, k) is not None})
        return d


__all__ = ["CadPart", "CadShell", "CadConcentrator", "UNITS", "MAX_PART_M", "MIN_PART_M", "check_closed", "load_mesh", "rotation_matrix",
           "placed_vertices", "CONCENTRATOR_ANCHORS"]
