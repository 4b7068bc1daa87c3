"""Brute-force references for cube-averaged SAR (small grids only): the definitions applied literally.

:func:`exact_cube_average_bruteforce` is the voxel-grid averaging procedure of IEC/IEEE 62704-1:2017 as
described in :mod:`bodysweep.workflow.post.sar_average`; :func:`flush_cube_bruteforce` is the largest
average over valid cubes with one face on a flat tissue surface, over a fine lattice of positions along
it (the definition of :mod:`bodysweep.workflow.post.sar_flush`).

Both loop over voxels or positions; a box's content is the direct sum over all cells of density times the
exact overlap volume (products of 1-D overlaps); a cube side is found by plain bisection (100 halvings).
No summed tables, no vectorised root finding, and the mesh-line tolerance of cube faces is written out
again here (scalar), so the fast implementations are checked against code that shares only the input
checks and the result type with them.
"""
from __future__ import annotations

import numpy as np

from bodysweep.workflow.post.sar import cell_centres, cell_volumes
from bodysweep.workflow.post.sar_average import (BACKGROUND, ENCLOSED, FACE, FACE_VOLUME_WINDOW, VALID,
                                                 AveragedSAR, peak_voxel)
from bodysweep.workflow.post.sar_cubes import SNAP_FRACTION, check_inputs

__all__ = ["exact_cube_average_bruteforce", "flush_cube_bruteforce"]

FACE_DIRS = [(0, -1), (0, 1), (1, -1), (1, 1), (2, -1), (2, 1)]  # (axis, side of the point the cube lies on)


def _face_box(ax, sgn):
    """Offsets of a unit cube whose face centre is the origin, the cube on the ``sgn`` side along ``ax``."""
    lo, hi = np.full(3, -0.5), np.full(3, 0.5)
    if sgn < 0:
        lo[ax], hi[ax] = -1.0, 0.0
    else:
        lo[ax], hi[ax] = 0.0, 1.0
    return lo, hi


def _snap(e, X):
    """X moved onto the nearest mesh line of ``e`` when closer than SNAP_FRACTION of the narrower cell beside it."""
    k = int(np.argmin(np.abs(e - X)))
    widths = []
    if k > 0:
        widths.append(e[k] - e[k - 1])
    if k < e.size - 1:
        widths.append(e[k + 1] - e[k])
    return float(e[k]) if abs(X - e[k]) <= SNAP_FRACTION * min(widths) else float(X)


def _result(avg, status, edges, mass_kg, valid, side, cube_of):
    idx = peak_voxel(avg)
    if idx is None:
        return AveragedSAR(mass_kg, avg, valid, status, side, float("nan"), (), (), BACKGROUND)
    cc = cell_centres(*edges)
    centre, L = cube_of[idx]
    return AveragedSAR(mass_kg, avg, valid, status, side, float(avg[idx]), idx,
                       tuple(float(cc[a][idx[a]]) for a in range(3)), int(status[idx]),
                       tuple(float(c) for c in centre), float(L))


def _overlap(e, lo, hi):
    """Overlap length of each cell [e_i, e_i+1] with [lo, hi], shape (n,)."""
    return np.clip(np.minimum(e[1:], hi) - np.maximum(e[:-1], lo), 0.0, None)


def exact_cube_average_bruteforce(
    sar,
    rho,
    x,
    y,
    z,
    mass_kg,
    max_air_fraction: float = 0.1,
    *,
    require_faces_in_tissue: bool = True,
    centres=None,
) -> AveragedSAR:
    """Reference implementation of :func:`average_sar` by direct search (small grids only).

    Loops over voxels; a box's content is the direct sum over all cells of density times the
    exact overlap volume (products of 1-D overlaps); the cube side is found by plain bisection
    (100 halvings). No summed tables, no vectorised root finding. Same procedure and result type.

    Parameters
    ----------
    sar, rho, x, y, z, mass_kg, max_air_fraction, require_faces_in_tissue
        As in :func:`average_sar`.
    centres : iterable of (i, j, k), optional
        Only evaluate step 1 (centred cubes) for these voxels and skip the other steps; the other
        voxels get NaN. For spot checks on large grids.

    Returns
    -------
    AveragedSAR
    """
    sar, rho, edges = check_inputs(sar, rho, x, y, z, mass_kg, max_air_fraction, who="exact_cube_average_bruteforce")
    ex, ey, ez = edges
    shape = rho.shape
    dv = cell_volumes(*edges)
    cc = cell_centres(*edges)
    mass_cell = rho
    power_cell = sar * rho
    tissue = rho > 0
    L_max = 2.02 * max(e[-1] - e[0] for e in edges)

    def box(lo, hi, q):
        ox = _overlap(ex, lo[0], hi[0])
        oy = _overlap(ey, lo[1], hi[1])
        oz = _overlap(ez, lo[2], hi[2])
        return float(np.einsum("i,j,k,ijk->", ox, oy, oz, q))

    def side_for(c, ol, oh):
        if box(c + L_max * ol, c + L_max * oh, mass_cell) < mass_kg:
            return np.nan
        a, b = 0.0, L_max
        for _ in range(100):
            mid = 0.5 * (a + b)
            if box(c + mid * ol, c + mid * oh, mass_cell) < mass_kg:
                a = mid
            else:
                b = mid
        return b


    def faces_ok(lo, hi):
        lo = np.array([_snap(edges[a], lo[a]) for a in range(3)])  # a face near a mesh line lies on it
        hi = np.array([_snap(edges[a], hi[a]) for a in range(3)])
        for a in range(3):
            e = edges[a]
            for which, face in (("lo", lo[a]), ("hi", hi[a])):
                if face < e[0] or face > e[-1]:
                    return False
                # the layer of cells just inside the face
                if which == "lo":
                    i = int(np.searchsorted(e, face, side="right") - 1)
                else:
                    i = int(np.searchsorted(e, face, side="left") - 1)
                i = min(max(i, 0), shape[a] - 1)
                sel = []
                for b in range(3):
                    if b == a:
                        sel.append(np.array([i]))
                    else:
                        sel.append(np.nonzero(_overlap(edges[b], lo[b], hi[b]) > 0)[0])
                if not tissue[np.ix_(*sel)].any():
                    return False
        return True

    avg = np.full(shape, np.nan)
    side = np.full(shape, np.nan)
    status = np.zeros(shape, dtype=np.int8)
    valid = np.zeros(shape, dtype=bool)
    half = np.full(3, 0.5)
    cubes = []  # (lo, hi, average) of valid cubes
    cube_of = {}  # voxel -> (centre, side) of the cube whose average it holds
    todo = [tuple(v) for v in np.argwhere(tissue)] if centres is None else [tuple(v) for v in centres]
    for v in todo:
        if not tissue[v]:
            continue
        c = np.array([cc[a][v[a]] for a in range(3)])
        L = side_for(c, -half, half)
        if not np.isfinite(L):
            continue
        lo, hi = c - L / 2, c + L / 2
        m = box(lo, hi, mass_cell)
        p = box(lo, hi, power_cell)
        tv = box(lo, hi, tissue.astype(float))
        side[v] = L
        ok = (1 - tv / L**3) <= max_air_fraction + 1e-12
        if ok and require_faces_in_tissue:
            ok = faces_ok(lo, hi)
        if ok:
            avg[v] = p / m
            valid[v] = True
            status[v] = VALID
            cubes.append((lo, hi, p / m))
            cube_of[v] = ((lo + hi) / 2, L)
    if centres is not None:
        return _result(avg, status, edges, mass_kg, valid, side, cube_of)

    for lo, hi, val in cubes:
        inside = [(e[:-1] >= _snap(e, lo[a])) & (e[1:] <= _snap(e, hi[a])) for a, e in enumerate(edges)]
        enc = inside[0][:, None, None] & inside[1][None, :, None] & inside[2][None, None, :]
        enc &= tissue & ~valid
        upd = enc & ~(avg >= val)
        avg[upd] = val
        for u in np.argwhere(upd):
            cube_of[tuple(u)] = ((lo + hi) / 2, hi[0] - lo[0])
        status[enc] = ENCLOSED

    for v in [tuple(u) for u in np.argwhere(tissue & (status == BACKGROUND))]:
        c = np.array([cc[a][v[a]] for a in range(3)])
        res = []
        for ax, sgn in FACE_DIRS:
            ol, oh = _face_box(ax, sgn)
            L = side_for(c, ol, oh)
            if np.isfinite(L):
                lo, hi = c + L * ol, c + L * oh
                res.append((L**3, box(lo, hi, power_cell) / box(lo, hi, mass_cell), L, (lo + hi) / 2))
        status[v] = FACE
        side[v] = np.nan
        if res:
            vmin = min(r[0] for r in res)
            keep = [r for r in res if r[0] <= (1 + FACE_VOLUME_WINDOW) * vmin * (1 + 1e-12)]
            best = max(keep, key=lambda r: r[1])
            avg[v] = best[1]
            side[v] = best[2]
            cube_of[v] = (best[3], best[2])
    return _result(avg, status, edges, mass_kg, valid, side, cube_of)


def _box(edges, lo, hi, q):
    ox, oy, oz = (_overlap(edges[a], lo[a], hi[a]) for a in range(3))
    return float(np.einsum("i,j,k,ijk->", ox, oy, oz, q))


def _faces_ok(edges, tissue, lo, hi):
    """Every face of the box has tissue in the layer of cells just inside it (faces near mesh lines snapped)."""
    lo = np.array([_snap(edges[a], lo[a]) for a in range(3)])
    hi = np.array([_snap(edges[a], hi[a]) for a in range(3)])
    for a in range(3):
        e = edges[a]
        for face, i in ((lo[a], np.searchsorted(e, lo[a], side="right") - 1),
                        (hi[a], np.searchsorted(e, hi[a], side="left") - 1)):
            if face < e[0] or face > e[-1]:
                return False
            i = min(max(int(i), 0), tissue.shape[a] - 1)
            sel = [np.array([i]) if b == a else np.nonzero(_overlap(edges[b], lo[b], hi[b]) > 0)[0] for b in range(3)]
            if not tissue[np.ix_(*sel)].any():
                return False
    return True


def flush_cube_bruteforce(sar, rho, x, y, z, mass_kg, face, surface_m, u_range_m, v_range_m, step_m,
                          max_air_fraction=0.1):
    """Largest average over valid cubes with one face on a flat surface, over a lattice of positions.

    Parameters
    ----------
    sar, rho, x, y, z, mass_kg, max_air_fraction
        As in :func:`bodysweep.workflow.post.sar_flush.flush_cube_peak`.
    face : str
        The surface's outward normal, ``"+z"``, ``"-x"``, ...: the cube lies on the other side of the plane.
    surface_m : float
        Coordinate of the surface plane along the face's axis (a mesh line).
    u_range_m, v_range_m : (float, float)
        Ranges of the face centre along the two other axes (in x, y, z order).
    step_m : float
        Lattice step of the face centre.

    Returns
    -------
    tuple
        ``(average W/kg, cube centre (3,), side m)`` of the best valid cube; ``(nan, None, nan)`` if none.
    """
    sar, rho, edges = check_inputs(sar, rho, x, y, z, mass_kg, max_air_fraction, who="flush_cube_bruteforce")
    ax = "xyz".index(face[1])
    sgn = -1 if face[0] == "+" else 1
    ua, va = [a for a in range(3) if a != ax]
    tissue = rho > 0
    tissue_f = tissue.astype(float)
    power = sar * rho
    ol, oh = _face_box(ax, sgn)
    L_max = 2.02 * max(e[-1] - e[0] for e in edges)
    e_ax = edges[ax]
    k = int(np.argmin(np.abs(e_ax - surface_m)))
    inside_cell, outside_cell = (k - 1, k) if sgn < 0 else (k, k - 1)
    best = (float("nan"), None, float("nan"))
    for u in np.arange(u_range_m[0], u_range_m[1] + 0.5 * step_m, step_m):
        for v in np.arange(v_range_m[0], v_range_m[1] + 0.5 * step_m, step_m):
            c = np.empty(3)
            c[ax], c[ua], c[va] = e_ax[k], u, v
            iu = int(np.searchsorted(edges[ua], u, side="right") - 1)
            iv = int(np.searchsorted(edges[va], v, side="right") - 1)
            if not (0 <= iu < tissue.shape[ua] and 0 <= iv < tissue.shape[va]):
                continue
            cin, cout = [0, 0, 0], [0, 0, 0]
            cin[ax], cin[ua], cin[va] = inside_cell, iu, iv
            cout[ax], cout[ua], cout[va] = outside_cell, iu, iv
            if not (tissue[tuple(cin)] and not tissue[tuple(cout)]):
                continue  # not over the surface
            if _box(edges, c + L_max * ol, c + L_max * oh, rho) < mass_kg:
                continue
            a, b = 0.0, L_max
            for _ in range(100):
                mid = 0.5 * (a + b)
                if _box(edges, c + mid * ol, c + mid * oh, rho) < mass_kg:
                    a = mid
                else:
                    b = mid
            lo, hi = c + b * ol, c + b * oh
            air = 1.0 - _box(edges, lo, hi, tissue_f) / b**3
            if air > max_air_fraction + 1e-12 or not _faces_ok(edges, tissue, lo, hi):
                continue
            val = _box(edges, lo, hi, power) / _box(edges, lo, hi, rho)
            if not val <= best[0]:
                best = (val, (lo + hi) / 2, b)
    return best
