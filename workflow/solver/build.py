"""SceneModel + mesh plan -> CSXCAD structure (materials, primitives with priorities, grid).

Materials
---------
* ``dielectric``: ``AddMaterial(epsilon, kappa)``; tissue materials also carry ``density`` so that
  the engine's SAR dumps can weigh by mass.
* ``conductor`` (finite sigma): a solid body is ``AddMaterial(kappa=sigma)``; a zero-thickness polygon
  (printed trace) is ``AddConductingSheet(conductivity=sigma, thickness=sheet_thickness_m)``; a thin
  wire (radius 0) lies on mesh edges where only PEC is possible, so it is modelled as PEC and the
  substitution is listed in :attr:`BuildReport.notes`.
* ``pec``: ``AddMetal``.

Absorbing boundary
------------------
Lossy tissue reaching into the PML keeps feeding energy into the absorber's grading and the energy
decay stalls (seen near -40 dB: the run never reaches its end criterion). Tissue boxes are therefore
clipped to ``plan.interior_bounds``; other tissue primitives that reach past it are overridden there
by air slabs of a priority above every tissue.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from bodysweep.geometry.model import SceneModel
from bodysweep.geometry.primitives import AXES, Box, Cylinder, Polygon, Polyhedron, Wire

from . import engine

__all__ = ["BuildReport", "build_csx", "DEFAULT_SHEET_THICKNESS_M"]

#: modelled thickness of a zero-thickness finite-conductivity sheet (35 um: 1 oz copper, common practice)
DEFAULT_SHEET_THICKNESS_M = 35e-6
#: a polyhedron's surface is moved outward by this fraction of the smallest cell (see inflated_vertices)
FILL_MARGIN_CELLS = 0.01


@dataclass
class BuildReport:
    """What :func:`build_csx` did beyond a one-to-one translation.

    Attributes
    ----------
    cells : int
        Number of FDTD cells of the grid.
    clipped : list of str
        Tissue primitives cut back to the interior (outside the absorbing boundary).
    air_slabs : int
        Number of air slabs laid over tissue inside the absorbing boundary.
    notes : list of str
        Substitutions (e.g. thin finite-conductivity wires modelled as PEC).
    """

    cells: int = 0
    clipped: list[str] = field(default_factory=list)
    air_slabs: int = 0
    notes: list[str] = field(default_factory=list)


def _lines(plan, ax: str) -> np.ndarray:
    v = np.asarray(getattr(plan, f"lines_{ax}"), dtype=float)
    if v.ndim != 1 or v.size < 2 or not np.all(np.isfinite(v)) or np.any(np.diff(v) <= 0):
        raise ValueError(f"mesh plan lines_{ax}: need at least two finite, strictly increasing coordinates "
                         f"(metres), got {v.size} values")
    return v


def _interior(plan) -> tuple[np.ndarray, np.ndarray]:
    b = getattr(plan, "interior_bounds", None)
    if b is None:
        lo = np.array([_lines(plan, a)[0] for a in AXES])
        hi = np.array([_lines(plan, a)[-1] for a in AXES])
        return lo, hi
    return np.asarray(b[0], dtype=float), np.asarray(b[1], dtype=float)


def _setting(settings, key: str, default):
    if settings is None:
        return default
    if isinstance(settings, dict):
        return settings.get(key, default)
    return getattr(settings, key, default)


def inflated_vertices(prim: Polyhedron, margin: float) -> np.ndarray:
    """The polyhedron's vertices moved ``margin`` metres outward along their area-weighted normals, (n, 3).

    The engine takes vertices in single precision and decides inside / outside of a mesh node lying on
    a face by chance, while the mesher puts lines exactly on a part's bounding faces. Moving the surface
    out by a small fraction of a cell makes such nodes inside, as a box or cylinder counts its surface.
    """
    v = np.asarray(prim.vertices, dtype=float)
    f = np.asarray(prim.faces)
    n = np.cross(v[f[:, 1]] - v[f[:, 0]], v[f[:, 2]] - v[f[:, 0]])  # outward for counter-clockwise faces
    vn = np.zeros_like(v)
    for k in range(3):
        np.add.at(vn, f[:, k], n)
    norm = np.linalg.norm(vn, axis=1)
    norm[norm == 0] = 1.0
    return v + margin * vn / norm[:, None]


def _add_primitive(prop, prim, priority: int, fill_margin: float = 0.0) -> None:
    if isinstance(prim, Box):
        prop.AddBox(list(prim.start), list(prim.stop), priority=priority)
    elif isinstance(prim, Cylinder):
        # the radius grows by the fill margin: a node on the round surface (where the mesher puts the lines
        # of the cylinder's extent) is inside, as a box counts its surface, whatever the rounding of the
        # engine's distance to the axis (see FILL_MARGIN_CELLS)
        prop.AddCylinder(list(prim.start), list(prim.stop), float(prim.radius) + fill_margin, priority=priority)
    elif isinstance(prim, Wire):
        pts = np.asarray(prim.points, dtype=float).T  # (3, n_points) as CSXCAD wants
        if prim.radius > 0:
            prop.AddWire(pts, float(prim.radius) + fill_margin, priority=priority)
        else:
            prop.AddCurve(pts, priority=priority)
    elif isinstance(prim, Polygon):
        pts = np.asarray(prim.points, dtype=float).T  # (2, n_points) in the plane's cyclic axes
        n = AXES.index(prim.normal)
        if prim.thickness > 0:
            prop.AddLinPoly(pts, n, float(prim.elevation), float(prim.thickness), priority=priority)
        else:
            prop.AddPolygon(pts, n, float(prim.elevation), priority=priority)
    elif isinstance(prim, Polyhedron):
        solid = prop.AddPolyhedron(priority=priority)
        for q in inflated_vertices(prim, fill_margin):
            solid.AddVertex(*map(float, q))
        for f in prim.faces:
            solid.AddFace([int(k) for k in f])
    else:  # pragma: no cover - SceneModel only holds the five kinds
        raise ValueError(f"primitive {getattr(prim, 'name', prim)!r}: unsupported kind {type(prim).__name__}")


def _is_sheet(prim) -> bool:
    return isinstance(prim, Polygon) and prim.thickness == 0


def _is_thin_wire(prim) -> bool:
    return isinstance(prim, Wire) and prim.radius == 0


def build_csx(model: SceneModel, plan, settings=None, csx=None):
    """Translate a scene and its mesh into a CSXCAD structure (without ports, sources or dumps).

    Parameters
    ----------
    model : SceneModel
        Materials (evaluated at the case frequency), primitives with priorities.
    plan : object
        Mesh plan with ``lines_x``, ``lines_y``, ``lines_z`` (metres, increasing, shape (n_ax,)) and
        ``interior_bounds`` ``((x0, y0, z0), (x1, y1, z1))``: the region inside the absorbing boundary.
    settings : SolverSettings or dict, optional
        Read: ``sheet_thickness_m`` (optional, default :data:`DEFAULT_SHEET_THICKNESS_M`).
    csx : CSXCAD.ContinuousStructure, optional
        Structure to fill; a new one by default.

    Returns
    -------
    csx : CSXCAD.ContinuousStructure
    report : BuildReport
    """
    if csx is None:
        ContinuousStructure, _ = engine.load()
        csx = ContinuousStructure()
    report = BuildReport()
    grid = csx.GetGrid()
    grid.SetDeltaUnit(1.0)
    lines = {a: _lines(plan, a) for a in AXES}
    for a in AXES:
        grid.SetLines(a, lines[a])
    report.cells = int(np.prod([lines[a].size - 1 for a in AXES]))
    ilo, ihi = _interior(plan)
    sheet_t = float(_setting(settings, "sheet_thickness_m", DEFAULT_SHEET_THICKNESS_M))
    fill_margin = FILL_MARGIN_CELLS * min(float(np.diff(lines[a]).min()) for a in AXES)

    by_material: dict[str, list] = {}
    for prim in model.primitives:
        by_material.setdefault(prim.material, []).append(prim)

    props: dict[tuple[str, str], object] = {}

    def prop_for(mat, variant: str):
        key = (mat.name, variant)
        if key in props:
            return props[key]
        for v in (mat.eps_r, mat.sigma_S_per_m, mat.density_kg_m3):
            if not np.isfinite(v):
                raise ValueError(f"material {mat.name!r}: properties must be finite, got eps_r={mat.eps_r}, "
                                 f"sigma={mat.sigma_S_per_m} S/m, density={mat.density_kg_m3} kg/m^3")
        if variant == "metal":
            p = csx.AddMetal(f"{mat.name}__pec" if mat.kind != "pec" else mat.name)
        elif variant == "sheet":
            p = csx.AddConductingSheet(f"{mat.name}__sheet", conductivity=float(mat.sigma_S_per_m),
                                       thickness=sheet_t)
        else:
            kw = dict(epsilon=float(mat.eps_r), kappa=float(mat.sigma_S_per_m))
            if mat.density_kg_m3 > 0:
                kw["density"] = float(mat.density_kg_m3)
            p = csx.AddMaterial(mat.name, **kw)
        props[key] = p
        return p

    tissue_priorities: list[int] = []
    overhang = False
    for name, prims in by_material.items():
        mat = model.material(name)
        for prim in prims:
            if mat.kind == "pec":
                variant = "metal"
            elif mat.kind == "conductor":
                if _is_sheet(prim):
                    variant = "sheet"
                elif _is_thin_wire(prim):
                    variant = "metal"
                    report.notes.append(f"wire {prim.name!r} of {mat.name!r} (radius 0) modelled as PEC")
                else:
                    variant = "solid"
            else:
                if _is_sheet(prim) or _is_thin_wire(prim):
                    raise ValueError(f"primitive {prim.name!r}: a dielectric ({mat.name!r}) needs a volume; "
                                     "give the polygon a thickness > 0 or the wire a radius > 0")
                variant = "solid"
            prop = prop_for(mat, variant)
            if mat.is_tissue:
                tissue_priorities.append(prim.priority)
                lo, hi = (np.asarray(v) for v in prim.bounds())
                if np.any(lo < ilo) or np.any(hi > ihi):
                    if isinstance(prim, Box):
                        clo, chi = np.maximum(lo, ilo), np.minimum(hi, ihi)
                        if np.any(chi <= clo):
                            report.clipped.append(f"{prim.name} (removed: wholly inside the absorbing boundary)")
                            continue
                        prim = Box(prim.name, prim.material, tuple(clo), tuple(chi), priority=prim.priority)
                        report.clipped.append(prim.name)
                    else:
                        overhang = True
            _add_primitive(prop, prim, prim.priority, fill_margin)

    if overhang:
        air = csx.AddMaterial("absorber_air", epsilon=1.0, kappa=0.0)
        top = max(tissue_priorities) + 1
        glo = np.array([lines[a][0] for a in AXES])
        ghi = np.array([lines[a][-1] for a in AXES])
        for i in range(3):
            for side in (0, 1):
                lo, hi = glo.copy(), ghi.copy()
                if side == 0:
                    hi[i] = ilo[i]
                else:
                    lo[i] = ihi[i]
                if hi[i] > lo[i]:
                    air.AddBox(lo, hi, priority=top)
                    report.air_slabs += 1
    return csx, report
