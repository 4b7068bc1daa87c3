"""Which material is at a point: primitives sampled with the priority rule (highest priority wins).

Used by the preview and by tests; the same rule the solver adapter hands to the FDTD engine.
On equal priority the primitive listed later wins.
"""
from __future__ import annotations

import numpy as np

from .model import SceneModel
from .primitives import Box, Cylinder, Polygon, Polyhedron, Primitive, Wire, axis_index


def points_in_polygon(xy, poly) -> np.ndarray:
    """Even-odd rule: which 2-D points (shape (n, 2)) lie inside a polygon (shape (m, 2)); returns (n,) bool."""
    xy = np.atleast_2d(np.asarray(xy, dtype=float))
    P = np.asarray(poly, dtype=float)
    x, y = xy[:, 0:1], xy[:, 1:2]
    x0, y0 = P[:, 0][None, :], P[:, 1][None, :]
    x1, y1 = np.roll(P[:, 0], -1)[None, :], np.roll(P[:, 1], -1)[None, :]
    crosses = (y0 > y) != (y1 > y)
    with np.errstate(divide="ignore", invalid="ignore"):
        xint = x0 + (y - y0) * (x1 - x0) / (y1 - y0)
    return (np.sum(crosses & (x < xint), axis=1) % 2) == 1


#: ray direction for the inside test of a polyhedron: oblique, so that rays from grid points rarely graze
#: an edge or a vertex of faces aligned with the axes
_RAY = np.array([1.0, 0.2371, 0.1289]) / np.linalg.norm([1.0, 0.2371, 0.1289])


def points_in_polyhedron(points, vertices, faces) -> np.ndarray:
    """Even-odd rule along one ray (Moller-Trumbore intersection): which points, shape (n, 3), lie inside a
    closed triangle mesh (vertices shape (k, 3), faces shape (m, 3)); returns (n,) bool."""
    p = np.atleast_2d(np.asarray(points, dtype=float))
    tri = np.asarray(vertices, dtype=float)[np.asarray(faces)]
    v0, e1, e2 = tri[:, 0], tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0]
    h = np.cross(_RAY, e2)
    a = np.einsum("ij,ij->i", e1, h)
    ok = np.abs(a) > 1e-30
    v0, e1, e2, h, a = v0[ok], e1[ok], e2[ok], h[ok], a[ok]
    out = np.zeros(len(p), dtype=bool)
    chunk = max(1, 1_000_000 // max(1, len(a)))
    for k in range(0, len(p), chunk):
        s = p[k:k + chunk, None, :] - v0[None]
        u = np.einsum("nmj,mj->nm", s, h) / a
        q = np.cross(s, e1[None])
        v = (q @ _RAY) / a
        t = np.einsum("nmj,mj->nm", q, e2) / a
        hit = (u >= 0) & (v >= 0) & (u + v <= 1) & (t > 0)
        out[k:k + chunk] = (hit.sum(axis=1) % 2) == 1
    return out


def _segment_distance(p, a, b) -> np.ndarray:
    ab = b - a
    L2 = float(ab @ ab)
    t = np.clip(((p - a) @ ab) / L2, 0.0, 1.0) if L2 > 0 else np.zeros(len(p))
    return np.linalg.norm(p - (a + t[:, None] * ab), axis=1)


def inside(prim: Primitive, points, tol: float = 0.0) -> np.ndarray:
    """Whether points (shape (n, 3)) are inside a primitive; sheets and thin wires count within ``tol``.

    Returns
    -------
    ndarray of bool, shape (n,)
    """
    p = np.atleast_2d(np.asarray(points, dtype=float))
    if isinstance(prim, Box):
        lo, hi = prim.bounds()
        return np.all((p >= np.asarray(lo) - 1e-15) & (p <= np.asarray(hi) + 1e-15), axis=1)
    if isinstance(prim, Cylinder):
        s, e = np.asarray(prim.start), np.asarray(prim.stop)
        a = e - s
        L = np.linalg.norm(a)
        a = a / L
        t = (p - s) @ a
        rho = np.linalg.norm((p - s) - t[:, None] * a, axis=1)
        return (t >= -1e-15) & (t <= L + 1e-15) & (rho <= prim.radius + 1e-15)
    if isinstance(prim, Wire):
        r = max(prim.radius, tol)
        pts = np.asarray(prim.points)
        d = np.min([_segment_distance(p, a, b) for a, b in zip(pts[:-1], pts[1:])], axis=0)
        return d <= r
    if isinstance(prim, Polygon):
        n = axis_index(prim.normal)
        ia, ib = prim.plane_axes()
        w = p[:, n]
        in_slab = (w >= prim.elevation - tol - 1e-15) & (w <= prim.elevation + prim.thickness + tol + 1e-15)
        P = np.asarray(prim.points)
        uv = p[:, [ia, ib]]
        in_slab &= np.all((uv >= P.min(0) - 1e-15) & (uv <= P.max(0) + 1e-15), axis=1)  # bounding-box prefilter
        out = np.zeros(len(p), dtype=bool)
        idx = np.flatnonzero(in_slab)
        chunk = max(1, 2_000_000 // len(P))  # keeps the (points x edges) work arrays small
        for k in range(0, len(idx), chunk):
            sel = idx[k:k + chunk]
            out[sel] = points_in_polygon(uv[sel], P)
        return out
    if isinstance(prim, Polyhedron):
        lo, hi = prim.bounds()
        near = np.all((p >= np.asarray(lo) - 1e-15) & (p <= np.asarray(hi) + 1e-15), axis=1)
        out = np.zeros(len(p), dtype=bool)
        idx = np.flatnonzero(near)
        out[idx] = points_in_polyhedron(p[idx], prim.vertices, prim.faces)
        return out
    raise TypeError(f"unknown primitive {type(prim).__name__}")


def material_index(model: SceneModel, points, tol: float = 0.0) -> np.ndarray:
    """Index into ``model.materials`` of the material at each point, -1 for background air.

    Parameters
    ----------
    model : SceneModel
    points : array_like, shape (n, 3)
    tol : float
        Half-thickness given to zero-thickness sheets and thin wires (e.g. half a pixel).

    Returns
    -------
    ndarray of int, shape (n,)
    """
    p = np.atleast_2d(np.asarray(points, dtype=float))
    names = [m.name for m in model.materials]
    best = np.full(len(p), -np.inf)
    idx = np.full(len(p), -1, dtype=int)
    order = np.argsort(p[:, 0], kind="stable") if len(p) else np.zeros(0, int)
    xs = p[order, 0]
    plo, phi = (p.min(0), p.max(0)) if len(p) else (np.zeros(3), np.zeros(3))
    for prim in model.primitives:
        if isinstance(prim, Box):  # the same test as inside(), on the points in the box's x window only
            lo, hi = (np.asarray(v) for v in prim.bounds())
            if np.any(hi + 1e-15 < plo) or np.any(lo - 1e-15 > phi):
                continue  # many boxes (a label volume's) miss a preview plane altogether
            cand = order[np.searchsorted(xs, lo[0] - 1e-15, "left"):np.searchsorted(xs, hi[0] + 1e-15, "right")]
            q = p[cand]
            sel = cand[np.all((q >= lo - 1e-15) & (q <= hi + 1e-15), axis=1)]
            sel = sel[prim.priority >= best[sel]]
            best[sel] = prim.priority
            idx[sel] = names.index(prim.material)
            continue
        hit = inside(prim, p, tol) & (prim.priority >= best)
        best[hit] = prim.priority
        idx[hit] = names.index(prim.material)
    return idx


def material_at(model: SceneModel, points, tol: float = 0.0) -> list[str]:
    """Material name at each point (``"air"`` for background), length n."""
    names = [m.name for m in model.materials]
    return ["air" if i < 0 else names[i] for i in material_index(model, points, tol)]
