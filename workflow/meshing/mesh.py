"""Automatic rectilinear FDTD mesh for one scene at one frequency (pure numpy, no solver import).

How the lines come about, per axis
----------------------------------
1. **Domain.** The structures (every primitive and port) get an air margin of
   ``air_margin_wavelengths * lambda0``; then ``pml_cells`` cells of absorbing layer are added
   outside (none for Mur). The inner faces of the absorbing layer are :attr:`MeshPlan.interior_bounds`.
   A phantom that reaches further than :data:`BODY_REACH_WAVELENGTHS` free-space wavelengths beyond
   the antennas, implant and ports (a "semi-infinite" slab) is clipped: on that side the interior
   bound is placed at that reach and the tissue must *end* there, with air inside the PML
   (lossy tissue inside a PML keeps the energy from decaying, so the run would not end).
2. **Fixed lines** (each with a priority and a reason): interior bounds, port gap ends, thin wires
   and zero-thickness sheets (openEMS puts 0-thickness metal on mesh lines), conductor edges,
   fixed-line mesh hints, and the faces of dielectric primitives (layer interfaces). The boxes of a
   label volume (:class:`VoxelBox`) bring no lines of their own: the volume's hints put one at every
   voxel face where the tissue changes.
3. **Merge.** Fixed lines closer than the merge threshold (``min_cell_m``, or a quarter of the
   finest requested cell) are merged, keeping the more important line.
4. **Size limits** (upper bounds on the cell size inside an interval): ``lambda / cells_per_wavelength``
   in each material's bounding box (air elsewhere), layer thickness / ``min_cells_per_layer``,
   gap / ``port_cells`` inside each port gap and at the edges of that antenna's conductors,
   region hints. Their lower envelope, made to grow no faster than the grading allows, is the
   target size field.
5. **Fill.** Between neighbouring fixed lines, lines are placed so that the cells equidistribute
   the target size field (cells never larger than it), then any neighbour pair still above
   ``max_growth_ratio`` is repaired by inserting lines on the larger side.

Everything is in metres.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from bodysweep.geometry.model import SceneModel
from bodysweep.geometry.meshgeom import face_planes
from bodysweep.geometry.primitives import AXES, Cylinder, Polygon, Polyhedron, VoxelBox, Wire

from .mesh_fill import (_GRADING_SLOPE_FRACTION, _GapEnvelope, _axis_lines, _graded_split,  # noqa: F401
                        _integral, _sample_count, _samples, _short_gap_cells, cells_needed, equidistribute,
                        repair_grading, size_envelope)
from .settings import SolverSettings

C0 = 299_792_458.0  # speed of light in vacuum, m/s (SI definition)

#: a phantom is clipped where it reaches further than this (free-space wavelengths) beyond the
#: structures that are not tissue (antennas, implant, ports)
BODY_REACH_WAVELENGTHS = 0.5
#: check_mesh refuses a cell smaller than this fraction of the smallest geometric feature
SLIVER_FRACTION = 0.1

# fixed-line priorities (higher survives a merge)
P_BOUND, P_PORT, P_THIN, P_CONDUCTOR, P_HINT, P_DIELECTRIC = 10, 6, 5, 4, 3, 2

class MeshRefused(ValueError):
    """The mesh is unusable for this scene (e.g. a sliver cell that would set a tiny timestep)."""


@dataclass(frozen=True)
class MeshPlan:
    """The mesh lines of one case and why they exist.

    Attributes
    ----------
    lines_x, lines_y, lines_z : ndarray, shape (n_x,), (n_y,), (n_z,)
        Strictly increasing mesh line coordinates in metres, absorbing-layer cells included.
    interior_bounds : ((x0, y0, z0), (x1, y1, z1))
        Inner faces of the absorbing boundary (equal to the domain faces for Mur). Tissue primitives
        must be clipped to this box (see :meth:`clip_to_interior`).
    absorbing_cells : int
        Cells of absorbing layer at each of the six faces (``pml_cells`` for PML, 0 for Mur).
    merge_threshold_m : float
        Fixed lines closer than this were merged.
    fixed : dict of str to tuple of (float, str)
        Per axis, the fixed lines that survived merging with their reason.
    notes : tuple of str
        Human-readable notes: size limits, merges, clipping of the phantom.
    clipped_body : tuple of str
        ``"x-"``, ``"z+"``, ... for each side where the phantom was clipped at the interior bound.
    """

    lines_x: np.ndarray
    lines_y: np.ndarray
    lines_z: np.ndarray
    interior_bounds: tuple[tuple[float, float, float], tuple[float, float, float]]
    absorbing_cells: int
    merge_threshold_m: float
    fixed: dict[str, tuple[tuple[float, str], ...]] = field(default_factory=dict)
    notes: tuple[str, ...] = ()
    clipped_body: tuple[str, ...] = ()

    def lines(self, axis: str | int) -> np.ndarray:
        """Mesh lines along ``axis`` (``'x'|'y'|'z'`` or 0, 1, 2), shape ``(n,)``."""
        i = AXES.index(axis) if isinstance(axis, str) else int(axis)
        return (self.lines_x, self.lines_y, self.lines_z)[i]

    @property
    def shape_cells(self) -> tuple[int, int, int]:
        """Number of cells along x, y, z."""
        return tuple(len(self.lines(i)) - 1 for i in range(3))  # type: ignore[return-value]

    @property
    def n_cells(self) -> int:
        nx, ny, nz = self.shape_cells
        return nx * ny * nz

    @property
    def smallest_cell(self) -> tuple[float, float, float]:
        """Smallest cell size along x, y, z in metres."""
        return tuple(float(np.diff(self.lines(i)).min()) for i in range(3))  # type: ignore[return-value]

    @property
    def largest_cell(self) -> tuple[float, float, float]:
        """Largest cell size along x, y, z in metres."""
        return tuple(float(np.diff(self.lines(i)).max()) for i in range(3))  # type: ignore[return-value]

    def max_neighbour_ratio(self, axis: str | int) -> float:
        """Largest size ratio of neighbouring cells along ``axis`` (1 for a uniform mesh)."""
        h = np.diff(self.lines(axis))
        if len(h) < 2:
            return 1.0
        return float(np.max(np.maximum(h[1:] / h[:-1], h[:-1] / h[1:])))

    def clip_to_interior(self, lo, hi) -> tuple[tuple[float, ...], tuple[float, ...]] | None:
        """Clip an axis-aligned box ``(lo, hi)`` (metres) to the interior; ``None`` if nothing is left."""
        ilo, ihi = self.interior_bounds
        clo = tuple(max(float(a), b) for a, b in zip(lo, ilo))
        chi = tuple(min(float(a), b) for a, b in zip(hi, ihi))
        if any(a >= b for a, b in zip(clo, chi)):
            return None
        return clo, chi

    def to_dict(self) -> dict:
        return {
            "lines_x": self.lines_x.tolist(), "lines_y": self.lines_y.tolist(), "lines_z": self.lines_z.tolist(),
            "interior_bounds": [list(self.interior_bounds[0]), list(self.interior_bounds[1])],
            "absorbing_cells": self.absorbing_cells, "merge_threshold_m": self.merge_threshold_m,
            "fixed": {a: [list(t) for t in v] for a, v in self.fixed.items()},
            "notes": list(self.notes), "clipped_body": list(self.clipped_body),
        }

    @classmethod
    def from_dict(cls, d: dict) -> "MeshPlan":
        return cls(
            lines_x=np.asarray(d["lines_x"], float), lines_y=np.asarray(d["lines_y"], float),
            lines_z=np.asarray(d["lines_z"], float),
            interior_bounds=(tuple(d["interior_bounds"][0]), tuple(d["interior_bounds"][1])),  # type: ignore[arg-type]
            absorbing_cells=int(d["absorbing_cells"]), merge_threshold_m=float(d["merge_threshold_m"]),
            fixed={a: tuple((float(p), str(r)) for p, r in v) for a, v in d.get("fixed", {}).items()},
            notes=tuple(d.get("notes", ())), clipped_body=tuple(d.get("clipped_body", ())),
        )


# ----------------------------------------------------------------------------------------------
# pure helpers over numpy arrays
# ----------------------------------------------------------------------------------------------
def wavelength_in_material(frequency_Hz: float, eps_r: float) -> float:
    """Wavelength ``c0 / (f sqrt(eps_r))`` in metres (lossless approximation)."""
    return C0 / (frequency_Hz * np.sqrt(eps_r))


def merge_fixed_lines(cands: list[tuple[float, int, str]], threshold: float, keep_apart: float = math.inf,
                      notes: list[str] | None = None) -> list[tuple[float, int, str]]:
    """Merge fixed lines closer than ``threshold``: the lower priority goes (ties: the later one).

    ``cands`` holds ``(position, priority, reason)``. Returns the survivors sorted by position.
    Two port lines (gap ends and feeds, often of different antennas at nearby heights) are never merged:
    a feed gap must end on a mesh line, and moving one would change that antenna's feed. When they are at
    least ``keep_apart`` apart (a cell the mesh check accepts) both stay, the fill grades down to the
    small cell between them, and a note says so; closer than that raises :class:`MeshRefused`. Two
    domain bounds closer than the threshold raise :class:`MeshRefused` as well.
    """
    pts = sorted(cands)
    # exact duplicates first: keep the highest priority, join reasons
    merged: list[list] = []
    for p, pr, why in pts:
        if merged and abs(p - merged[-1][0]) <= 1e-12:
            if pr > merged[-1][1]:
                merged[-1][1], merged[-1][2] = pr, why
            continue
        merged.append([p, pr, why])
    kept_pairs: set[tuple[float, float]] = set()
    while len(merged) > 1:
        pos = np.array([m[0] for m in merged])
        gaps = np.diff(pos)
        for j in range(len(gaps)):  # port line pairs kept apart take no further part
            if (merged[j][0], merged[j + 1][0]) in kept_pairs:
                gaps[j] = np.inf
        j = int(np.argmin(gaps))
        if gaps[j] >= threshold:
            break
        a, b = merged[j], merged[j + 1]
        if a[1] == b[1] == P_BOUND:
            raise MeshRefused(f"two domain bounds {a[0]*1e3:.4f} mm and {b[0]*1e3:.4f} mm are closer than the "
                              f"merge threshold {threshold*1e3:.4f} mm")
        drop = j + 1 if a[1] >= b[1] else j
        keep = merged[j] if drop == j + 1 else merged[j + 1]
        gone = merged[drop]
        if gone[1] == P_PORT and keep[1] == P_PORT:
            if gaps[j] < keep_apart:
                raise MeshRefused(
                    f"port lines at {a[0]*1e3:.4f} mm ({a[2]}) and {b[0]*1e3:.4f} mm ({b[2]}) are only "
                    f"{gaps[j]*1e3:.4f} mm apart: a cell that small (under {keep_apart*1e3:.4f} mm, "
                    f"{SLIVER_FRACTION} of the smallest feature) is refused and merging them would change a feed "
                    f"gap; move one antenna (position_mm, depth_mm, standoff_mm) or change a feed_gap_mm")
            kept_pairs.add((a[0], b[0]))
            if notes is not None:
                notes.append(f"port lines at {a[0]*1e3:.4f} mm ({a[2]}) and {b[0]*1e3:.4f} mm ({b[2]}) kept "
                             f"{gaps[j]*1e3:.4f} mm apart (under the merge threshold {threshold*1e3:.4f} mm; a feed "
                             f"gap must end on a line)")
            continue
        del merged[drop]
    return [tuple(m) for m in merged]  # type: ignore[misc]


# ----------------------------------------------------------------------------------------------
# scene -> per-axis requirements
# ----------------------------------------------------------------------------------------------
def _is_metal(model: SceneModel, material: str) -> bool:
    return model.material(material).kind in ("pec", "conductor")


def _is_tissue(model: SceneModel, material: str) -> bool:
    return model.material(material).is_tissue


def _port_fine_sizes(model: SceneModel, settings: SolverSettings) -> list[tuple[np.ndarray, float]]:
    """``(centre, fine cell size)`` for each port: gap length / port_cells."""
    out = []
    for p in model.ports:
        i = AXES.index(p.axis)
        gap = abs(p.stop[i] - p.start[i])
        out.append((np.asarray(p.centre), gap / settings.port_cells))
    return out


def _nearest_fine(lo, hi, fines: list[tuple[np.ndarray, float]], default: float) -> float:
    if not fines:
        return default
    lo, hi = np.asarray(lo), np.asarray(hi)
    best, best_d = default, np.inf
    for c, h in fines:
        d = float(np.linalg.norm(np.maximum(0.0, np.maximum(lo - c, c - hi))))
        if d < best_d:
            best, best_d = h, d
    return best


def _interior_bounds(model: SceneModel, settings: SolverSettings):
    """Interior box and the sides where the phantom is clipped."""
    lam0 = C0 / model.frequency_Hz
    margin = settings.air_margin_wavelengths * lam0
    reach = BODY_REACH_WAVELENGTHS * lam0
    full_lo, full_hi = (np.asarray(v, float) for v in model.bounds())
    core = [p.bounds() for p in model.primitives if not _is_tissue(model, p.material)]
    core += [p.bounds() for p in model.ports]
    if core:
        core_lo = np.min([c[0] for c in core], axis=0)
        core_hi = np.max([c[1] for c in core], axis=0)
    else:
        core_lo, core_hi = full_lo, full_hi
    lo, hi = full_lo - margin, full_hi + margin
    clipped, notes = [], []
    for i, a in enumerate(AXES):
        if full_lo[i] < core_lo[i] - reach:
            lo[i] = core_lo[i] - reach
            clipped.append(f"{a}-")
        if full_hi[i] > core_hi[i] + reach:
            hi[i] = core_hi[i] + reach
            clipped.append(f"{a}+")
    for side in clipped:
        i = AXES.index(side[0])
        bound = lo[i] if side[1] == "-" else hi[i]
        notes.append(f"phantom clipped at {side[0]} = {bound*1e3:.2f} mm (reaches more than "
                     f"{BODY_REACH_WAVELENGTHS} wavelengths beyond the antennas); tissue must end there")
    return lo, hi, tuple(clipped), notes


def _requirements(model: SceneModel, settings: SolverSettings, lo: np.ndarray, hi: np.ndarray):
    """Per axis: fixed-line candidates ``[(pos, prio, reason)]`` and size limits ``[(lo, hi, h, reason)]``."""
    n = settings.cells_per_wavelength
    f = model.frequency_Hz
    h_air = wavelength_in_material(f, 1.0) / n
    fines = _port_fine_sizes(model, settings)
    fixed = {a: [] for a in AXES}
    limits = {a: [] for a in AXES}
    for i, a in enumerate(AXES):
        fixed[a] += [(float(lo[i]), P_BOUND, "interior bound (absorbing boundary inner face)"),
                     (float(hi[i]), P_BOUND, "interior bound (absorbing boundary inner face)")]
        limits[a].append((float(lo[i]), float(hi[i]), h_air, "air lambda/N"))

    def inside(i, v):
        return lo[i] < v < hi[i]

    def add_line(i, v, prio, why):
        if inside(i, v):
            fixed[AXES[i]].append((float(v), prio, why))

    def add_limit(i, a_, b_, h, why):
        a_, b_ = max(a_, lo[i]), min(b_, hi[i])
        if b_ >= a_:
            limits[AXES[i]].append((float(a_), float(b_), float(h), why))

    voxel_extent: dict[str, tuple[np.ndarray, np.ndarray]] = {}  # label-volume tissue -> union of its boxes
    for p in model.primitives:
        plo, phi = p.bounds()
        if isinstance(p, VoxelBox):  # lines come from the volume's hints (tissue changes), limits per tissue below
            a_, b_ = voxel_extent.get(p.material, (np.asarray(plo), np.asarray(phi)))
            voxel_extent[p.material] = (np.minimum(a_, plo), np.maximum(b_, phi))
            continue
        mat = model.material(p.material)
        metal = mat.kind in ("pec", "conductor")
        if metal:
            fine = _nearest_fine(plo, phi, fines, h_air)
            thin_axes: set[int] = set()
            if isinstance(p, Wire) and p.radius == 0.0:
                for q0, q1 in zip(p.points[:-1], p.points[1:]):
                    for i in range(3):
                        if q0[i] == q1[i]:
                            thin_axes.add(i)
                            add_line(i, q0[i], P_THIN, f"thin wire {p.name}")
                            add_limit(i, q0[i], q0[i], fine, f"next to thin wire {p.name}")
                        else:
                            for v in (q0[i], q1[i]):
                                add_line(i, v, P_CONDUCTOR, f"wire {p.name} end/bend")
                                add_limit(i, v, v, fine, f"wire {p.name} end")
                continue
            if isinstance(p, Polygon):
                nrm = AXES.index(p.normal)
                if p.thickness == 0.0:
                    add_line(nrm, p.elevation, P_THIN, f"sheet {p.name}")
                    add_limit(nrm, p.elevation, p.elevation, fine, f"next to sheet {p.name}")
                    thin_axes.add(nrm)
                ax0, ax1 = p.plane_axes()
                pts = list(p.points) + [p.points[0]]
                for (u0, v0), (u1, v1) in zip(pts[:-1], pts[1:]):
                    if u0 == u1:  # edge parallel to the second plane axis -> a line on the first
                        add_line(ax0, u0, P_CONDUCTOR, f"sheet {p.name} edge")
                        add_limit(ax0, u0, u0, fine, f"sheet {p.name} edge")
                    if v0 == v1:
                        add_line(ax1, v0, P_CONDUCTOR, f"sheet {p.name} edge")
                        add_limit(ax1, v0, v0, fine, f"sheet {p.name} edge")
            for i in range(3):
                if i in thin_axes:
                    continue
                for v in (plo[i], phi[i]):
                    add_line(i, v, P_CONDUCTOR, f"conductor {p.name} edge")
                    add_limit(i, v, v, fine, f"conductor {p.name} edge")
        else:
            h_mat = wavelength_in_material(f, mat.eps_r) / n
            for i in range(3):
                ext = phi[i] - plo[i]
                add_limit(i, plo[i], phi[i], h_mat, f"{mat.name} lambda/N ({p.name})")
                if ext > 0:
                    add_limit(i, plo[i], phi[i], ext / settings.min_cells_per_layer,
                              f"{p.name} thickness / min_cells_per_layer")
                for v in (plo[i], phi[i]):
                    add_line(i, v, P_DIELECTRIC, f"{p.name} face")
    for name, (vlo, vhi) in voxel_extent.items():
        h_mat = wavelength_in_material(f, model.material(name).eps_r) / n
        for i in range(3):
            add_limit(i, vlo[i], vhi[i], h_mat, f"{name} lambda/N (label volume)")
    for port in model.ports:
        k = AXES.index(port.axis)
        plo, phi = port.bounds()
        gap = phi[k] - plo[k]
        fine = gap / settings.port_cells
        for i in range(3):
            if i == k:
                for v in (plo[i], phi[i]):
                    add_line(i, v, P_PORT, f"port {port.number} gap end")
                add_limit(i, plo[i], phi[i], fine, f"port {port.number} gap / port_cells")
            else:
                for v in sorted({plo[i], phi[i]}):
                    add_line(i, v, P_PORT, f"port {port.number} feed")
                add_limit(i, plo[i], phi[i], fine, f"port {port.number} feed")
    for hint in model.hints:
        i = AXES.index(hint.axis)
        why = hint.reason or "mesh hint"
        if hint.lo == hint.hi:
            add_line(i, hint.lo, P_HINT, why)
            if hint.max_cell > 0:
                add_limit(i, hint.lo, hint.lo, hint.max_cell, why)
        elif hint.max_cell > 0:
            add_limit(i, min(hint.lo, hint.hi), max(hint.lo, hint.hi), hint.max_cell, why)
    return fixed, limits


def auto_mesh(model: SceneModel, settings: SolverSettings) -> MeshPlan:
    """Mesh lines for ``model`` at ``model.frequency_Hz`` following ``settings``.

    Parameters
    ----------
    model : SceneModel
        The built scene (materials evaluated at the case frequency).
    settings : SolverSettings

    Returns
    -------
    MeshPlan
        Lines per axis including the absorbing layer, interior bounds, merge threshold and reasons.

    Raises
    ------
    MeshRefused
        If two port lines are too close to keep both (see :func:`merge_fixed_lines`), or two domain bounds.
    """
    if not model.primitives and not model.ports:
        raise ValueError("auto_mesh: the scene has no primitives and no ports; nothing to mesh")
    lo, hi, clipped, notes = _interior_bounds(model, settings)
    fixed, limits = _requirements(model, settings, lo, hi)
    mirror = getattr(settings, "mirror_plane", None)  # half domain: a wall line at 0, nothing below it
    if mirror is not None:
        fixed[mirror].append((0.0, P_BOUND, "mirror plane (electric wall)"))
    finest = min(h for a in AXES for (_, _, h, _) in limits[a] if h > 0)
    threshold = settings.min_cell_m if settings.min_cell_m is not None else 0.25 * finest
    notes = list(notes) + [f"finest requested cell {finest*1e3:.4f} mm; merge threshold {threshold*1e3:.4f} mm"]
    lines, kept = [], {}
    pad = settings.absorbing_cells
    keep_apart = SLIVER_FRACTION * smallest_feature(model)  # the smallest cell check_mesh accepts
    for a in AXES:
        kept_notes: list[str] = []
        survivors = merge_fixed_lines(fixed[a], threshold, keep_apart, kept_notes)
        notes += [f"{a}: {n}" for n in kept_notes]
        n_gone = len({round(p, 12) for p, _, _ in fixed[a]}) - len(survivors)
        if n_gone:
            notes.append(f"{a}: {n_gone} fixed line(s) merged into neighbours closer than {threshold*1e3:.4f} mm")
        kept[a] = tuple((p, why) for p, _, why in survivors)
        lim = np.array([(l0, l1, h) for (l0, l1, h, _) in limits[a]])
        ln = _axis_lines(survivors, lim, settings.max_growth_ratio)
        if pad:
            h0, h1 = ln[1] - ln[0], ln[-1] - ln[-2]
            ln = np.concatenate([ln[0] - h0 * np.arange(pad, 0, -1), ln, ln[-1] + h1 * np.arange(1, pad + 1)])
        if a == mirror:
            ln = ln[ln >= 0.0]
            lo[AXES.index(a)] = 0.0
            notes.append(f"{a}: half domain {a} >= 0 (mirror_plane), electric wall at {a} = 0")
        lines.append(ln)
    return MeshPlan(lines_x=lines[0], lines_y=lines[1], lines_z=lines[2],
                    interior_bounds=(tuple(map(float, lo)), tuple(map(float, hi))),  # type: ignore[arg-type]
                    absorbing_cells=pad, merge_threshold_m=float(threshold), fixed=kept, notes=tuple(notes),
                    clipped_body=clipped)


# ----------------------------------------------------------------------------------------------
# refusal of absurd meshes
# ----------------------------------------------------------------------------------------------
def smallest_feature(model: SceneModel) -> float:
    """Smallest non-zero extent (metres) of any primitive or port gap along any axis."""
    sizes = []
    for item in list(model.primitives) + list(model.ports):
        blo, bhi = item.bounds()
        sizes += [b - a for a, b in zip(blo, bhi) if b - a > 0]
        if isinstance(item, Cylinder):
            sizes.append(2 * item.radius)
    return float(min(sizes)) if sizes else np.inf


def check_solids_resolved(plan: MeshPlan, model: SceneModel, settings: SolverSettings) -> None:
    """Refuse a mesh on which a polyhedron (a CAD part) is thinner than one cell along some axis.

    Such a part would fall between the mesh lines and vanish or be filled by chance. The part must span
    at least one cell: two mesh lines within its extent along every axis; and so must every slice between
    two neighbouring planes of its faces perpendicular to that axis (a wall, a step, a gap, a cavity).
    """
    for p in model.primitives:
        if not isinstance(p, Polyhedron):
            continue
        lo, hi = p.bounds()
        planes = face_planes(p.vertices, p.faces)
        now = "derived" if settings.min_cell_m is None else f"{settings.min_cell_m*1e3:g} mm"
        for i, a in enumerate(AXES):
            ln = plan.lines(i)
            tol = 1e-9 * max(1.0, abs(hi[i]) + abs(lo[i]))
            inside = np.count_nonzero((ln >= lo[i] - tol) & (ln <= hi[i] + tol))
            if inside < 2:
                j = int(np.clip(np.searchsorted(ln, lo[i]), 1, len(ln) - 1))
                cell = ln[j] - ln[j - 1]
                raise MeshRefused(f"{p.name}: the part is {(hi[i] - lo[i])*1e3:.4g} mm thick along {a}, thinner "
                                  f"than the {cell*1e3:.4g} mm cell there; lower min_cell_mm (now {now}) or "
                                  "thicken the part")
            cuts = np.sort(np.r_[lo[i], planes[i][0], hi[i]])
            cuts = cuts[np.r_[True, np.diff(cuts) > 1e-6 * max(np.subtract(hi, lo))]]  # one level per plane
            for c0, c1 in zip(cuts[:-1], cuts[1:]):
                if np.count_nonzero((ln >= c0 - tol) & (ln <= c1 + tol)) < 2:
                    j = int(np.clip(np.searchsorted(ln, c0), 1, len(ln) - 1))
                    raise MeshRefused(f"{p.name}: the {(c1 - c0)*1e3:.4g} mm between its faces at {a} = "
                                      f"{c0*1e3:.4g} and {c1*1e3:.4g} mm (a wall, step or gap of the part) is "
                                      f"thinner than the {(ln[j] - ln[j - 1])*1e3:.4g} mm cell there; lower "
                                      f"min_cell_mm (now {now}) or change the part")


def check_mesh(plan: MeshPlan, model: SceneModel, settings: SolverSettings) -> None:
    """Refuse a mesh that cannot be right for this scene.

    Refused are: lines that are not strictly increasing, a neighbour ratio above
    ``max_growth_ratio``, and any cell smaller than :data:`SLIVER_FRACTION` times the smallest
    geometric feature (such a sliver sets a needlessly tiny timestep).

    Raises
    ------
    MeshRefused
        Naming the axis and the line positions in millimetres.
    """
    check_solids_resolved(plan, model, settings)
    feature = smallest_feature(model)
    limit = SLIVER_FRACTION * feature
    for i, a in enumerate(AXES):
        ln = plan.lines(i)
        h = np.diff(ln)
        if np.any(h <= 0):
            j = int(np.argmin(h))
            raise MeshRefused(f"{a} lines are not strictly increasing at {ln[j]*1e3:.6f} mm, {ln[j+1]*1e3:.6f} mm")
        bad = np.nonzero(h < limit)[0]
        if len(bad):
            pairs = "; ".join(f"{ln[j]*1e3:.6f} mm and {ln[j+1]*1e3:.6f} mm" for j in bad[:5])
            now = "derived" if settings.min_cell_m is None else f"{settings.min_cell_m*1e3:g} mm"
            raise MeshRefused(f"{a}: sliver cell(s) of {h[bad].min()*1e3:.4f} mm between lines {pairs}; the smallest "
                              f"geometric feature is {feature*1e3:.4f} mm, cells below {SLIVER_FRACTION} of it "
                              f"({limit*1e3:.4f} mm) are refused - raise the solver's min_cell_mm (now {now}) "
                              "or fix the geometry")
    for i, a in enumerate(AXES):
        ln = plan.lines(i)
        h = np.diff(ln)
        r = plan.max_neighbour_ratio(i)
        if r > settings.max_growth_ratio * (1 + 1e-6):
            rr = np.maximum(h[1:] / h[:-1], h[:-1] / h[1:])
            j = int(np.argmax(rr))
            raise MeshRefused(f"{a}: neighbour cell ratio {r:.3f} exceeds max_growth_ratio "
                              f"{settings.max_growth_ratio} at lines {', '.join(f'{v*1e3:.4f}' for v in ln[j:j+3])} mm")


def checked_mesh(model: SceneModel, settings: SolverSettings) -> MeshPlan:
    """The automatic mesh of a scene, refused (:class:`MeshRefused`) as the solve step would refuse it."""
    plan = auto_mesh(model, settings)
    check_mesh(plan, model, settings)
    return plan
