"""The largest cube-averaged SAR over cubes flush with a tissue surface, at any position along it.

Why
---
The voxel-grid procedure (:mod:`.sar_average`) places every averaging cube where the grid puts it:
centred on a voxel centre, or with a face centred on a voxel centre. Next to a surface the cube that
holds the most absorbed power usually lies with one face on the surface, but a cube centred on a voxel
is flush with it only when its half side happens to equal the voxel's depth, and a face-centred cube of
a surface voxel starts half a cell below the surface. On the coarse meshes of a parameter study the peak
of the procedure then reads a few percent low, and by how much depends on where the mesh lines fall.

What is computed
----------------
A *flush cube* is a cube of the target mass with one face on a tissue surface: on a mesh plane between a
tissue cell and a background cell (air, metal; the outer faces of the grid do not count), extending into
the tissue, with the centre of that face over the tissue. It must be a valid averaging cube by the same
rules as the procedure's centred cubes (background at most ``max_air_fraction`` of its volume, every face
touching tissue), only its position differs: the face centre moves continuously along the surface
plane. :func:`flush_cube_peak` returns the largest average over such cubes.

How
---
1. Every surface face of the grid (each direction +-x, +-y, +-z) gives one start: the flush cube whose
   face centre is the face centre of the cell, all evaluated at once (cube sides by
   :func:`.sar_cubes.solve_side`, contents from the summed tables).
2. The best ``starts`` of them are refined by a compass search over the two in-plane coordinates: the
   eight neighbours at steps ``(+-h_u, +-h_v)`` are evaluated together for all starts; a start moves to
   its best neighbour when that is higher, otherwise its steps are halved, until they are below
   ``xtol_fraction`` of the starting cell's width. The average is continuous in the position (cell
   contents enter by overlap volume), so the search ends on a local maximum to well within 1e-3.

The reference is the direct search of
:func:`bodysweep.workflow.reference.sar_bruteforce.flush_cube_bruteforce` (a fine lattice of positions,
each cube's side by bisection over direct overlap sums).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .sar import cell_centres
from .sar_cubes import CHUNK, CubeTables, check_inputs, face_offsets, faces_touch_tissue, solve_side

__all__ = ["FlushCube", "flush_cube_peak", "reported_peak"]


@dataclass(frozen=True)
class FlushCube:
    """The best cube flush with a tissue surface.

    Attributes
    ----------
    mass_kg : float
        Target mass.
    peak : float
        Its average SAR (W/kg); NaN when no valid flush cube exists.
    cube_centre_m : tuple of float
        Centre of the cube (m); empty without a cube.
    side_m : float
        Its side (m).
    face : str
        The cube face lying on the surface, as the surface's outward normal: ``"+z"`` for a cube below a
        surface facing +z (the body surface of the project's coordinates), ``"-x"``, ...; empty without a cube.
    surface_m : float
        Coordinate of the surface plane along the face's axis (m).
    voxel_index : tuple of int
        The tissue voxel under the centre of the flush face.
    voxel_centre_m : tuple of float
        Its centre (m).
    air_fraction : float
        Background volume fraction of the cube.
    n_surface_faces : int
        Surface faces of the grid (starting positions evaluated).
    converged : bool
        Whether the position search ended on its step tolerance (False: it hit ``max_steps``; the value is
        then still the average of a valid flush cube, but maybe not the largest one).
    """

    mass_kg: float
    peak: float
    cube_centre_m: tuple = ()
    side_m: float = float("nan")
    face: str = ""
    surface_m: float = float("nan")
    voxel_index: tuple = ()
    voxel_centre_m: tuple = ()
    air_fraction: float = float("nan")
    n_surface_faces: int = 0
    converged: bool = True


def _surface_faces(tissue):
    """Surface faces: list of (axis, sgn, tissue-cell indices (k, 3)); the cube lies on the ``sgn`` side of the plane.

    sgn = -1: the plane is the upper face (along ``axis``) of a tissue cell whose upper neighbour is background;
    sgn = +1: the lower face of a tissue cell whose lower neighbour is background.
    """
    out = []
    for ax in range(3):
        t = np.moveaxis(tissue, ax, 0)
        up = t[:-1] & ~t[1:]  # cell i tissue, i+1 background: cube below the plane e[i+1]
        down = ~t[:-1] & t[1:]  # cell i background, i+1 tissue: cube above the plane e[i+1]
        for sgn, mask, shift in ((-1, up, 0), (1, down, 1)):
            idx = np.argwhere(mask)
            idx[:, 0] += shift  # the tissue cell
            # back to (x, y, z) order (moveaxis keeps the other two axes in their order)
            cells = np.empty_like(idx)
            rest = [a for a in range(3) if a != ax]
            cells[:, ax] = idx[:, 0]
            cells[:, rest[0]] = idx[:, 1]
            cells[:, rest[1]] = idx[:, 2]
            out.append((ax, sgn, cells))
    return out


class _Evaluator:
    """Average SAR of flush cubes given by surface plane and in-plane position, many at once."""

    def __init__(self, tab, tissue, edges, mass_kg, max_air_fraction, rtol):
        self.tab, self.tissue, self.edges = tab, tissue, edges
        self.mass_kg, self.max_air, self.rtol = mass_kg, max_air_fraction, rtol
        self.L_max = 2.02 * max(e[-1] - e[0] for e in edges)
        tv = tab.T[-1, -1, -1]
        self.L_hom = np.cbrt(mass_kg / (tv[0] / tv[2])) if tv[2] > 0 else np.nan  # start: mean tissue density

    def __call__(self, ax, sgn, plane_k, points):
        """Averages (n,) (-inf where invalid), sides (n,), air fractions (n,) and voxel indices (n, 3).

        ``ax``, ``sgn``, ``plane_k`` (n,) each: the surface plane ``edges[ax][plane_k]`` and the cube's side of
        it; ``points`` (n, 3): the face centres (the ``ax`` coordinate is the plane's).
        """
        n = points.shape[0]
        e = self.edges
        val = np.full(n, -np.inf)
        side = np.full(n, np.nan)
        air = np.full(n, np.nan)
        vox = np.zeros((n, 3), dtype=np.int64)
        inside_cell = np.where(sgn < 0, plane_k - 1, plane_k)
        outside_cell = np.where(sgn < 0, plane_k, plane_k - 1)
        ok = np.ones(n, dtype=bool)
        lat = np.zeros((n, 3), dtype=np.int64)
        for a in range(3):
            i = np.searchsorted(e[a], points[:, a], side="right") - 1
            ok &= (points[:, a] >= e[a][0]) & (points[:, a] <= e[a][-1])
            lat[:, a] = np.clip(i, 0, e[a].size - 2)
        nk = np.array([e[a].size - 1 for a in range(3)])
        ok &= (outside_cell >= 0) & (outside_cell < nk[ax]) & (inside_cell >= 0) & (inside_cell < nk[ax])
        rows = np.arange(n)
        vin = lat.copy()
        vin[rows, ax] = np.clip(inside_cell, 0, nk[ax] - 1)
        vout = lat.copy()
        vout[rows, ax] = np.clip(outside_cell, 0, nk[ax] - 1)
        ok &= self.tissue[tuple(vin.T)] & ~self.tissue[tuple(vout.T)]  # flush: tissue inside, background outside
        vox[:] = vin
        sel = np.nonzero(ok)[0]
        if sel.size == 0:
            return val, side, air, vox
        off_lo = np.empty((sel.size, 3))
        off_hi = np.empty((sel.size, 3))
        for s_ax in range(3):
            for s_sgn in (-1, 1):
                m = (ax[sel] == s_ax) & (sgn[sel] == s_sgn)
                if m.any():
                    off_lo[m], off_hi[m] = face_offsets(s_ax, s_sgn)
        c = points[sel]
        L0 = np.full(sel.size, self.L_hom)
        L = solve_side(self.tab, c, off_lo, off_hi, self.mass_kg, L0, self.L_max, rtol=self.rtol)
        good = np.isfinite(L)
        g = sel[good]
        if g.size == 0:
            return val, side, air, vox
        lo = c[good] + L[good, None] * off_lo[good]
        hi = c[good] + L[good, None] * off_hi[good]
        cont = np.empty((g.size, 3))
        touch = np.empty(g.size, dtype=bool)
        for s in range(0, g.size, CHUNK):
            sl = slice(s, s + CHUNK)
            cont[sl] = self.tab.contents(lo[sl], hi[sl])
            touch[sl] = faces_touch_tissue(self.tab, lo[sl], hi[sl])
        vol = L[good] ** 3
        a_frac = 1.0 - cont[:, 2] / vol
        valid = (a_frac <= self.max_air + 1e-12) & touch & (cont[:, 0] > 0)
        side[g] = L[good]
        air[g] = a_frac
        val[g[valid]] = cont[valid, 1] / cont[valid, 0]
        return val, side, air, vox


def flush_cube_peak(
    sar,
    rho,
    x,
    y,
    z,
    mass_kg,
    max_air_fraction: float = 0.1,
    *,
    starts: int = 8,
    xtol_fraction: float = 1e-3,
    rtol: float = 1e-11,
    max_steps: int = 400,
) -> FlushCube:
    """The largest average SAR over valid cubes flush with a tissue surface, at any position.

    See the module docstring for the definition and the method.

    Parameters
    ----------
    sar : array_like, shape (nx, ny, nz)
        Local SAR in W/kg (ignored where ``rho == 0``).
    rho : array_like, shape (nx, ny, nz)
        Density in kg/m^3, constant per cell; 0 for background.
    x, y, z : array_like, shapes (nx+1,), (ny+1,), (nz+1,)
        Cell edges in metres.
    mass_kg : float
        Target mass.
    max_air_fraction : float, optional
        Largest background fraction of a valid cube's volume.
    starts : int, optional
        Number of best surface-face positions refined by the continuous search.
    xtol_fraction : float, optional
        The search stops when its steps are below this fraction of the starting cell's width.
    rtol : float, optional
        Relative tolerance on the cube mass.
    max_steps : int, optional
        Bound on the search iterations.

    Returns
    -------
    FlushCube
    """
    sar, rho, edges = check_inputs(sar, rho, x, y, z, mass_kg, max_air_fraction, who="flush_cube_peak")
    tissue = rho > 0
    faces = _surface_faces(tissue)
    n_faces = int(sum(f[2].shape[0] for f in faces))
    if n_faces == 0:
        return FlushCube(mass_kg, float("nan"))
    tab = CubeTables(sar, rho, edges)
    ev = _Evaluator(tab, tissue, edges, mass_kg, max_air_fraction, rtol)
    cc = cell_centres(*edges)
    ax = np.concatenate([np.full(f[2].shape[0], f[0]) for f in faces])
    sgn = np.concatenate([np.full(f[2].shape[0], f[1]) for f in faces])
    cells = np.concatenate([f[2] for f in faces])
    plane_k = cells[np.arange(cells.shape[0]), ax] + (sgn < 0)
    pts = np.stack([cc[a][cells[:, a]] for a in range(3)], axis=1)
    pts[np.arange(pts.shape[0]), ax] = [edges[a][k] for a, k in zip(ax, plane_k)]

    val = np.empty(pts.shape[0])
    for s in range(0, pts.shape[0], CHUNK):
        sl = slice(s, s + CHUNK)
        val[sl] = ev(ax[sl], sgn[sl], plane_k[sl], pts[sl])[0]
    good = np.nonzero(np.isfinite(val))[0]
    if good.size == 0:
        return FlushCube(mass_kg, float("nan"), n_surface_faces=n_faces)
    pick = good[np.argsort(-val[good], kind="stable")[:starts]]

    # compass search in the plane of each start
    k = pick.size
    cur_ax, cur_sgn, cur_k = ax[pick], sgn[pick], plane_k[pick]
    cur = pts[pick].copy()
    cur_val = val[pick].copy()
    rows = np.arange(k)
    u_ax = np.array([[a for a in range(3) if a != q] for q in cur_ax])  # (k, 2) in-plane axes
    width = np.stack([np.diff(edges[a])[cells[pick, a]] for a in range(3)], axis=1)  # (k, 3)
    h = 0.5 * np.stack([width[rows, u_ax[:, 0]], width[rows, u_ax[:, 1]]], axis=1)  # (k, 2)
    h_stop = xtol_fraction * np.min(np.stack([width[rows, u_ax[:, 0]], width[rows, u_ax[:, 1]]], axis=1), axis=1)
    moves = np.array([(1, 0), (-1, 0), (0, 1), (0, -1), (1, 1), (1, -1), (-1, 1), (-1, -1)], dtype=float)
    active = np.ones(k, dtype=bool)
    for _ in range(max_steps):
        act = np.nonzero(active)[0]
        if act.size == 0:
            break
        trial = np.repeat(cur[act], len(moves), axis=0)
        step = (moves[None, :, :] * h[act][:, None, :]).reshape(-1, 2)
        r = np.repeat(act, len(moves))
        trial[np.arange(trial.shape[0]), u_ax[r, 0]] += step[:, 0]
        trial[np.arange(trial.shape[0]), u_ax[r, 1]] += step[:, 1]
        tv = ev(cur_ax[r], cur_sgn[r], cur_k[r], trial)[0].reshape(act.size, len(moves))
        best = np.argmax(tv, axis=1)
        better = tv[np.arange(act.size), best] > cur_val[act]
        mv = act[better]
        cur[mv] = trial.reshape(act.size, len(moves), 3)[better, best[better]]
        cur_val[mv] = tv[better, best[better]]
        stay = act[~better]
        h[stay] *= 0.5
        active[stay] = np.all(h[stay] >= h_stop[stay, None], axis=1)

    j = int(np.argmax(cur_val))
    one = slice(j, j + 1)
    v, L, air, vox = ev(cur_ax[one], cur_sgn[one], cur_k[one], cur[one])
    if not np.isfinite(v[0]):  # cannot happen: the search only moves to valid cubes
        raise AssertionError("flush_cube_peak: the best flush cube is not valid")
    lo, hi = face_offsets(int(cur_ax[j]), int(cur_sgn[j]))
    centre = cur[j] + 0.5 * L[0] * (lo + hi)
    vi = tuple(int(i) for i in vox[0])
    return FlushCube(
        mass_kg=mass_kg, peak=float(v[0]), cube_centre_m=tuple(float(c) for c in centre), side_m=float(L[0]),
        face=("+" if cur_sgn[j] < 0 else "-") + "xyz"[int(cur_ax[j])], surface_m=float(cur[j, cur_ax[j]]),
        voxel_index=vi, voxel_centre_m=tuple(float(cc[a][vi[a]]) for a in range(3)),
        air_fraction=max(float(air[0]), 0.0), n_surface_faces=n_faces, converged=not bool(active.any()))


def _num(v):
    v = float(v)
    return v if math.isfinite(v) else None


def reported_peak(grid, flush: FlushCube) -> dict:
    """The peak to report: the larger of the voxel-grid procedure's peak and the best flush cube.

    Parameters
    ----------
    grid : AveragedSAR
        Result of :func:`.sar_average.average_sar`.
    flush : FlushCube
        Result of :func:`flush_cube_peak` for the same mass.

    Returns
    -------
    dict
        ``peak_W_per_kg`` (the larger; None if neither exists), ``peak_from`` (``"grid"`` or ``"flush"``),
        ``cube_centre_m``, ``cube_side_m``, ``voxel_centre_m`` of that peak, and both candidates:
        ``grid_peak_W_per_kg`` (with ``grid_cube_centre_m``, ``grid_cube_side_m``, ``grid_voxel_centre_m``,
        ``grid_voxel_status``) and ``flush_peak_W_per_kg`` (with ``flush_cube_centre_m``,
        ``flush_cube_side_m``, ``flush_voxel_centre_m``, ``flush_face``, ``flush_air_fraction``,
        ``flush_search_converged``).
        Positions are lists in m, None where missing.
    """
    g, f = float(grid.peak), float(flush.peak)
    out = {
        "grid_peak_W_per_kg": _num(g),
        "grid_cube_centre_m": list(grid.peak_cube_centre_m) or None,
        "grid_cube_side_m": _num(grid.peak_cube_side_m),
        "grid_voxel_centre_m": list(grid.peak_location_m) or None,
        "grid_voxel_status": int(grid.peak_status),
        "flush_peak_W_per_kg": _num(f),
        "flush_cube_centre_m": list(flush.cube_centre_m) or None,
        "flush_cube_side_m": _num(flush.side_m),
        "flush_voxel_centre_m": list(flush.voxel_centre_m) or None,
        "flush_face": flush.face or None,
        "flush_air_fraction": _num(flush.air_fraction),
        "flush_search_converged": bool(flush.converged),
    }
    use_flush = math.isfinite(f) and not (math.isfinite(g) and g >= f)
    src = "flush" if use_flush else "grid"
    out.update(peak_W_per_kg=out[f"{src}_peak_W_per_kg"], peak_from=src if out[f"{src}_peak_W_per_kg"] is not None else None,
               cube_centre_m=out[f"{src}_cube_centre_m"], cube_side_m=out[f"{src}_cube_side_m"],
               voxel_centre_m=out[f"{src}_voxel_centre_m"])
    return out
