"""Mass-averaged SAR over cubes on a rectilinear, non-uniform grid (IEC/IEEE 62704-1:2017 procedure).

What is implemented
-------------------
The averaging procedure for SAR computed on a voxel grid in IEC/IEEE 62704-1:2017 (the FDTD part of the
SAR standards family; the same scheme goes back to IEEE C95.3 annex E). Clause numbers are not quoted
here: the description below is the procedure as recalled from the standard's text ("from memory"), the
checks in ``tests/post/test_sar_average.py`` name what each one rests on. A *tissue voxel* is a cell with
``rho > 0``; everything else (air, metal, cells outside the grid) is *background*. All cubes are aligned
with the grid axes.

Step 1, centred cubes. For every tissue voxel a cube centred on the voxel centre is grown until the tissue
mass inside equals the target mass. Cells cut by the cube faces contribute with their overlap volume,
exactly (no voxel-count rounding). The cube is *valid* when

* its background volume is at most ``max_air_fraction`` (10 % in the standard) of the cube volume, and
* each of its six faces touches tissue (``require_faces_in_tissue``; tested on the layer of cells just
  inside each face). A face within 1 % of the local cell width of a mesh line lies on that line
  (:func:`.sar_cubes.snap_to_mesh`), so a cube that is flush with a flat surface up to the accuracy of its
  side is judged flush, on any mesh.

The voxel then gets the average ``P_cube / m_cube`` (status ``VALID``).

Voxels that are not the centre of a valid cube but lie *entirely inside* one or more valid cubes get the
largest average of those cubes (status ``ENCLOSED``; the standard's "used" voxels).

Step 2, face-centred cubes, the standard's treatment of voxels at a surface. For each remaining tissue
voxel six cubes are built with the voxel centre at the centre of one face (one per direction +-x, +-y,
+-z); the other faces are pushed out until the target mass is reached, whatever the background volume.
Among the six, the cubes whose volume is at most 5 % above the smallest one are kept and the largest of
their averages is assigned (status ``FACE``). If no face cube can reach the target (the grid holds too
little tissue) the voxel gets NaN.

The standard's peak spatial-average SAR is the largest value assigned to a voxel. Every cube of this
procedure sits where the voxel grid puts it; the largest average over cubes flush with a surface at any
position is searched separately (:mod:`.sar_flush`).

How
---
Box contents and cube sides come from :mod:`.sar_cubes` (summed-volume tables, vectorised root finding).
The largest enclosing average of the ``ENCLOSED`` voxels is a box-stabbing maximum, computed exactly by
covering each enclosed index box with 2^k-sided sub-boxes and running separable sliding maxima per size
class. The reference implementation by direct search is
:func:`bodysweep.workflow.reference.sar_bruteforce.exact_cube_average_bruteforce`.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .sar import cell_centres
from .sar_cubes import (CHUNK, FACE_DIRS, CubeTables, check_inputs, face_offsets, faces_touch_tissue,
                        snap_to_mesh, solve_side)

__all__ = [
    "BACKGROUND",
    "FACE",
    "ENCLOSED",
    "VALID",
    "FACE_VOLUME_WINDOW",
    "AveragedSAR",
    "average_sar",
]

# voxel status codes of AveragedSAR.status
BACKGROUND = 0  # not tissue
FACE = 1  # step 2: value from face-centred cubes (the standard's "unused" voxels)
ENCLOSED = 2  # lies inside a valid cube, takes the largest enclosing average ("used")
VALID = 3  # centre of a valid centred cube

# face-centred cube volume window of step 2 (cubes within 5 % of the smallest)
FACE_VOLUME_WINDOW = 0.05


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
    peak_cube_centre_m : tuple of float
        Centre of the cube whose average is the peak (m): the voxel centre for ``VALID``, the centre of
        an enclosing valid cube with that average for ``ENCLOSED``, the centre of the chosen face cube
        for ``FACE``. Empty without a peak.
    peak_cube_side_m : float
        Side of that cube (m); NaN without a peak.
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
    peak_cube_centre_m: tuple = ()
    peak_cube_side_m: float = float("nan")

    def counts(self) -> dict:
        """Number of voxels per status, ``{"valid": ..., "enclosed": ..., "face": ..., "unresolved": ...}``."""
        s = self.status
        return {
            "valid": int(np.sum(s == VALID)),
            "enclosed": int(np.sum(s == ENCLOSED)),
            "face": int(np.sum(s == FACE)),
            "unresolved": int(np.sum((s != BACKGROUND) & ~np.isfinite(self.avg))),
        }


def peak_voxel(avg) -> tuple | None:
    """Index of the largest finite value of ``avg`` (the first in C order on ties); None if there is none."""
    finite = np.isfinite(avg)
    if not finite.any():
        return None
    flat = int(np.argmax(np.where(finite, avg, -np.inf)))
    return tuple(int(i) for i in np.unravel_index(flat, avg.shape))


def _result(avg, status, edges, mass_kg, valid, side, cube_of_peak):
    idx = peak_voxel(avg)
    if idx is None:
        return AveragedSAR(mass_kg, avg, valid, status, side, float("nan"), (), (), BACKGROUND)
    cc = cell_centres(*edges)
    loc = tuple(float(cc[a][idx[a]]) for a in range(3))
    centre, L = cube_of_peak(idx)
    return AveragedSAR(mass_kg, avg, valid, status, side, float(avg[idx]), idx, loc, int(status[idx]),
                       tuple(float(c) for c in centre), float(L))


def _enclosed_max(valid_idx, avg_valid, lo, hi, edges, shape):
    """Largest average of the valid cubes that fully enclose each voxel; -inf where none.

    valid_idx (k, 3) cube centre voxels, avg_valid (k,), lo/hi (k, 3) cube bounds.
    """
    before = np.empty_like(valid_idx)
    after = np.empty_like(valid_idx)
    for a in range(3):
        e = edges[a]
        first = np.searchsorted(e, snap_to_mesh(e, lo[:, a]), side="left")  # first node >= lo
        last = np.searchsorted(e, snap_to_mesh(e, hi[:, a]), side="right") - 1  # last node <= hi
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
                S = trailing_max(S, w, ax)
        np.maximum(out, S, out=out)
    return out


def trailing_max(a: np.ndarray, w: int, axis: int) -> np.ndarray:
    """``out[..., v, ...] = max(a[..., v - w + 1 : v + 1, ...])`` along ``axis`` (indices before 0 count as
    ``-inf``), for ``w`` a power of two: ``log2(w)`` doublings ``M_2m[v] = max(M_m[v], M_m[v - m])``.

    Exact (a maximum rounds nothing); numpy only, so that the finish step does not import scipy.ndimage.
    """
    if w & (w - 1) or w < 1:
        raise ValueError(f"trailing_max: window {w} is not a power of two")
    out = np.array(a, dtype=float, copy=True)
    n = out.shape[axis]
    m = 1
    while m < w and m < n:
        dst = [slice(None)] * out.ndim
        src = [slice(None)] * out.ndim
        dst[axis], src[axis] = slice(m, None), slice(0, n - m)
        np.maximum(out[tuple(dst)], out[tuple(src)].copy(), out=out[tuple(dst)])
        m *= 2
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
    sar, rho, edges = check_inputs(sar, rho, x, y, z, mass_kg, max_air_fraction)
    shape = rho.shape
    tab = CubeTables(sar, rho, edges)
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
        return _result(avg, status, edges, mass_kg, valid, side, None)
    centre = np.stack([cc[a][tissue_idx[:, a]] for a in range(3)], axis=1)
    rho_c = rho[tuple(tissue_idx.T)]
    L0 = np.cbrt(mass_kg / rho_c)

    # step 1: centred cubes
    off_lo = np.broadcast_to(np.full(3, -0.5), (n, 3))
    off_hi = np.broadcast_to(np.full(3, 0.5), (n, 3))
    L = solve_side(tab, centre, off_lo, off_hi, mass_kg, L0, L_max, rtol=rtol)
    reach = np.isfinite(L)
    ok_idx = np.nonzero(reach)[0]
    lo = centre[ok_idx] - 0.5 * L[ok_idx, None]
    hi = centre[ok_idx] + 0.5 * L[ok_idx, None]
    cont = np.empty((ok_idx.size, 3))
    touch = np.ones(ok_idx.size, dtype=bool)
    for s in range(0, ok_idx.size, CHUNK):
        sl = slice(s, s + CHUNK)
        cont[sl] = tab.contents(lo[sl], hi[sl])
        if require_faces_in_tissue:
            touch[sl] = faces_touch_tissue(tab, lo[sl], hi[sl])
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
    enc = _enclosed_max(tissue_idx[vi], avg_valid, lo[is_valid], hi[is_valid], edges, shape)
    take = (rho > 0) & ~valid & np.isfinite(enc)
    avg[take] = enc[take]
    status[take] = ENCLOSED

    # step 2: face-centred cubes for the rest
    rest = np.argwhere((rho > 0) & (status == BACKGROUND))
    face_cube = {}  # the chosen face cubes of step 2 (voxels, face-centre points, direction index, side)
    if rest.size:
        m = rest.shape[0]
        rc = np.stack([cc[a][rest[:, a]] for a in range(3)], axis=1)
        L0r = np.cbrt(mass_kg / rho[tuple(rest.T)])
        Ls = np.full((6, m), np.nan)
        Ps = np.full((6, m), np.nan)
        for d, (ax, sgn) in enumerate(FACE_DIRS):
            ol, oh = face_offsets(ax, sgn)
            Ld = solve_side(tab, rc, np.broadcast_to(ol, (m, 3)), np.broadcast_to(oh, (m, 3)),
                             mass_kg, L0r, L_max, rtol=rtol)
            good = np.nonzero(np.isfinite(Ld))[0]
            for s in range(0, good.size, CHUNK):
                g = good[s : s + CHUNK]
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
        face_cube = {"rest": rest, "centres": rc, "best": best, "L": Ls[best, np.arange(m)]}

    v_lo, v_hi = lo[is_valid], hi[is_valid]

    def cube_of_peak(idx):
        """(centre, side) of the cube whose average the peak voxel ``idx`` holds."""
        st = status[idx]
        c = np.array([cc[a][idx[a]] for a in range(3)])
        if st == VALID:
            return c, side[idx]
        if st == ENCLOSED:
            # the valid cubes with exactly this average that enclose the voxel (the value was copied)
            cand = np.nonzero(avg_valid == avg[idx])[0]
            inside = np.ones(cand.size, dtype=bool)
            for a in range(3):
                inside &= snap_to_mesh(edges[a], v_lo[cand, a]) <= edges[a][idx[a]]
                inside &= edges[a][idx[a] + 1] <= snap_to_mesh(edges[a], v_hi[cand, a])
            if not inside.any():
                raise AssertionError(f"average_sar: no enclosing cube holds the average of voxel {idx}")
            j = cand[np.argmax(inside)]
            return 0.5 * (v_lo[j] + v_hi[j]), float(v_hi[j, 0] - v_lo[j, 0])
        k = int(np.nonzero(np.all(face_cube["rest"] == np.array(idx), axis=1))[0][0])
        ax, sgn = FACE_DIRS[int(face_cube["best"][k])]
        ol, oh = face_offsets(ax, sgn)
        L_k = float(face_cube["L"][k])
        return face_cube["centres"][k] + 0.5 * L_k * (ol + oh), L_k

    return _result(avg, status, edges, mass_kg, valid, side, cube_of_peak)


