"""Half-domain solves of mirror-symmetric scenes: an electric wall on the plane ``<axis> = 0``.

Physics (image theory, Balanis, Advanced Engineering Electromagnetics, 2nd ed., §7.4; the symmetry
walls of FDTD are common practice): a structure that is its own mirror image about the plane
``a = 0`` and is driven by currents along ``a`` that are even about it (a dipole along ``a``
centred on the plane, fed in its middle) has a field whose tangential E on the plane vanishes. The
plane can then be replaced by a perfect electric conductor and only ``a >= 0`` solved.

Why an electric wall across the feed, not a magnetic wall along the dipole: openEMS (0.0.35) puts
its PMC on the first *dual* plane, half a cell inside the domain (it zeroes the tangential H of the
first cell), and E edges on the boundary plane get no curl update. A thin wire or a port lying in
a PMC face is therefore dead (measured: zero voltage and current; see
``benchmarks/mirror_symmetry.py``). Its PEC lies on the boundary mesh line itself, as the image of
an even feed needs.

The cut port: the half structure holds half of each feed gap (``0 ... g/2``), the same current and
half the voltage of the full structure, so its lumped port has ``Z0 / 2``; the full structure's
``V = 2 V_half``, ``I = I_half`` then give the same S-parameters with ``Z0``, and its accepted power
is twice the half's. The field of ``a < 0`` is the mirror image of the solved half (tangential E
odd, normal E even), so the SAR volume is mirrored onto the full grid before averaging (cubes
straddle the plane).

Measured on the tiny test study (``benchmarks/mirror_symmetry.py``): 0.51x the cells, 0.48x the engine
time per run, S-parameters within 0.015 dB and peak 1 g / 10 g SAR within 1 % of the full run. With
the first-order Mur boundary the half run's last energy decays more slowly than the full run's
(-47 dB after 33 000 steps against -53 dB after 15 000), so a strict end criterion costs steps there;
with a PML both decay alike.
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np

from bodysweep.geometry.model import SceneModel
from bodysweep.geometry.primitives import AXES, Box, Cylinder, Polygon, Polyhedron, Port, Wire

__all__ = ["check_symmetric", "half_port", "half_boundaries", "mirror_fields", "mirror_primitive"]

#: coordinates closer than this (metres) count as equal when comparing a primitive with its image
TOL_M = 1e-9


def _flip_point(p, i: int):
    q = list(map(float, p))
    q[i] = -q[i]
    return tuple(q)


def mirror_primitive(prim, axis: str):
    """The image of a primitive in the plane ``axis = 0`` (same kind, material and priority)."""
    i = AXES.index(axis)
    if isinstance(prim, (Box, Cylinder)):
        a, b = _flip_point(prim.start, i), _flip_point(prim.stop, i)
        if isinstance(prim, Box):
            lo = tuple(min(u, v) for u, v in zip(a, b))
            hi = tuple(max(u, v) for u, v in zip(a, b))
            return replace(prim, start=lo, stop=hi)
        return replace(prim, start=a, stop=b)
    if isinstance(prim, Wire):
        return replace(prim, points=tuple(_flip_point(p, i) for p in prim.points))
    if isinstance(prim, Polygon):
        n = AXES.index(prim.normal)
        if n == i:
            return replace(prim, elevation=-float(prim.elevation) - float(prim.thickness))
        ax0, ax1 = prim.plane_axes()
        k = 0 if ax0 == i else 1
        pts = [list(map(float, p)) for p in prim.points]
        for p in pts:
            p[k] = -p[k]
        return replace(prim, points=tuple(tuple(p) for p in pts))
    if isinstance(prim, Polyhedron):  # a reflection turns the faces inside out: reverse each one's order
        return replace(prim, vertices=tuple(_flip_point(p, i) for p in prim.vertices),
                       faces=tuple((a, c, b) for a, b, c in prim.faces))
    raise ValueError(f"primitive {getattr(prim, 'name', prim)!r}: unsupported kind {type(prim).__name__}")


def _signature(prim) -> tuple:
    """What must coincide between a primitive and an image: kind, material, priority, geometry."""
    if isinstance(prim, Box):
        lo, hi = prim.bounds()
        geo = ("box", tuple(lo), tuple(hi))
    elif isinstance(prim, Cylinder):
        ends = sorted([tuple(prim.start), tuple(prim.stop)])
        geo = ("cylinder", ends[0], ends[1], float(prim.radius))
    elif isinstance(prim, Wire):
        pts = [tuple(p) for p in prim.points]
        geo = ("wire", tuple(min(pts, pts[::-1])), float(prim.radius))
    elif isinstance(prim, Polyhedron):
        # the same corner points, surface area and volume: a triangulation may differ between a part and
        # its image (a face's diagonal flips) while the solid is the same, so triangles are not compared
        v = np.asarray(prim.vertices, dtype=float)
        tri = v[np.asarray(prim.faces)]
        area = 0.5 * np.linalg.norm(np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0]), axis=1).sum()
        vol = abs(np.einsum("ij,ij->i", tri[:, 0], np.cross(tri[:, 1], tri[:, 2])).sum()) / 6.0
        geo = ("polyhedron", tuple(sorted(map(tuple, v.tolist()))), float(np.sqrt(area)), float(np.cbrt(vol)))  # lengths
    else:
        pts = [tuple(p) for p in prim.points]
        geo = ("polygon", prim.normal, float(prim.elevation), float(prim.thickness), tuple(sorted(pts)))
    return prim.material, int(prim.priority), geo


def _same(sa, sb) -> bool:
    if sa[0] != sb[0] or sa[1] != sb[1] or sa[2][0] != sb[2][0]:
        return False

    def flat(v):
        if isinstance(v, (tuple, list)):
            out = []
            for x in v:
                out += flat(x)
            return out
        return [v]

    a, b = flat(sa[2][1:]), flat(sb[2][1:])
    if len(a) != len(b):
        return False
    for x, y in zip(a, b):
        if isinstance(x, str) or isinstance(y, str):
            if x != y:
                return False
        elif abs(float(x) - float(y)) > TOL_M:
            return False
    return True


def check_symmetric(model: SceneModel, axis: str) -> None:
    """Refuse a scene that cannot be solved on the half ``axis >= 0`` with an electric wall at 0.

    Every primitive mirrored in the plane ``axis = 0`` must coincide with a primitive of the same
    material and priority, and every port must point along ``axis`` with its gap centred on the plane.

    Raises
    ------
    ValueError
        Naming the first primitive or port that breaks the symmetry and what was expected.
    """
    if axis not in AXES:
        raise ValueError(f"mirror_plane: got {axis!r}; allowed one of {AXES}")
    i = AXES.index(axis)
    sigs = [_signature(p) for p in model.primitives]
    for prim in model.primitives:
        image = _signature(mirror_primitive(prim, axis))
        if not any(_same(image, s) for s in sigs):
            raise ValueError(f"mirror_plane {axis}: the scene is not symmetric about {axis} = 0: the mirror "
                             f"image of {prim.name!r} ({prim.material}) matches no primitive of the same "
                             "material and priority; solve the full domain (mirror_plane: null)")
    for port in model.ports:
        if port.axis != axis:
            raise ValueError(f"mirror_plane {axis}: port {port.number} ({port.name!r}) points along {port.axis}; "
                             f"an electric wall at {axis} = 0 needs every port along {axis}, with its feed gap "
                             "centred on the plane")
        if abs(port.start[i] + port.stop[i]) > TOL_M:
            raise ValueError(f"mirror_plane {axis}: the feed gap of port {port.number} ({port.name!r}) runs from "
                             f"{port.start[i]*1e3:g} to {port.stop[i]*1e3:g} mm along {axis}; it must be centred "
                             f"on {axis} = 0")


def half_port(port: Port, axis: str) -> Port:
    """The part of a port on ``axis >= 0`` with half its impedance (half the gap, same current)."""
    i = AXES.index(axis)
    a, b = list(port.start), list(port.stop)
    a[i], b[i] = max(float(a[i]), 0.0), max(float(b[i]), 0.0)
    if a[i] == b[i]:
        raise ValueError(f"port {port.number}: its gap has no part on {axis} >= 0")
    return replace(port, start=tuple(a), stop=tuple(b), impedance_ohm=0.5 * float(port.impedance_ohm))


def half_boundaries(names: list[str], axis: str) -> list[str]:
    """openEMS boundary names with the lower face of ``axis`` replaced by an electric wall."""
    out = list(names)
    out[2 * AXES.index(axis)] = "PEC"
    return out


def mirror_fields(arrays: dict, axis: str) -> dict:
    """Unfold the arrays of a half-domain raw SAR dump onto the full grid.

    Parameters
    ----------
    arrays : dict
        As written to ``fields_raw.h5`` (see :mod:`.run`): ``E_V_per_m`` (3, nx, ny, nz),
        ``sigma_S_per_m``, ``density_kg_m3``, ``volume_m3`` (nx, ny, nz), centres ``x_m`` ...,
        edges ``x_edges_m`` ...; the first edge along ``axis`` must be 0 (the wall).

    Returns
    -------
    dict
        The same keys on the mirrored grid (twice the cells along ``axis``); E is the image field:
        the components tangential to the wall change sign, the normal one keeps it.
    """
    i = AXES.index(axis)
    e = np.asarray(arrays[f"{axis}_edges_m"], float)
    if abs(e[0]) > TOL_M:
        raise ValueError(f"mirror: the first {axis} edge of the dump is {e[0]} m, not the wall at 0")
    out = dict(arrays)
    out[f"{axis}_edges_m"] = np.r_[-e[:0:-1], 0.0, e[1:]]
    c = np.asarray(arrays[f"{axis}_m"], float)
    out[f"{axis}_m"] = np.r_[-c[::-1], c]
    for k in ("sigma_S_per_m", "density_kg_m3", "volume_m3"):
        v = np.asarray(arrays[k])
        out[k] = np.concatenate([np.flip(v, axis=i), v], axis=i)
    E = np.asarray(arrays["E_V_per_m"])
    image = np.flip(E, axis=i + 1).copy()
    for comp in range(3):
        if comp != i:
            image[comp] *= -1
    out["E_V_per_m"] = np.concatenate([image, E], axis=i + 1)
    return out
