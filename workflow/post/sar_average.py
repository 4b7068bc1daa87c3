"""Mass-averaged SAR over cubes on a rectilinear, non-uniform grid (IEC/IEEE 62704-1:2017 procedure).

What is implemented
-------------------
The averaging procedure for SAR computed on a voxel grid in IEC/IEEE 62704-1:2017 (the FDTD
part of the SAR standards family; the same scheme goes back to IEEE C95.3 annex E), as follows.
A *tissue voxel* is a cell with ``rho > 0``; everything else (air, metal, cells outside the grid)
is *background*. All cubes are aligned with the grid axes.

Step 1, centred cubes. For every tissue voxel a cube centred on the voxel centre is grown until
the tissue mass inside equals the target mass. Cells cut by the cube faces contribute with their
overlap volume, exactly (no voxel-count rounding). The cube is *valid* when

* its background volume is at most ``max_air_fraction`` (10 %) of the cube volume, and
* each of its six faces touches tissue (``require_faces_in_tissue``; tested on the layer of cells
  just inside each face).

The voxel then gets the average ``P_cube / m_cube`` (status ``VALID``).

Voxels that are not the centre of a valid cube but lie *entirely inside* one or more valid cubes
get the largest average of those cubes (status ``ENCLOSED``; the standard's "used" voxels).

Step 2, face-centred cubes. For each remaining tissue voxel six cubes are built with the voxel
centre at the centre of one face (one per direction +-x, +-y, +-z); the other faces are pushed out
until the target mass is reached, whatever the background volume. Among the six, the cubes whose
volume is at most 5 % above the smallest one are kept and the largest of their averages is
assigned (status ``FACE``). If no face cube can reach the target (the grid holds too little
tissue) the voxel gets NaN.

How
---
Summed-volume tables of cell mass ``rho dV``, absorbed power ``SAR rho dV`` and tissue volume are
built at the grid nodes. With the density constant in each cell, the cumulative quantity
``Q(X, Y, Z)`` (integral over ``[x0, X] x [y0, Y] x [z0, Z]``) is trilinear inside every cell, so
trilinear interpolation of the node tables at the 8 box corners gives the content of any
axis-aligned box exactly (to rounding). The side of each voxel's cube is found for all voxels at
once by a bracketed Illinois (modified regula falsi) iteration on ``cbrt(m(L)) - cbrt(m_target)``,
which is linear in ``L`` in homogeneous tissue, so it converges in one or two steps there.
The largest enclosing average of the ``ENCLOSED`` voxels is a box-stabbing maximum, computed
exactly by covering each enclosed index box with 2^k-sided sub-boxes and running separable
sliding maxima per size class.

Accuracy note: table differences cancel; box contents carry an absolute rounding error of about
1e-16 of the grid total, which is negligible for the cubes that matter (near the peak).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.ndimage import maximum_filter1d

from .sar import cell_centres, cell_volumes, check_grid

__all__ = [
    "BACKGROUND",
    "FACE",
    "ENCLOSED",
    "VALID",
    "AveragedSAR",
    "average_sar",
    "exact_cube_average_bruteforce",
]

# voxel status codes of AveragedSAR.status
BACKGROUND = 0  # not tissue
FACE = 1  # step 2: value from face-centred cubes (the standard's "unused" voxels)
ENCLOSED = 2  # lies inside a valid cube, takes the largest enclosing average ("used")
VALID = 3  # centre of a valid centred cube

# face-centred cube volume window of step 2 (cubes within 5 % of the smallest)
FACE_VOLUME_WINDOW = 0.05

_CHUNK = 32768


@dataclass(frozen=True)
class AveragedSAR:
    """Result of mass-averaging a local SAR distribution.

    Attributes
    ----------
    mass_kg : float
        Target mass of the averaging cubes.
    avg : numpy.ndarray, shape (nx, ny, nz)
        Averaged SAR in W/kg assigned to each voxel; NaN for background (and for tissue voxels
        for which no cube reaches the target mass).
    valid : numpy.ndarray of bool, shape (nx, ny, nz)
        True where the voxel is the centre of a valid centred cube.
    status : numpy.ndarray of int8, shape (nx, ny, nz)
        ``BACKGROUND``, ``FACE``, ``ENCLOSED`` or ``VALID`` (module constants).
    side_m : numpy.ndarray, shape (nx, ny, nz)
        Side of the cube that gave the voxel its value: the centred cube for ``VALID``, the chosen
        face cube for ``FACE``; for ``ENCLOSED`` voxels the side of their own (invalid) centred
        cube; NaN for background.
    peak : float
        Largest averaged SAR (W/kg).
    peak_index : tuple of int
        Voxel index of the peak.
    peak_location_m : tuple of float
        Centre of the peak voxel (m).
    peak_status : int
        Status of the peak voxel.
    """

    mass_kg: float
    avg: np.ndarray
    valid: np.ndarray
    status: np.ndarray
    side_m: np.ndarray
    peak: float
    peak_index: tuple
    peak_location_m: tuple
    peak_status: int

    def counts(self) -> dict:
        """Number of voxels per status, ``{"valid": ..., "enclosed": ..., "face": ..., "unresolved": ...}``."""
        s = self.status
        return {
            "valid": int(np.sum(s == VALID)),
            "enclosed": int(np.sum(s == ENCLOSED)),
            "face": int(np.sum(s == FACE)),
            "unresolved": int(np.sum((s != BACKGROUND) & ~np.isfinite(self.avg))),
        }


# ----------------------------------------------------------------------------------------------
# input checks
# ----------------------------------------------------------------------------------------------


def _check_inputs(sar, rho, x, y, z, mass_kg, max_air_fraction):
    sar = np.asarray(sar, dtype=float)
    rho = np.asarray(rho, dtype=float)
    if sar.ndim != 3 or sar.shape != rho.shape:
        raise ValueError(f"average_sar: sar and rho must be 3-D of equal shape, got {sar.shape} and {rho.shape}")
    edges = check_grid(x, y, z, sar.shape)
    if not (np.isfinite(mass_kg) and mass_kg > 0):
        raise ValueError(f"average_sar: mass_kg must be a positive number of kilograms, got {mass_kg!r}")
    if not 0 <= max_air_fraction < 1:
        raise ValueError(f"average_sar: max_air_fraction must be in [0, 1), got {max_air_fraction!r}")
    if np.any(rho < 0) or not np.all(np.isfinite(rho)):
        raise ValueError("average_sar: rho must be finite and non-negative (kg/m^3)")
    if not np.all(np.isfinite(sar[rho > 0])) or np.any(sar[rho > 0] < 0):
        raise ValueError("average_sar: sar must be finite and non-negative in tissue (W/kg)")
    sar = np.where(rho > 0, sar, 0.0)
    return sar, rho, edges


def _peak(avg, status, edges, mass_kg, valid, side):
    finite = np.isfinite(avg)
    if not finite.any():
        return AveragedSAR(mass_kg, avg, valid, status, side, float("nan"), (), (), BACKGROUND)
    flat = int(np.nanargmax(np.where(finite, avg, -np.inf)))
    idx = tuple(int(i) for i in np.unravel_index(flat, avg.shape))
    cc = cell_centres(*edges)
    loc = tuple(float(cc[a][idx[a]]) for a in range(3))
    return AveragedSAR(mass_kg, avg, valid, status, side, float(avg[idx]), idx, loc, int(status[idx]))


# ----------------------------------------------------------------------------------------------
# summed-volume tables
# ----------------------------------------------------------------------------------------------


def _summed_table(q):
    """Node table (nx+1, ny+1, nz+1) of ``sum q`` over cells with smaller indices (q (nx, ny, nz, ...))."""
    shape = (q.shape[0] + 1, q.shape[1] + 1, q.shape[2] + 1) + q.shape[3:]
    t = np.zeros(shape, dtype=q.dtype)
    t[1:, 1:, 1:] = q.cumsum(0).cumsum(1).cumsum(2)
    return t


class _Tables:
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


def _solve_side(tab, centre, off_lo, off_hi, target, L0, L_max, rtol=1e-11, max_iter=200):
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
    for s in range(0, n, _CHUNK):
        idx = np.arange(s, min(n, s + _CHUNK))
        gb[idx] = g(idx, b[idx])
    # expand the upper end until the target is bracketed
    need = np.nonzero(gb < 0)[0]
    while need.size:
        at_max = b[need] >= L_max
        b[need[at_max]] = np.nan  # the whole grid is inside and still too light: unreachable
        need = need[~at_max]
        a[need], ga[need] = b[need], gb[need]
        b[need] = np.minimum(b[need] * 1.6, L_max)
        for s in range(0, need.size, _CHUNK):
            idx = need[s : s + _CHUNK]
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
        for s in range(0, act.size, _CHUNK):
            gc[s : s + _CHUNK] = g(act[s : s + _CHUNK], cnew[s : s + _CHUNK])
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


# ----------------------------------------------------------------------------------------------
# the procedure
# ----------------------------------------------------------------------------------------------

_FACE_DIRS = [(ax, sgn) for ax in range(3) for sgn in (-1, 1)]


def _face_offsets(ax, sgn):
    lo = np.full(3, -0.5)
    hi = np.full(3, 0.5)
    lo[ax], hi[ax] = (-1.0, 0.0) if sgn < 0 else (0.0, 1.0)
    return lo, hi


def _face_tolerance(edges) -> float:
    """Distance below which a cube face counts as lying on a mesh line (1e-9 of the smallest cell)."""
    return 1e-9 * min(float(np.diff(e).min()) for e in edges)


def _faces_touch_tissue(tab, lo, hi):
    """(n,) bool: every face of the boxes has tissue in the cell layer just inside it.

    A face within :func:`_face_tolerance` of a mesh line is taken to lie on it, so a cube whose side the
    root finder lands a rounding error beyond a cell edge (a cube of a whole number of cells, flush with
    the tissue surface) is judged like the exact cube.
    """
    e = tab.edges
    n_cells = tab.shape
    tol = _face_tolerance(e)
    lo = lo + tol
    hi = hi - tol
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


def _enclosed_max(valid_idx, avg_valid, lo, hi, edges, shape, tol):
    """Largest average of the valid cubes that fully enclose each voxel; -inf where none.

    valid_idx (k, 3) cube centre voxels, avg_valid (k,), lo/hi (k, 3) cube bounds.
    """
    before = np.empty_like(valid_idx)
    after = np.empty_like(valid_idx)
    for a in range(3):
        e = edges[a]
        first = np.searchsorted(e, lo[:, a] - tol, side="left")  # first node >= lo
        last = np.searchsorted(e, hi[:, a] + tol, side="right") - 1  # last node <= hi
        before[:, a] = valid_idx[:, a] - first
        after[:, a] = (last - 1) - valid_idx[:, a]
    keep = np.all(before >= 0, axis=1) & np.all(after >= 0, axis=1)
    out = np.full(shape, -np.inf)
    if not keep.any():
        return out
    valid_idx, avg_valid, before, after = valid_idx[keep], avg_valid[keep], before[keep], after[keep]
    # Each enclosed index box [start, end] is covered, per axis, by two (overlapping) intervals of
    # length 2^k, k = floor(log2(length)) (max is idempotent, so overlap is harmless). All boxes of
    # one size class (kx, ky, kz) are then handled by scattering their values at the sub-box start
    # corners and one separable sliding maximum over windows [v - 2^k + 1, v]. Exact, and the
    # number of classes is small (a few per axis).
    start = valid_idx - before
    end = valid_idx + after
    k = np.floor(np.log2(end - start + 1)).astype(np.int64)
    p = np.left_shift(1, k)
    pieces = (start, end - p + 1)  # the two covering intervals' start indices
    cls = (k[:, 0] * 64 + k[:, 1]) * 64 + k[:, 2]
    for c in np.unique(cls):
        sel = np.nonzero(cls == c)[0]
        kk = k[sel[0]]
        S = np.full(shape, -np.inf)
        for px in (0, 1):
            for py in (0, 1):
                for pz in (0, 1):
                    corner = [pieces[q][sel, ax] for ax, q in enumerate((px, py, pz))]
                    np.maximum.at(S, tuple(corner), avg_valid[sel])
        for ax in range(3):
            w = 1 << int(kk[ax])
            if w > 1:
                S = maximum_filter1d(S, w, axis=ax, mode="constant", cval=-np.inf, origin=(w - 1) - w // 2)
        np.maximum(out, S, out=out)
    return out


def average_sar(
    sar,
    rho,
    x,
    y,
    z,
    mass_kg,
    max_air_fraction: float = 0.1,
    *,
    require_faces_in_tissue: bool = True,
    rtol: float = 1e-11,
) -> AveragedSAR:
    """Spatial-average SAR over cubes of a target mass (IEC/IEEE 62704-1:2017 procedure).

    See the module docstring for the procedure and the method.

    Parameters
    ----------
    sar : array_like, shape (nx, ny, nz)
        Local SAR in W/kg (ignored where ``rho == 0``).
    rho : array_like, shape (nx, ny, nz)
        Density in kg/m^3, constant per cell; 0 for background.
    x, y, z : array_like, shapes (nx+1,), (ny+1,), (nz+1,)
        Cell edges in metres (non-uniform allowed).
    mass_kg : float
        Target mass (1e-3 for 1 g, 1e-2 for 10 g).
    max_air_fraction : float, optional
        Largest background fraction of a valid centred cube's volume (0.1 in the standard).
    require_faces_in_tissue : bool, optional
        Also require every face of a valid centred cube to touch tissue.
    rtol : float, optional
        Relative tolerance on the cube mass.

    Returns
    -------
    AveragedSAR
    """
    sar, rho, edges = _check_inputs(sar, rho, x, y, z, mass_kg, max_air_fraction)
    shape = rho.shape
    tab = _Tables(sar, rho, edges)
    cc = cell_centres(*edges)
    extent = max(e[-1] - e[0] for e in edges)
    L_max = 2.02 * extent
    tissue_idx = np.argwhere(rho > 0)
    n = tissue_idx.shape[0]
    avg = np.full(shape, np.nan)
    side = np.full(shape, np.nan)
    status = np.zeros(shape, dtype=np.int8)
    valid = np.zeros(shape, dtype=bool)
    if n == 0:
        return _peak(avg, status, edges, mass_kg, valid, side)
    centre = np.stack([cc[a][tissue_idx[:, a]] for a in range(3)], axis=1)
    rho_c = rho[tuple(tissue_idx.T)]
    L0 = np.cbrt(mass_kg / rho_c)

    # step 1: centred cubes
    off_lo = np.broadcast_to(np.full(3, -0.5), (n, 3))
    off_hi = np.broadcast_to(np.full(3, 0.5), (n, 3))
    L = _solve_side(tab, centre, off_lo, off_hi, mass_kg, L0, L_max, rtol=rtol)
    reach = np.isfinite(L)
    ok_idx = np.nonzero(reach)[0]
    lo = centre[ok_idx] - 0.5 * L[ok_idx, None]
    hi = centre[ok_idx] + 0.5 * L[ok_idx, None]
    cont = np.empty((ok_idx.size, 3))
    touch = np.ones(ok_idx.size, dtype=bool)
    for s in range(0, ok_idx.size, _CHUNK):
        sl = slice(s, s + _CHUNK)
        cont[sl] = tab.contents(lo[sl], hi[sl])
        if require_faces_in_tissue:
            touch[sl] = _faces_touch_tissue(tab, lo[sl], hi[sl])
    vol = L[ok_idx] ** 3
    air = 1.0 - cont[:, 2] / vol
    is_valid = (air <= max_air_fraction + 1e-12) & touch
    vi = ok_idx[is_valid]
    vidx = tuple(tissue_idx[vi].T)
    avg_valid = cont[is_valid, 1] / cont[is_valid, 0]
    avg[vidx] = avg_valid
    valid[vidx] = True
    status[vidx] = VALID
    side[tuple(tissue_idx[ok_idx].T)] = L[ok_idx]

    # voxels fully inside valid cubes
    tol = 1e-9 * min(np.diff(e).min() for e in edges)
    enc = _enclosed_max(tissue_idx[vi], avg_valid, lo[is_valid], hi[is_valid], edges, shape, tol)
    take = (rho > 0) & ~valid & np.isfinite(enc)
    avg[take] = enc[take]
    status[take] = ENCLOSED

    # step 2: face-centred cubes for the rest
    rest = np.argwhere((rho > 0) & (status == BACKGROUND))
    if rest.size:
        m = rest.shape[0]
        rc = np.stack([cc[a][rest[:, a]] for a in range(3)], axis=1)
        L0r = np.cbrt(mass_kg / rho[tuple(rest.T)])
        Ls = np.full((6, m), np.nan)
        Ps = np.full((6, m), np.nan)
        for d, (ax, sgn) in enumerate(_FACE_DIRS):
            ol, oh = _face_offsets(ax, sgn)
            Ld = _solve_side(tab, rc, np.broadcast_to(ol, (m, 3)), np.broadcast_to(oh, (m, 3)),
                             mass_kg, L0r, L_max, rtol=rtol)
            good = np.nonzero(np.isfinite(Ld))[0]
            for s in range(0, good.size, _CHUNK):
                g = good[s : s + _CHUNK]
                cnt = tab.contents(rc[g] + Ld[g, None] * ol, rc[g] + Ld[g, None] * oh)
                Ps[d, g] = cnt[:, 1] / cnt[:, 0]
            Ls[d] = Ld
        V = Ls**3
        with np.errstate(invalid="ignore"):
            vmin = np.nanmin(np.where(np.isfinite(V), V, np.inf), axis=0)
            cand = np.isfinite(V) & (V <= (1 + FACE_VOLUME_WINDOW) * vmin[None, :] * (1 + 1e-12))
        score = np.where(cand, Ps, -np.inf)
        best = np.argmax(score, axis=0)
        got = np.isfinite(vmin)
        ridx = tuple(rest.T)
        status[ridx] = FACE
        avg[ridx] = np.where(got, score[best, np.arange(m)], np.nan)
        side[ridx] = np.where(got, Ls[best, np.arange(m)], np.nan)
    return _peak(avg, status, edges, mass_kg, valid, side)


# ----------------------------------------------------------------------------------------------
# independent brute-force reference (small grids only)
# ----------------------------------------------------------------------------------------------


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
    sar, rho, edges = _check_inputs(sar, rho, x, y, z, mass_kg, max_air_fraction)
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

    face_tol = _face_tolerance(edges)

    def faces_ok(lo, hi):
        lo, hi = lo + face_tol, hi - face_tol  # a face within the tolerance of a mesh line lies on it
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
    if centres is not None:
        return _peak(avg, status, edges, mass_kg, valid, side)

    tol = 1e-9 * min(np.diff(e).min() for e in edges)
    for lo, hi, val in cubes:
        inside = [(e[:-1] >= lo[a] - tol) & (e[1:] <= hi[a] + tol) for a, e in enumerate(edges)]
        enc = inside[0][:, None, None] & inside[1][None, :, None] & inside[2][None, None, :]
        enc &= tissue & ~valid
        upd = enc & ~(avg >= val)
        avg[upd] = val
        status[enc] = ENCLOSED

    for v in [tuple(u) for u in np.argwhere(tissue & (status == BACKGROUND))]:
        c = np.array([cc[a][v[a]] for a in range(3)])
        res = []
        for ax, sgn in _FACE_DIRS:
            ol, oh = _face_offsets(ax, sgn)
            L = side_for(c, ol, oh)
            if np.isfinite(L):
                lo, hi = c + L * ol, c + L * oh
                res.append((L**3, box(lo, hi, power_cell) / box(lo, hi, mass_cell), L))
        status[v] = FACE
        side[v] = np.nan
        if res:
            vmin = min(r[0] for r in res)
            keep = [r for r in res if r[0] <= (1 + FACE_VOLUME_WINDOW) * vmin * (1 + 1e-12)]
            best = max(keep, key=lambda r: r[1])
            avg[v] = best[1]
            side[v] = best[2]
    return _peak(avg, status, edges, mass_kg, valid, side)
