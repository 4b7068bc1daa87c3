"""Point and distance queries on closed triangle meshes (the checks and mesh hints of CAD parts).

Pure numpy over vertices (k, 3) and faces (m, 3) in metres; no file reading (that is :mod:`.cad`).
"""
from __future__ import annotations

import math

import numpy as np

from .model import MeshHint
from .primitives import AXES, Box, Cylinder, Polygon, Polyhedron, Wire, axis_index
from .raster import points_in_polyhedron

#: most lines on inner face planes per axis and part (the planes of largest face area are kept)
MAX_PLANE_HINTS = 24
#: spacing (m) of the points on a part's faces and edges used by the enclosure and clearance checks
CHECK_STEP_M = 0.1e-3
#: the face points of one part are thinned to about this many (coarser spacing for very large parts)
MAX_SURFACE_POINTS = 400_000


def _signed_volume(vertices, faces) -> float:
    tri = np.asarray(vertices, dtype=float)[np.asarray(faces)]
    return float(np.einsum("ij,ij->i", tri[:, 0], np.cross(tri[:, 1], tri[:, 2])).sum()) / 6.0


def shells(vertices, faces) -> list[tuple[np.ndarray, int]]:
    """The closed shells of a mesh, each as (faces (m_k, 3), nesting depth), faces oriented outward of the solid.

    Shells are the connected parts of the surface (faces sharing a vertex). Depth 0 is an outer surface,
    1 a cavity inside one (its faces turned to point into the cavity, away from the material), 2 a solid
    island in a cavity, and so on (a shell's depth is the number of other shells holding its first vertex).
    """
    f = np.asarray(faces)
    v = np.asarray(vertices, dtype=float)
    parent = np.arange(len(v))

    def root(i):
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i
    for a, b, c in f:
        ra, rb, rc = root(a), root(b), root(c)
        parent[rb] = ra
        parent[rc] = ra
    label = np.array([root(i) for i in f[:, 0]])
    parts = [f[label == k] for k in np.unique(label)]
    out = []
    for i, part in enumerate(parts):
        probe = v[part[0, 0]][None]
        depth = sum(int(points_in_polyhedron(probe, v, other)[0]) for j, other in enumerate(parts) if j != i)
        if (_signed_volume(v, part) > 0) != (depth % 2 == 0):
            part = part[:, [0, 2, 1]]
        out.append((part, depth))
    return out


def surface_points(vertices, faces, step: float) -> np.ndarray:
    """Points on every face of a triangle mesh, no two neighbours farther apart than ``step``, shape (n, 3).

    A barycentric grid per triangle (its corners included); ``step`` is widened for a very large part so
    that about :data:`MAX_SURFACE_POINTS` points are made.
    """
    v = np.asarray(vertices, dtype=float)
    tri = v[np.asarray(faces)]
    edge = np.max(np.linalg.norm(tri - np.roll(tri, 1, axis=1), axis=2), axis=1)
    area = 0.5 * np.linalg.norm(np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0]), axis=1)
    step = max(step, math.sqrt(2.0 * float(area.sum()) / MAX_SURFACE_POINTS))
    out = [v]
    for t, e in zip(tri, edge):
        n = int(math.ceil(e / step))
        if n < 2:
            continue
        i, j = np.meshgrid(np.arange(n + 1), np.arange(n + 1), indexing="ij")
        keep = i + j <= n
        a, b = i[keep] / n, j[keep] / n
        out.append(t[0] + a[:, None] * (t[1] - t[0]) + b[:, None] * (t[2] - t[0]))
    return np.concatenate(out)


def face_planes(vertices, faces) -> list[tuple[np.ndarray, np.ndarray]]:
    """Per axis, the planes of the faces perpendicular to it: sorted levels (m) and their face area (m^2).

    Levels closer than 1e-6 of the part's size are one plane.
    """
    v = np.asarray(vertices, dtype=float)
    tri = v[np.asarray(faces)]
    area = 0.5 * np.linalg.norm(np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0]), axis=1)
    tol = 1e-9 * max(float(np.ptp(v, axis=0).max()), 1e-12)
    out = []
    for i in range(3):
        c = tri[:, :, i]
        flat = np.ptp(c, axis=1) <= tol
        level = c[flat].mean(axis=1)
        key = np.round(level / (1e3 * tol)).astype(np.int64)
        uniq, inv = np.unique(key, return_inverse=True)
        out.append((np.array([level[inv == k].mean() for k in range(len(uniq))]),
                    np.bincount(inv, weights=area[flat], minlength=len(uniq))))
    return out


def inner_plane_hints(vertices, faces, name: str, what: str) -> list[MeshHint]:
    """Fixed lines on the planes of faces perpendicular to an axis that lie strictly inside the bounding box.

    Per axis at most :data:`MAX_PLANE_HINTS` planes, those with the largest face area first.
    """
    v = np.asarray(vertices, dtype=float)
    lo, hi = v.min(0), v.max(0)
    tol = 1e-6 * max(float(np.ptp(v, axis=0).max()), 1e-12)
    hints = []
    for i, (a, (levels, weight)) in enumerate(zip(AXES, face_planes(v, faces))):
        inner = (levels > lo[i] + tol) & (levels < hi[i] - tol)
        levels, weight = levels[inner], weight[inner]
        for x in sorted(levels[np.argsort(-weight)[:MAX_PLANE_HINTS]]):
            hints.append(MeshHint(a, float(x), float(x), 0.0, f"{name} {what} inner face plane"))
    return hints


def encloses(vertices, faces, points) -> np.ndarray:
    """Which points (n, 3) lie inside the closed mesh (surface included up to 1e-9 of the part's size); (n,) bool."""
    v = np.asarray(vertices, dtype=float)
    p = np.atleast_2d(np.asarray(points, dtype=float))
    lo, hi = v.min(0), v.max(0)
    tol = 1e-9 * float(np.ptp(v, axis=0).max())
    out = np.zeros(len(p), dtype=bool)
    near = np.flatnonzero(np.all((p >= lo - tol) & (p <= hi + tol), axis=1))
    if len(near):
        out[near] = points_in_polyhedron(p[near], v, faces)
        rest = near[~out[near]]
        if len(rest):  # points on the surface (a conductor's face lying on the shell's inner wall) count as inside
            out[rest] = mesh_distance(p[rest], v, faces) <= tol
    return out


def mesh_distance(points, vertices, faces) -> np.ndarray:
    """Unsigned distance from points (n, 3) to the surface of a triangle mesh, shape (n,).

    The closest point of each triangle by the region test of Ericson, Real-Time Collision Detection
    (2005), section 5.1.5; the minimum over the triangles.
    """
    p = np.atleast_2d(np.asarray(points, dtype=float))
    tri = np.asarray(vertices, dtype=float)[np.asarray(faces)]
    out = np.full(len(p), np.inf)
    chunk = max(1, 400_000 // len(tri))
    A, B, C = tri[:, 0], tri[:, 1], tri[:, 2]
    for k in range(0, len(p), chunk):
        q = p[k:k + chunk, None, :]
        d = [np.linalg.norm(q - A, axis=2), np.linalg.norm(q - B, axis=2), np.linalg.norm(q - C, axis=2)]
        for s, e in ((A, B), (B, C), (C, A)):
            se = e - s
            t = np.clip(np.einsum("nmj,mj->nm", q - s, se) / np.einsum("mj,mj->m", se, se), 0.0, 1.0)
            d.append(np.linalg.norm(q - (s + t[..., None] * se), axis=2))
        n = np.cross(B - A, C - A)
        n = n / np.linalg.norm(n, axis=1)[:, None]
        h = np.einsum("nmj,mj->nm", q - A, n)
        f = q - h[..., None] * n  # foot on the plane: inside the triangle when all three edge tests agree
        inside = np.ones(h.shape, dtype=bool)
        for s, e in ((A, B), (B, C), (C, A)):
            inside &= np.einsum("nmj,mj->nm", np.cross(e - s, f - s), n) >= 0
        d.append(np.where(inside, np.abs(h), np.inf))
        out[k:k + chunk] = np.min(np.min(np.stack(d), axis=0), axis=1)
    return out


def mesh_box_clearance(prim: Polyhedron, lo, hi, step: float) -> float:
    """Distance (m) from a polyhedron to the box ``[lo, hi]``; 0 when they overlap or one holds the other.

    Face points every ``step`` (see :func:`surface_points`), the box's corners and centre tested inside
    the mesh; an underestimate of at most ``step`` / sqrt(3).
    """
    lo, hi = np.asarray(lo, dtype=float), np.asarray(hi, dtype=float)
    v, f = np.asarray(prim.vertices), np.asarray(prim.faces)
    corners = np.array([[(hi if k >> i & 1 else lo)[i] for i in range(3)] for k in range(8)] + [(lo + hi) / 2])
    if points_in_polyhedron(corners, v, f).any():
        return 0.0
    pts = surface_points(v, f, step)
    d = np.linalg.norm(np.maximum(np.maximum(lo - pts, pts - hi), 0.0), axis=1)
    return float(d.min())


def line_points(a, b, step: float = CHECK_STEP_M) -> np.ndarray:
    n = max(1, int(math.ceil(float(np.linalg.norm(np.subtract(b, a))) / step)))
    t = np.linspace(0.0, 1.0, n + 1)[:, None]
    return np.asarray(a, dtype=float) + t * (np.asarray(b, dtype=float) - np.asarray(a, dtype=float))


def primitive_points(p) -> np.ndarray:
    """Corners and edge points of a box, polygon or wire; a cylinder's rims (for the enclosure check)."""
    if isinstance(p, Box):
        lo, hi = p.bounds()
        c = np.array([[(hi if k >> i & 1 else lo)[i] for i in range(3)] for k in range(8)])
        return np.concatenate([line_points(c[a], c[b]) for a in range(8) for b in range(8)
                               if a < b and bin(a ^ b).count("1") == 1])
    if isinstance(p, Cylinder):
        s, e = np.asarray(p.start, dtype=float), np.asarray(p.stop, dtype=float)
        ax = (e - s) / np.linalg.norm(e - s)
        u = np.cross(ax, [1.0, 0, 0] if abs(ax[0]) < 0.9 else [0, 1.0, 0])
        u /= np.linalg.norm(u)
        w = np.cross(ax, u)
        t = np.linspace(0, 2 * np.pi, 64, endpoint=False)
        ring = p.radius * (np.cos(t)[:, None] * u + np.sin(t)[:, None] * w)
        return np.concatenate([s + ring, e + ring, line_points(s, e)])
    if isinstance(p, Wire):
        q = np.asarray(p.points, dtype=float)
        return np.concatenate([line_points(a, b) for a, b in zip(q[:-1], q[1:])])
    if isinstance(p, Polygon):
        n = axis_index(p.normal)
        a, b = (n + 1) % 3, (n + 2) % 3
        out = []
        for h in {p.elevation, p.elevation + p.thickness}:
            q = np.zeros((len(p.points), 3))
            q[:, a], q[:, b], q[:, n] = np.asarray(p.points)[:, 0], np.asarray(p.points)[:, 1], h
            out += [line_points(x, y) for x, y in zip(q, np.roll(q, -1, axis=0))]
        return np.concatenate(out)
    raise TypeError(type(p).__name__)


def outline_points(prims) -> np.ndarray:
    """:func:`primitive_points` of several primitives, a polyhedron by its vertices and edge points."""
    pts = []
    for p in prims:
        if isinstance(p, Polyhedron):
            q = np.asarray(p.vertices, dtype=float)
            f = np.asarray(p.faces)
            e = np.unique(np.sort(np.concatenate([f[:, [0, 1]], f[:, [1, 2]], f[:, [2, 0]]]), axis=1), axis=0)
            pts += [q] + [line_points(q[a], q[b]) for a, b in e]
        else:
            pts.append(primitive_points(p))
    return np.concatenate(pts)


__all__ = ["shells", "surface_points", "face_planes", "inner_plane_hints", "encloses", "mesh_distance", "mesh_box_clearance",
           "line_points", "primitive_points", "outline_points", "CHECK_STEP_M", "MAX_PLANE_HINTS"]
