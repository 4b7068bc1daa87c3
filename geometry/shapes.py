"""Plane-geometry helpers: strips along centrelines, loop frames, moving primitives, sample points.

Pure functions over numpy arrays; nothing here knows about antennas or tissue.
"""
from __future__ import annotations

import dataclasses

import numpy as np

from .meshgeom import mesh_box_clearance
from .primitives import AXES, Box, Cylinder, Polygon, Polyhedron, Port, Primitive, Wire, axis_index

#: for a planar element with normal n: (u axis, v axis). The feed gap sits at the v-minimum side
#: and runs along u; for normals x and y, v is z, so the feed is at the bottom (nearest the body).
PLANE_FRAMES: dict[str, tuple[str, str]] = {"z": ("x", "y"), "x": ("y", "z"), "y": ("x", "z")}


def plane2xyz(uv, normal: str, w: float = 0.0) -> np.ndarray:
    """Local plane coordinates (u, v), shape (n, 2), to 3-D points, shape (n, 3), at offset ``w`` along the normal."""
    uv = np.atleast_2d(np.asarray(uv, dtype=float))
    u_ax, v_ax = PLANE_FRAMES[normal]
    out = np.zeros((len(uv), 3))
    out[:, axis_index(u_ax)] = uv[:, 0]
    out[:, axis_index(v_ax)] = uv[:, 1]
    out[:, axis_index(normal)] = w
    return out


def xyz2polygon_points(xyz, normal: str) -> tuple[tuple[float, float], ...]:
    """3-D points, shape (n, 3), to the 2-D points of a :class:`Polygon` with that normal (its cyclic axis order)."""
    n = axis_index(normal)
    a, b = (n + 1) % 3, (n + 2) % 3
    xyz = np.asarray(xyz, dtype=float)
    return tuple((float(p[a]), float(p[b])) for p in xyz)


def strip_outline(centreline, width: float) -> np.ndarray:
    """Outline of a strip of ``width`` along an open polyline (mitred joins, square ends).

    Parameters
    ----------
    centreline : array_like, shape (n, 2)
    width : float

    Returns
    -------
    ndarray, shape (2 n, 2)
        Left edge forward, then right edge backward: a simple polygon when the polyline's radius of
        curvature and the spacing between neighbouring passes exceed ``width / 2``.
    """
    c = np.asarray(centreline, dtype=float)
    d = np.diff(c, axis=0)
    d /= np.linalg.norm(d, axis=1)[:, None]
    nrm = np.stack([-d[:, 1], d[:, 0]], axis=1)  # left normal of each segment
    offs = np.empty_like(c)
    offs[0], offs[-1] = nrm[0], nrm[-1]
    if len(c) > 2:
        m = nrm[:-1] + nrm[1:]
        m /= np.linalg.norm(m, axis=1)[:, None]
        cos_half = np.sum(m * nrm[1:], axis=1)
        offs[1:-1] = m / cos_half[:, None]
    h = width / 2.0
    return np.concatenate([c + h * offs, (c - h * offs)[::-1]])


def translate(p: Primitive | Port, offset) -> Primitive | Port:
    """The same primitive or port moved by ``offset`` (x, y, z)."""
    o = np.asarray(offset, dtype=float)
    if isinstance(p, (Box, Cylinder, Port)):
        return dataclasses.replace(p, start=tuple(float(v) for v in np.add(p.start, o)),
                                   stop=tuple(float(v) for v in np.add(p.stop, o)))
    if isinstance(p, Wire):
        return dataclasses.replace(p, points=tuple(tuple(float(v) for v in np.add(q, o)) for q in p.points))
    if isinstance(p, Polygon):
        n = axis_index(p.normal)
        a, b = (n + 1) % 3, (n + 2) % 3
        return dataclasses.replace(p, elevation=float(p.elevation + o[n]),
                                   points=tuple((float(u + o[a]), float(v + o[b])) for u, v in p.points))
    if isinstance(p, Polyhedron):
        return dataclasses.replace(p, vertices=tuple(tuple(float(v) for v in q) for q in np.add(p.vertices, o)))
    raise TypeError(f"cannot move {type(p).__name__}")


def rename(p, name: str, material: str | None = None):
    kw = {"name": name}
    if material is not None:
        kw["material"] = material
    return dataclasses.replace(p, **kw)


def polygon_vertices(p: Polygon) -> np.ndarray:
    """3-D vertices of a polygon (both faces if it has a thickness), shape (n, 3)."""
    n = axis_index(p.normal)
    a, b = (n + 1) % 3, (n + 2) % 3
    out = []
    for e in {p.elevation, p.elevation + p.thickness}:
        for u, v in p.points:
            q = [0.0, 0.0, 0.0]
            q[a], q[b], q[n] = u, v, e
            out.append(q)
    return np.asarray(out)


def sample_points(p: Primitive, step: float) -> tuple[np.ndarray, float]:
    """Points along a primitive's centre (line or outline) and the half-thickness around them.

    Returns
    -------
    points : ndarray, shape (n, 3)
    radius : float
        Distance from the sampled points to the primitive's surface (0 for sheets and thin wires).
    """
    if isinstance(p, Wire):
        return _densify(np.asarray(p.points), step), p.radius
    if isinstance(p, Cylinder):
        return _densify(np.asarray([p.start, p.stop]), step), p.radius
    if isinstance(p, Polygon):
        v = polygon_vertices(p)
        return _densify(np.concatenate([v, v[:1]]), step), 0.0
    if isinstance(p, Polyhedron):
        v = np.asarray(p.vertices)
        f = np.asarray(p.faces)
        edges = np.unique(np.sort(np.concatenate([f[:, [0, 1]], f[:, [1, 2]], f[:, [2, 0]]]), axis=1), axis=0)
        return np.concatenate([v] + [_densify(v[e], step)[1:-1] for e in edges]), 0.0
    if isinstance(p, Box):
        lo, hi = p.bounds()
        g = [np.linspace(lo[i], hi[i], max(2, int(np.ceil((hi[i] - lo[i]) / step)) + 1)) for i in range(3)]
        return np.stack(np.meshgrid(*g, indexing="ij"), -1).reshape(-1, 3), 0.0
    raise TypeError(type(p).__name__)


def _densify(pts: np.ndarray, step: float) -> np.ndarray:
    out = [pts[:1]]
    for a, b in zip(pts[:-1], pts[1:]):
        n = max(1, int(np.ceil(np.linalg.norm(b - a) / step)))
        t = np.linspace(0, 1, n + 1)[1:, None]
        out.append(a + t * (b - a))
    return np.concatenate(out)


def distance_to_box(points, lo, hi) -> np.ndarray:
    """Euclidean distance from points, shape (n, 3), to an axis-aligned box (0 inside); shape (n,)."""
    p = np.atleast_2d(np.asarray(points, dtype=float))
    d = np.maximum(np.maximum(np.asarray(lo) - p, p - np.asarray(hi)), 0.0)
    return np.linalg.norm(d, axis=1)


def clearance_to_box(p: Primitive, lo, hi, step: float) -> float:
    """Distance (metres) from a primitive's surface to an axis-aligned box ``[lo, hi]``; <= 0 on contact.

    Exact for a box and for a cylinder along x, y or z: such a cylinder is a segment along its axis
    times a disc across it, the box an interval times a rectangle, so the distance splits into the
    interval gap along the axis and the disc-to-rectangle gap across it (analytic). Other primitives
    use points every ``step`` along their centre line minus their half-thickness (an oblique
    cylinder's flat ends then count as round: an underestimate of at most its radius); a polyhedron
    points every ``step`` on its faces, 0 when it holds the box (:func:`.meshgeom.mesh_box_clearance`).
    """
    lo, hi = np.asarray(lo, dtype=float), np.asarray(hi, dtype=float)
    if isinstance(p, Box):
        plo, phi = (np.asarray(v, dtype=float) for v in p.bounds())
        return float(np.linalg.norm(np.maximum(np.maximum(lo - phi, plo - hi), 0.0)))
    if isinstance(p, Cylinder) and p.along_axis() is not None:
        k = p.along_axis()
        a0, a1 = sorted((p.start[k], p.stop[k]))
        along = max(lo[k] - a1, a0 - hi[k], 0.0)
        across = [i for i in range(3) if i != k]
        c = np.asarray(p.start, dtype=float)[across]
        gap2d = np.maximum(np.maximum(lo[across] - c, c - hi[across]), 0.0)
        d_across = float(np.linalg.norm(gap2d)) - p.radius
        if along == 0.0 and d_across <= 0.0:
            return d_across  # the two overlap
        return float(np.hypot(along, max(d_across, 0.0)))
    if isinstance(p, Polyhedron):  # a cad part: points on its faces, and a box inside it counts as contact
        return mesh_box_clearance(p, lo, hi, step)
    pts, r = sample_points(p, step)
    return float(distance_to_box(pts, lo, hi).min()) - r


def unit(axis: str) -> np.ndarray:
    e = np.zeros(3)
    e[axis_index(axis)] = 1.0
    return e


__all__ = ["AXES", "PLANE_FRAMES", "plane2xyz", "xyz2polygon_points", "strip_outline", "translate", "rename",
           "polygon_vertices", "sample_points", "distance_to_box", "clearance_to_box", "unit"]
