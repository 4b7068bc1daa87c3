"""Segmented anatomy: a label volume (NumPy ``.npy`` or NIfTI ``.nii`` / ``.nii.gz``) as a phantom.

Every voxel holds an integer label; a table maps labels to tissue names (built-in Gabriel tissues or
the scene's own materials). Label 0 is background (air) unless the table names a tissue for it; a
label mapped to ``air`` is background too.

Placement: the array's axes are x, y, z in the order stored (a NIfTI file's affine orientation is not
applied). Without ``offset_m`` the tissue (every non-background voxel of the whole file) has its
bounding box centred on ``x = y = 0`` with its top face at ``z = 0`` (the body surface of every
phantom); ``offset_m`` shifts the volume from there. Cropping (``crop_from_m``, ``crop_to_m``, in the
volume's own frame: metres from the corner of its first voxel) keeps the voxels whose centres lie in
the box and does not move the anatomy.

Building merges voxels of equal tissue into boxes (:func:`merge_boxes`: runs along one axis, joined
across rows, then across slabs) and asks for a mesh line at every voxel face where the tissue changes.
The boxes do not overlap; on a face two of them share, the tissue listed later in ``labels`` wins (its
boxes have the higher priority), as a deeper layer of a layered phantom does.

The file's sha256 is part of the spec, so of the case identity; the voxels are not.
"""
from __future__ import annotations

import functools
import gzip
import hashlib
import io
from dataclasses import dataclass
from pathlib import Path
from typing import Mapping

import numpy as np

from .model import MeshHint, PhantomBuild
from .primitives import AXES, PRIORITY_ENCAPSULATION, PRIORITY_TISSUE, VoxelBox
from .specs import vector

#: name that maps a label to background
BACKGROUND = "air"
#: plausible overall size of the (cropped) volume in metres: a wrong unit of voxel_size_mm is 1000x off
MAX_VOLUME_M = 2.5
MIN_VOLUME_M = 2e-3
#: largest number of voxels after cropping (cost: the engine's boxes and the mesh lines)
MAX_VOXELS = 20_000_000


def _mm(v) -> str:
    return "(" + ", ".join(f"{c * 1e3:.4g}" for c in v) + ") mm"


def _nifti_from_bytes(data: bytes, name: str):
    import nibabel as nib

    raw = gzip.decompress(data) if name.endswith(".gz") else data
    last = None
    for cls in (nib.Nifti1Image, nib.Nifti2Image):
        try:
            return cls.from_bytes(raw)
        except Exception as e:  # nibabel raises several kinds for a foreign header
            last = e
    raise ValueError(f"not a readable NIfTI file ({str(last).splitlines()[0] if str(last) else type(last).__name__})")


@functools.lru_cache(maxsize=8)
def _read(path: str, mtime_ns: int, size: int) -> tuple[np.ndarray, tuple[float, float, float] | None, str]:
    """Labels (nx, ny, nz) int32 (read-only), the voxel size from a NIfTI header in metres (None for .npy) and
    the sha256 of the file; cached per path, modification time and size."""
    data = Path(path).read_bytes()
    digest = hashlib.sha256(data).hexdigest()
    header_voxel = None
    name = path.lower()
    if name.endswith(".npy"):
        try:
            arr = np.load(io.BytesIO(data), allow_pickle=False)
        except (ValueError, OSError, EOFError) as e:
            raise ValueError(f"not a readable .npy file ({str(e).splitlines()[0] if str(e) else type(e).__name__})") \
                from None
    elif name.endswith(".nii") or name.endswith(".nii.gz"):
        try:
            img = _nifti_from_bytes(data, name)
            arr = np.asanyarray(img.dataobj)
            zooms = tuple(float(z) for z in img.header.get_zooms()[:3])
            unit = img.header.get_xyzt_units()[0]
        except (ValueError, OSError, EOFError, gzip.BadGzipFile) as e:
            raise ValueError(str(e) if str(e).startswith("not a readable") else
                             f"not a readable NIfTI file ({str(e).splitlines()[0] if str(e) else type(e).__name__})") \
                from None
        scale = {"meter": 1.0, "mm": 1e-3, "micron": 1e-6}.get(unit, 1e-3)  # unknown: mm (the NIfTI habit)
        if len(zooms) == 3 and all(np.isfinite(zooms)) and all(z > 0 for z in zooms):
            header_voxel = tuple(z * scale for z in zooms)
    else:
        raise ValueError("has an unknown ending; a label volume is a .npy, .nii or .nii.gz file")
    if arr.dtype == object or arr.dtype.kind not in "biuf":
        raise ValueError(f"holds {arr.dtype} values; labels must be integers")
    if arr.ndim == 4 and arr.shape[3] == 1:
        arr = arr[..., 0]
    if arr.ndim != 3:
        raise ValueError(f"holds an array of shape {tuple(arr.shape)}; a label volume has three axes (x, y, z)")
    if arr.size == 0:
        raise ValueError("holds no voxels")
    if arr.dtype.kind == "f":
        if not np.all(np.isfinite(arr)):
            raise ValueError("holds values that are not finite numbers; labels must be integers")
        frac = arr[arr != np.round(arr)]
        if frac.size:
            raise ValueError(f"holds non-integer labels (e.g. {float(frac.flat[0]):g}, {frac.size} voxel(s)); "
                             "labels must be integers")
    if arr.dtype.kind == "b":
        arr = arr.astype(np.int32)
    if arr.min() < 0 or arr.max() > 2**31 - 1:
        raise ValueError(f"holds labels from {arr.min():g} to {arr.max():g}; labels must be integers from 0 to 2^31-1")
    out = np.ascontiguousarray(arr, dtype=np.int32)
    out.flags.writeable = False
    return out, header_voxel, digest


def load_labels(file: str) -> tuple[np.ndarray, tuple[float, float, float] | None, str]:
    """Checked labels (nx, ny, nz) of a label-volume file, the header's voxel size (metres or None), sha256.

    Raises
    ------
    ValueError
        One line naming the file and its defect (missing, unreadable, not three axes, non-integer labels).
    """
    p = Path(file)
    where = f"label volume {file}"
    try:
        st = p.stat()
    except OSError:
        raise ValueError(f"{where}: no such file (a relative path is read from the study file's folder)") from None
    if not p.is_file():
        raise ValueError(f"{where}: not a file")
    try:
        return _read(str(p.resolve()), st.st_mtime_ns, st.st_size)
    except ValueError as e:
        raise ValueError(f"{where}: {e}") from None


def merge_boxes(ids: np.ndarray, background: int = -1, order: tuple[int, int, int] = (2, 1, 0)):
    """Disjoint boxes covering every voxel of equal id (background left out), as voxel index ranges.

    Runs of equal ids along axis ``order[0]`` are joined across neighbouring rows along ``order[1]`` where
    they start, end and hold the same, then across slabs along ``order[2]`` where the rectangles agree
    (greedy, exact: every non-background voxel lies in exactly one box of its id).

    Parameters
    ----------
    ids : ndarray of int, shape (nx, ny, nz)
    background : int
        Id left out (air).
    order : permutation of (0, 1, 2)

    Returns
    -------
    lo, hi : ndarray of int, shape (n, 3)
        First voxel and one past the last along x, y, z.
    value : ndarray of int, shape (n,)
    """
    a0, a1, a2 = order
    A = np.transpose(ids, (a2, a1, a0))  # runs along the last axis
    n0 = A.shape[2]
    start = np.ones(A.shape, dtype=bool)
    start[..., 1:] = A[..., 1:] != A[..., :-1]
    i2, i1, s = np.nonzero(start)
    e = np.empty_like(s)
    e[:-1] = s[1:]
    row_end = (i2[:-1] != i2[1:]) | (i1[:-1] != i1[1:])
    e[:-1][row_end] = n0
    e[-1] = n0
    v = A[i2, i1, s]
    keep = v != background
    i2, i1, s, e, v = i2[keep], i1[keep], s[keep], e[keep], v[keep]

    def join(keys: list[np.ndarray], pos: np.ndarray):
        """Group items equal in ``keys`` with consecutive ``pos``; returns (first index per group, first pos, last+1)."""
        if pos.size == 0:
            return np.zeros(0, int), pos, pos
        o = np.lexsort([pos] + keys[::-1])
        same = np.ones(pos.size - 1, dtype=bool)
        for k in keys:
            ks = k[o]
            same &= ks[1:] == ks[:-1]
        p = pos[o]
        cont = same & (p[1:] == p[:-1] + 1)
        first = np.concatenate([[True], ~cont])
        gid = np.cumsum(first) - 1
        starts = np.flatnonzero(first)
        stop = np.zeros(starts.size, dtype=pos.dtype)
        np.maximum.at(stop, gid, p + 1)
        return o[starts], p[starts], stop

    idx, j0, j1 = join([i2, s, e, v], i1)  # rows along order[1]
    i2, s, e, v = i2[idx], s[idx], e[idx], v[idx]
    idx, k0, k1 = join([j0, j1, s, e, v], i2)  # slabs along order[2]
    j0, j1, s, e, v = j0[idx], j1[idx], s[idx], e[idx], v[idx]
    lo = np.zeros((v.size, 3), dtype=np.int64)
    hi = np.zeros((v.size, 3), dtype=np.int64)
    lo[:, a0], hi[:, a0] = s, e
    lo[:, a1], hi[:, a1] = j0, j1
    lo[:, a2], hi[:, a2] = k0, k1
    return lo, hi, v


def fewest_boxes(ids: np.ndarray, background: int = -1):
    """:func:`merge_boxes` over the three orders that run along x, y or z first; the one with fewest boxes."""
    best = None
    for order in ((0, 1, 2), (1, 2, 0), (2, 0, 1)):
        r = merge_boxes(ids, background, order)
        if best is None or r[2].size < best[2].size:
            best = r
    return best


def change_faces(ids: np.ndarray, axis: int, background: int = -1) -> np.ndarray:
    """Indexes k (0..n) of the voxel faces along ``axis`` where the id changes somewhere (background outside)."""
    pad = [(0, 0)] * 3
    pad[axis] = (1, 1)
    P = np.pad(ids, pad, constant_values=background)
    d = np.diff(P, axis=axis) != 0
    other = tuple(i for i in range(3) if i != axis)
    return np.flatnonzero(d.any(axis=other))


@dataclass(frozen=True)
class LabelEntry:
    """One row of the label table: an integer label and the tissue (material name or ``air``) it stands for."""

    label: int
    tissue: str

    def __post_init__(self):
        if isinstance(self.label, bool) or not isinstance(self.label, (int, np.integer)) or self.label < 0:
            raise ValueError(f"label volume: label must be an integer >= 0, got {self.label!r}")
        object.__setattr__(self, "label", int(self.label))
        if not isinstance(self.tissue, str) or not self.tissue:
            raise ValueError(f"label volume: label {self.label}: tissue must be a material name or 'air', "
                             f"got {self.tissue!r}")

    def to_dict(self) -> dict:
        return {"label": self.label, "tissue": self.tissue}


@dataclass(frozen=True)
class LabelVolume:
    """A phantom from a segmented label volume.

    Parameters
    ----------
    file : str
        Path of the ``.npy`` / ``.nii`` / ``.nii.gz`` file (the study loader makes a relative path absolute).
    labels : tuple of LabelEntry
        Label -> tissue. Label 0 not listed is air; any other label present in the volume must be listed.
    voxel_size_m : (dx, dy, dz) or None
        Voxel size; None takes it from a NIfTI header (required for ``.npy``).
    offset_m : (x, y, z)
        Shift of the volume from its default place (tissue centred on x = y = 0, top face at z = 0).
    crop_from_m, crop_to_m : (x, y, z) or None
        Box of interest in the volume's own frame (metres from the first voxel's corner); None keeps all.
    sha256 : str
        Content hash of the file; empty to take the file as it is now, otherwise the file must still match.
    """

    file: str
    labels: tuple[LabelEntry, ...]
    voxel_size_m: tuple[float, float, float] | None = None
    offset_m: tuple[float, float, float] = (0.0, 0.0, 0.0)
    crop_from_m: tuple[float, float, float] | None = None
    crop_to_m: tuple[float, float, float] | None = None
    sha256: str = ""

    type = "label_volume"

    def __post_init__(self):
        if not isinstance(self.file, str) or not self.file:
            raise ValueError(f"label volume: file must be a path to a .npy or NIfTI file, got {self.file!r}")
        where = f"label volume {self.file}"
        rows = tuple(r if isinstance(r, LabelEntry) else _entry(r) for r in self.labels)
        if not rows:
            raise ValueError(f"{where}: labels needs at least one entry {{label, tissue}}")
        seen = [r.label for r in rows]
        dup = sorted({x for x in seen if seen.count(x) > 1})
        if dup:
            raise ValueError(f"{where}: label {dup[0]} is given twice in labels")
        object.__setattr__(self, "labels", rows)
        object.__setattr__(self, "offset_m", vector(where, "offset_m", self.offset_m, 3))
        if self.offset_m[2] > 0:
            raise ValueError(f"{where}: offset_m z {self.offset_m[2] * 1e3:.4g} mm lifts the tissue above z = 0, the "
                             "body surface the external antenna stands off from; use 0 or less")
        for k in ("crop_from_m", "crop_to_m"):
            if getattr(self, k) is not None:
                object.__setattr__(self, k, vector(where, k, getattr(self, k), 3))
        arr, header, digest = load_labels(self.file)
        if self.sha256 and self.sha256 != digest:
            raise ValueError(f"{where}: its content changed since the case was made (sha256 {digest[:12]}, the case "
                             f"has {self.sha256[:12]}); expand the study again")
        object.__setattr__(self, "sha256", digest)
        if self.voxel_size_m is None:
            if header is None:
                raise ValueError(f"{where}: voxel_size_m is required (a .npy file carries no voxel size)")
            object.__setattr__(self, "voxel_size_m", tuple(float(h) for h in header))
        else:
            vs = vector(where, "voxel_size_m", self.voxel_size_m, 3)
            if any(h <= 0 for h in vs):
                raise ValueError(f"{where}: voxel_size_m must be three numbers > 0 m, got {list(vs)}")
            if header is not None and not np.allclose(vs, header, rtol=1e-4):
                raise ValueError(f"{where}: voxel_size_m {list(vs)} m differs from the file header's "
                                 f"{[round(h, 9) for h in header]} m; leave voxel_size_m out or correct it")
            object.__setattr__(self, "voxel_size_m", vs)
        self._check(arr)

    # ------------------------------------------------------------------ the voxels
    def table(self) -> dict[int, str]:
        t = {r.label: r.tissue for r in self.labels}
        t.setdefault(0, BACKGROUND)
        return t

    def tissue_names(self) -> list[str]:
        """Tissues the table refers to (air left out), in table order."""
        return list(dict.fromkeys(r.tissue for r in self.labels if r.tissue != BACKGROUND))

    def _crop_slices(self, shape) -> tuple[slice, slice, slice]:
        h = np.asarray(self.voxel_size_m)
        n = np.asarray(shape)
        if self.crop_from_m is None and self.crop_to_m is None:
            return tuple(slice(0, int(k)) for k in n)  # type: ignore[return-value]
        a = np.zeros(3) if self.crop_from_m is None else np.asarray(self.crop_from_m)
        b = n * h if self.crop_to_m is None else np.asarray(self.crop_to_m)
        where = f"label volume {self.file}"
        if np.any(b <= a):
            raise ValueError(f"{where}: crop_to_m {_mm(b)} must lie above crop_from_m {_mm(a)} along every axis")
        i0 = np.maximum(0, np.ceil(a / h - 0.5 - 1e-9)).astype(int)  # voxel centres (i + 0.5) h inside [a, b]
        i1 = np.minimum(n, np.floor(b / h - 0.5 + 1e-9).astype(int) + 1)
        if np.any(i1 <= i0):
            raise ValueError(f"{where}: the crop box {_mm(a)} to {_mm(b)} holds no voxel of the volume, which spans "
                             f"{_mm(np.zeros(3))} to {_mm(n * h)} in its own frame")
        return tuple(slice(int(p), int(q)) for p, q in zip(i0, i1))  # type: ignore[return-value]

    def _check(self, arr: np.ndarray) -> None:
        where = f"label volume {self.file}"
        h = np.asarray(self.voxel_size_m)
        size = np.asarray(arr.shape) * h
        if size.max() > MAX_VOLUME_M:
            raise ValueError(f"{where}: the volume is {_mm(size)} with voxel_size_m {_mm(h)}, larger than "
                             f"{MAX_VOLUME_M * 1e3:g} mm; check voxel_size_mm (millimetres)")
        if size.max() < MIN_VOLUME_M:
            raise ValueError(f"{where}: the volume is {_mm(size)} with voxel_size_m {_mm(h)}, smaller than "
                             f"{MIN_VOLUME_M * 1e3:g} mm; check voxel_size_mm (millimetres)")
        table = self.table()
        present, counts = np.unique(arr, return_counts=True)
        missing = [(int(p), int(c)) for p, c in zip(present, counts) if int(p) not in table]
        if missing:
            text = ", ".join(f"{p} ({c} voxels)" for p, c in missing[:5])
            raise ValueError(f"{where}: label(s) {text} have no tissue in labels; add {{label, tissue}} entries "
                             f"(tissue 'air' for background)")
        sl = self._crop_slices(arr.shape)
        n = int(np.prod([s.stop - s.start for s in sl]))
        if n > MAX_VOXELS:
            raise ValueError(f"{where}: {n} voxels after cropping, more than {MAX_VOXELS}; crop to a box of interest "
                             f"(crop_from_mm, crop_to_mm)")
        if not np.any(self._tissue_ids(arr) != -1):
            raise ValueError(f"{where}: no voxel holds a tissue (every label present maps to air)")
        if not np.any(self._tissue_ids(arr)[sl] != -1):
            raise ValueError(f"{where}: the crop box holds no tissue voxel")

    def _tissue_ids(self, arr: np.ndarray) -> np.ndarray:
        """Per voxel the index into :meth:`tissue_names`, -1 for air; shape of ``arr``."""
        names = self.tissue_names()
        table = self.table()
        lut_keys = np.array(sorted(table), dtype=np.int64)
        lut_vals = np.array([names.index(table[k]) if table[k] != BACKGROUND else -1 for k in lut_keys])
        return lut_vals[np.searchsorted(lut_keys, arr)]

    @functools.cached_property
    def _layout(self):
        """(tissue ids of the cropped volume (nx, ny, nz), scene coordinate of its first corner (3,), voxel (3,))."""
        arr, _, _ = load_labels(self.file)
        ids = self._tissue_ids(arr)
        h = np.asarray(self.voxel_size_m)
        body = np.argwhere(ids != -1)
        lo_i, hi_i = body.min(0), body.max(0) + 1
        corner = -0.5 * (lo_i + hi_i) * h  # tissue bounding box centred on x = y = 0 ...
        corner[2] = -hi_i[2] * h[2]  # ... with its top face at z = 0
        corner = corner + np.asarray(self.offset_m)
        sl = self._crop_slices(arr.shape)
        start = np.array([s.start for s in sl])
        return ids[sl], corner + start * h, h

    def voxel_edges(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Face coordinates of the cropped voxels along x, y, z (metres), shapes (nx+1,), (ny+1,), (nz+1,)."""
        ids, c, h = self._layout
        # rounded to 1e-12 m so that faces meant at whole millimetres are written as such (no 1e-18 m noise)
        return tuple(np.round(c[i] + h[i] * np.arange(ids.shape[i] + 1), 12) + 0.0
                     for i in range(3))  # type: ignore[return-value]

    def build(self):
        ids, c, h = self._layout
        names = self.tissue_names()
        lo, hi, v = fewest_boxes(ids)
        edges = self.voxel_edges()
        prims = []
        for k in np.argsort(v, kind="stable"):
            start = tuple(float(edges[i][lo[k, i]]) for i in range(3))
            stop = tuple(float(edges[i][hi[k, i]]) for i in range(3))
            prims.append(VoxelBox(f"voxels_{names[v[k]]}_{len(prims)}", names[v[k]], start, stop,
                                  priority=min(PRIORITY_TISSUE + int(v[k]), PRIORITY_ENCAPSULATION - 1)))
        hints = []
        for i, a in enumerate(AXES):
            for k in change_faces(ids, i):
                hints.append(MeshHint(a, float(edges[i][k]), float(edges[i][k]), 0.0, "label volume tissue boundary"))
        body = np.argwhere(ids != -1)
        blo = tuple(float(edges[i][body[:, i].min()]) for i in range(3))
        bhi = tuple(float(edges[i][body[:, i].max() + 1]) for i in range(3))
        return PhantomBuild(tuple(prims), tuple(hints), (blo, bhi))  # type: ignore[arg-type]

    def contains(self, points) -> np.ndarray:
        """Whether points (shape (n, 3)) lie in a tissue voxel of the cropped volume; returns shape (n,) bool."""
        p = np.atleast_2d(np.asarray(points, dtype=float))
        ids, c, h = self._layout
        k = np.floor((p - c) / h).astype(np.int64)
        ok = np.all((k >= 0) & (k < np.asarray(ids.shape)), axis=1)
        out = np.zeros(len(p), dtype=bool)
        kk = k[ok]
        out[ok] = ids[kk[:, 0], kk[:, 1], kk[:, 2]] != -1
        return out

    def tissue_index(self, points) -> np.ndarray:
        """Index into :meth:`tissue_names` of the tissue at each point (shape (n, 3)), -1 for air; shape (n,)."""
        p = np.atleast_2d(np.asarray(points, dtype=float))
        ids, c, h = self._layout
        k = np.clip(np.floor((p - c) / h).astype(np.int64), 0, np.asarray(ids.shape) - 1)
        return np.where(self.contains(p), ids[k[:, 0], k[:, 1], k[:, 2]], -1)

    def tissue_at(self, points) -> list[str]:
        """Tissue name (or ``air``) at each point, length n."""
        p = np.atleast_2d(np.asarray(points, dtype=float))
        ids, c, h = self._layout
        k = np.clip(np.floor((p - c) / h).astype(np.int64), 0, np.asarray(ids.shape) - 1)
        inside = self.contains(p)
        names = self.tissue_names()
        return [names[ids[tuple(q)]] if ok else BACKGROUND for q, ok in zip(k, inside)]

    def to_dict(self) -> dict:
        d = {"type": self.type, "file": self.file, "sha256": self.sha256,
             "voxel_size_m": list(self.voxel_size_m), "labels": [r.to_dict() for r in self.labels],
             "offset_m": list(self.offset_m)}
        if self.crop_from_m is not None:
            d["crop_from_m"] = list(self.crop_from_m)
        if self.crop_to_m is not None:
            d["crop_to_m"] = list(self.crop_to_m)
        return d

    @classmethod
    def from_dict(cls, d: Mapping) -> "LabelVolume":
        from .specs import construct

        rows = d.get("labels", ())
        if not isinstance(rows, (list, tuple)):
            raise ValueError(f"label volume: labels must be a list of {{label, tissue}}, got {rows!r}")
        return construct(cls, d, "label volume", labels=tuple(_entry(r) for r in rows))


def _entry(r) -> LabelEntry:
    if not isinstance(r, Mapping) or set(r) != {"label", "tissue"}:
        raise ValueError(f"label volume: each entry of labels must be {{label: integer, tissue: name}}, got {r!r}")
    return LabelEntry(r["label"], r["tissue"])


__all__ = ["LabelVolume", "LabelEntry", "load_labels", "merge_boxes", "fewest_boxes", "change_faces",
           "MAX_VOLUME_M", "MIN_VOLUME_M"]
