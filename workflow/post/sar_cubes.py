"""Axis-aligned averaging cubes on a rectilinear, non-uniform grid: exact box contents, cube sides, face tests.

The building blocks shared by the voxel-grid averaging procedure (:mod:`.sar_average`) and the search for
cubes flush with a tissue surface (:mod:`.sar_flush`).

* :class:`CubeTables`: summed-volume tables of cell mass ``rho dV``, absorbed power ``SAR rho dV`` and
  tissue volume at the grid nodes. With the density constant in each cell, the cumulative quantity
  ``Q(X, Y, Z)`` (integral over ``[x0, X] x [y0, Y] x [z0, Z]``) is trilinear inside every cell, so
  trilinear interpolation of the node tables at the 8 box corners gives the content of any axis-aligned
  box exactly (to rounding).
* :func:`solve_side`: the side of many cubes at once (given centre point and shape offsets) holding a
  target mass, by a bracketed Illinois (modified regula falsi) iteration on ``cbrt(m(L)) - cbrt(m_target)``,
  which is linear in ``L`` in homogeneous tissue, so it converges in one or two steps there.
* :func:`snap_to_mesh` and :func:`faces_touch_tissue`: a cube face within :data:`SNAP_FRACTION` of the
  local cell width of a mesh line lies on that line. The root finder lands a cube side to about 1e-11,
  but a cube centred on a voxel is flush with a surface only by coincidence of the cube side and the
  distance to the surface; a face that sticks a micrometre into the background beside a millimetre cell
  is judged as lying on the surface. The tolerance follows the cell size, so it means the same on every
  mesh.

Accuracy note: table differences cancel; box contents carry an absolute rounding error of about
1e-16 of the grid total, which is negligible for the cubes that matter (near the peak).
"""
from __future__ import annotations

import numpy as np

from .sar import cell_volumes, check_grid

__all__ = ["CHUNK", "FACE_DIRS", "SNAP_FRACTION", "CubeTables", "check_inputs", "face_offsets",
           "faces_touch_tissue", "snap_to_mesh", "solve_side"]

CHUNK = 32768  # boxes per vectorised batch (bounds the temporary memory)

# a cube face closer to a mesh line than this fraction of the narrower neighbouring cell lies on the line
SNAP_FRACTION = 0.01

# the six face directions (axis, sign): sign -1 puts the cube below the point along the axis, +1 above
FACE_DIRS = [(ax, sgn) for ax in range(3) for sgn in (-1, 1)]

def check_inputs(sar, rho, x, y, z, mass_kg, max_air_fraction, who="average_sar"):
    """Checked float arrays ``(sar, rho, edges)``; ``sar`` set to 0 outside tissue. ``who`` names the caller in errors."""
    sar = np.asarray(sar, dtype=float)
    rho = np.asarray(rho, dtype=float)
    if sar.ndim != 3 or sar.shape != rho.shape:
        raise ValueError(f"{who}: sar and rho must be 3-D of equal shape, got {sar.shape} and {rho.shape}")
    edges = check_grid(x, y, z, sar.shape)
    if not (np.isfinite(mass_kg) and mass_kg > 0):
        raise ValueError(f"{who}: mass_kg must be a positive number of kilograms, got {mass_kg!r}")
    if not 0 <= max_air_fraction < 1:
        raise ValueError(f"{who}: max_air_fraction must be in [0, 1), got {max_air_fraction!r}")
    if np.any(rho < 0) or not np.all(np.isfinite(rho)):
        raise ValueError(f"{who}: rho must be finite and non-negative (kg/m^3)")
    if not np.all(np.isfinite(sar[rho > 0])) or np.any(sar[rho > 0] < 0):
        raise ValueError(f"{who}: sar must be finite and non-negative in tissue (W/kg)")
    sar = np.where(rho > 0, sar, 0.0)
    return sar, rho, edges



def _summed_table(q):
    """Node table (nx+1, ny+1, nz+1) of ``sum q`` over cells with smaller indices (q (nx, ny, nz, ...))."""
    shape = (q.shape[0] + 1, q.shape[1] + 1, q.shape[2] + 1) + q.shape[3:]
    t = np.zeros(shape, dtype=q.dtype)
    t[1:, 1:, 1:] = q.cumsum(0).cumsum(1).cumsum(2)
    return t


class CubeTables:
    """Summed node tables of mass, power and tissue volume, and of the tissue-cell count."""

    def __init__(self, sar, rho, edges):
        self.edges = edges
        dv = cell_volumes(*edges)
        m = rho * dv
        tissue = rho > 0
        q = np.stack([m, sar * m, np.where(tissue, dv, 0.0)], axis=-1)
        self.T = _summed_table(q)  # (nx+1, ny+1, nz+1, 3)
        self.Tflat = self.T.reshape(-1, 3)
        self.C = _summed_table(tissue.astype(np.int64))  # tissue cell count
        self.strides = (self.T.shape[1] * self.T.shape[2], self.T.shape[2], 1)
        self.shape = rho.shape
        self._mass_blocks = None  # built on the first call of mass()

    # -- exact box contents -------------------------------------------------------------------
    def _axis(self, a, lo, hi):
        e = self.edges[a]
        n = e.size - 1

        def locate(X):
            Xc = np.clip(X, e[0], e[-1])
            i = np.clip(np.searchsorted(e, Xc, side="right") - 1, 0, n - 1)
            u = (Xc - e[i]) / (e[i + 1] - e[i])
            return i, u

        il, ul = locate(lo)
        ih, uh = locate(hi)
        nodes = np.stack([il, il + 1, ih, ih + 1], axis=-1)
        w = np.stack([-(1.0 - ul), -ul, 1.0 - uh, uh], axis=-1)
        return nodes, w

    def _corners(self, lo, hi):
        nx, wx = self._axis(0, lo[:, 0], hi[:, 0])
        ny, wy = self._axis(1, lo[:, 1], hi[:, 1])
        nz, wz = self._axis(2, lo[:, 2], hi[:, 2])
        sx, sy, _ = self.strides
        flat = (nx[:, :, None, None] * sx + ny[:, None, :, None] * sy + nz[:, None, None, :]).reshape(-1, 64)
        w = (wx[:, :, None, None] * wy[:, None, :, None] * wz[:, None, None, :]).reshape(-1, 64)
        return flat, w

    def _blocks(self):
        """(n_cells, 8): the mass table at the 8 nodes of each cell, node (a, b, c) at column 4a + 2b + c.

        The 8 nodes a box corner interpolates from are then one contiguous row (one gather instead of
        eight scattered ones); 64 bytes per cell.
        """
        if self._mass_blocks is None:
            M = self.T[..., 0]
            nx, ny, nz = self.shape
            B = np.empty((nx, ny, nz, 8))
            for k, (a, b, c) in enumerate(np.ndindex(2, 2, 2)):
                B[..., k] = M[a:a + nx, b:b + ny, c:c + nz]
            self._mass_blocks = B.reshape(-1, 8)
        return self._mass_blocks

    def mass(self, lo, hi):
        """Tissue mass (kg) in boxes [lo, hi], lo/hi (n, 3).

        The same trilinear interpolation of the summed mass table as :meth:`contents`, evaluated per
        box corner from the 8 nodes of the cell holding it (:meth:`_blocks`).
        """
        B = self._blocks()
        per_axis = []
        for a in range(3):
            e = self.edges[a]
            n = e.size - 1
            corners = []
            for X, sign in ((lo[:, a], -1.0), (hi[:, a], 1.0)):
                Xc = np.clip(X, e[0], e[-1])
                i = np.clip(np.searchsorted(e, Xc, side="right") - 1, 0, n - 1)
                u = (Xc - e[i]) / (e[i + 1] - e[i])
                corners.append((i, sign * (1.0 - u), sign * u))  # cell index, weights of its two nodes
            per_axis.append(corners)
        sx, sy = self.shape[1] * self.shape[2], self.shape[2]
        total = np.zeros(lo.shape[0])
        for ix, x0, x1 in per_axis[0]:
            for iy, y0, y1 in per_axis[1]:
                for iz, z0, z1 in per_axis[2]:
                    blk = B[ix * sx + iy * sy + iz]
                    for k, wxy in enumerate((x0 * y0, x0 * y1, x1 * y0, x1 * y1)):
                        total += wxy * (z0 * blk[:, 2 * k] + z1 * blk[:, 2 * k + 1])
        return total

    def contents(self, lo, hi):
        """(n, 3): mass (kg), absorbed power (W), tissue volume (m^3) in boxes [lo, hi]."""
        flat, w = self._corners(lo, hi)
        return np.einsum("nk,nkt->nt", w, self.Tflat[flat])

    # -- integer cell counts ------------------------------------------------------------------
    def count(self, i0, i1, j0, j1, k0, k1):
        """Tissue cells with index in [i0, i1] x [j0, j1] x [k0, k1] (inclusive, arrays); 0 if empty."""
        C = self.C
        empty = (i1 < i0) | (j1 < j0) | (k1 < k0)
        i0, j0, k0 = (np.clip(v, 0, n) for v, n in zip((i0, j0, k0), self.shape))
        i1, j1, k1 = (np.clip(v + 1, 0, n) for v, n in zip((i1, j1, k1), self.shape))
        s = (
            C[i1, j1, k1] - C[i0, j1, k1] - C[i1, j0, k1] - C[i1, j1, k0]
            + C[i0, j0, k1] + C[i0, j1, k0] + C[i1, j0, k0] - C[i0, j0, k0]
        )
        return np.where(empty, 0, s)


# ----------------------------------------------------------------------------------------------
# cube side search
# ----------------------------------------------------------------------------------------------


def solve_side(tab, centre, off_lo, off_hi, target, L0, L_max, rtol=1e-11, max_iter=200):
    """Side L with mass(box(centre + L off_lo, centre + L off_hi)) == target, for n boxes at once.

    Returns L (n,), NaN where the target cannot be reached below ``L_max``.
    """
    n = centre.shape[0]
    c3 = np.cbrt(target)

    def g(idx, L):
        lo = centre[idx] + L[:, None] * off_lo[idx]
        hi = centre[idx] + L[:, None] * off_hi[idx]
        return np.cbrt(np.clip(tab.mass(lo, hi), 0, None)) - c3

    L = np.full(n, np.nan)
    a = np.zeros(n)
    ga = np.full(n, -c3)
    b = L0.astype(float).copy()
    gb = np.empty(n)
    for s in range(0, n, CHUNK):
        idx = np.arange(s, min(n, s + CHUNK))
        gb[idx] = g(idx, b[idx])
    # expand the upper end until the target is bracketed
    need = np.nonzero(gb < 0)[0]
    while need.size:
        at_max = b[need] >= L_max
        b[need[at_max]] = np.nan  # the whole grid is inside and still too light: unreachable
        need = need[~at_max]
        a[need], ga[need] = b[need], gb[need]
        b[need] = np.minimum(b[need] * 1.6, L_max)
        for s in range(0, need.size, CHUNK):
            idx = need[s : s + CHUNK]
            gb[idx] = g(idx, b[idx])
        need = need[gb[need] < 0]
    ok = np.isfinite(b)
    done = ok & (np.abs(gb) <= rtol * c3)
    L[done] = b[done]
    act = np.nonzero(ok & ~done)[0]
    # bracket [a, b] with ga < 0 <= gb; Illinois iteration keeping a sign change
    side_a = np.zeros(n, dtype=np.int8)  # which end was retained last (for the Illinois halving)
    for _ in range(max_iter):
        if act.size == 0:
            break
        A, B, GA, GB = a[act], b[act], ga[act], gb[act]
        den = GB - GA
        cnew = np.where(den > 0, B - GB * (B - A) / np.where(den > 0, den, 1.0), 0.5 * (A + B))
        # keep strictly inside the bracket (bisection otherwise)
        bad = ~((cnew > A) & (cnew < B))
        cnew = np.where(bad, 0.5 * (A + B), cnew)
        gc = np.empty(act.size)
        for s in range(0, act.size, CHUNK):
            gc[s : s + CHUNK] = g(act[s : s + CHUNK], cnew[s : s + CHUNK])
        hit = np.abs(gc) <= rtol * c3
        upper = gc > 0
        # c replaces the end with the same sign; the other end's value is halved if it stays twice
        sa = side_a[act]
        newA = np.where(upper, A, cnew)
        newB = np.where(upper, cnew, B)
        newGA = np.where(upper, np.where(sa == 1, GA * 0.5, GA), gc)
        newGB = np.where(upper, gc, np.where(sa == -1, GB * 0.5, GB))
        side_a[act] = np.where(upper, 1, -1)
        a[act], b[act], ga[act], gb[act] = newA, newB, newGA, newGB
        tiny = (newB - newA) <= 1e-14 * newB
        fin = hit | tiny
        L[act[fin]] = np.where(hit[fin], cnew[fin], newB[fin])
        act = act[~fin]
    if act.size:
        L[act] = 0.5 * (a[act] + b[act])
    return L



def face_offsets(ax, sgn):
    """Offsets (lo, hi), each (3,), of a cube of side 1 whose face centre is the origin.

    The face is normal to axis ``ax``; the cube lies on the ``sgn`` side of it (-1: below, +1: above).
    """
    lo = np.full(3, -0.5)
    hi = np.full(3, 0.5)
    lo[ax], hi[ax] = (-1.0, 0.0) if sgn < 0 else (0.0, 1.0)
    return lo, hi


def snap_to_mesh(e, X, fraction: float = SNAP_FRACTION):
    """Coordinates ``X`` along one axis, those near a mesh line moved onto it.

    A value within ``fraction`` of the narrower of the two cells beside its nearest line (the end cell at
    the ends of the grid) is replaced by the line's coordinate; the others are returned unchanged.

    Parameters
    ----------
    e : numpy.ndarray, shape (n+1,)
        Cell edges (mesh lines) of the axis, m.
    X : array_like, shape (k,)
        Coordinates, m.
    fraction : float
        Tolerance as a fraction of the local cell width.

    Returns
    -------
    numpy.ndarray, shape (k,)
    """
    X = np.asarray(X, dtype=float)
    w = np.diff(e)
    k = np.clip(np.searchsorted(e, X), 1, e.size - 1)  # e[k-1] <= X <= e[k] inside the grid
    near = np.where(np.abs(X - e[k - 1]) <= np.abs(e[k] - X), k - 1, k)
    left = np.where(near >= 1, w[np.clip(near - 1, 0, w.size - 1)], np.inf)
    right = np.where(near < w.size, w[np.clip(near, 0, w.size - 1)], np.inf)
    tol = fraction * np.minimum(left, right)
    return np.where(np.abs(X - e[near]) <= tol, e[near], X)


def faces_touch_tissue(tab, lo, hi):
    """(n,) bool: every face of the boxes ``[lo, hi]`` (n, 3) has tissue in the cell layer just inside it.

    Faces near a mesh line are first put on it (:func:`snap_to_mesh`); a face on a line tests the cell
    layer on the box's side of the line. A face outside the grid fails.
    """
    e = tab.edges
    n_cells = tab.shape
    lo = np.stack([snap_to_mesh(e[a], lo[:, a]) for a in range(3)], axis=1)
    hi = np.stack([snap_to_mesh(e[a], hi[:, a]) for a in range(3)], axis=1)
    # lateral cell ranges (cells overlapping the open interval (lo, hi))
    j0 = [np.searchsorted(e[a], lo[:, a], side="right") - 1 for a in range(3)]
    j1 = [np.searchsorted(e[a], hi[:, a], side="left") - 1 for a in range(3)]
    j0 = [np.clip(v, 0, n_cells[a] - 1) for a, v in enumerate(j0)]
    j1 = [np.clip(v, -1, n_cells[a] - 1) for a, v in enumerate(j1)]
    ok = np.ones(lo.shape[0], dtype=bool)
    for a in range(3):
        for face in ("lo", "hi"):
            if face == "lo":
                i = np.searchsorted(e[a], lo[:, a], side="right") - 1
                outside = lo[:, a] < e[a][0]
            else:
                i = np.searchsorted(e[a], hi[:, a], side="left") - 1
                outside = hi[:, a] > e[a][-1]
            rng0 = list(j0)
            rng1 = list(j1)
            rng0[a] = rng1[a] = np.clip(i, 0, n_cells[a] - 1)
            cnt = tab.count(rng0[0], rng1[0], rng0[1], rng1[1], rng0[2], rng1[2])
            ok &= (cnt > 0) & ~outside
    return ok
