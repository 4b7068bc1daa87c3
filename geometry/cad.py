"""Antennas drawn elsewhere: a closed triangle mesh read from an STL file, placed and fed by two points.

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
from .primitives import AXES, PRIORITY_CONDUCTOR, Polyhedron, axis_index
from .specs import choice, vector

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


__all__ = ["CadPart", "UNITS", "MAX_PART_M", "MIN_PART_M", "check_closed", "load_mesh", "rotation_matrix"]
