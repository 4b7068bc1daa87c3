"""Three-plane preview of a built scene: material cross-sections through the implant, ports and conductors marked.

Rasterised by sampling the primitives on a fine grid with the priority rule (:mod:`.raster`), so what
you see is what the solver is told (before meshing). matplotlib with the Agg backend.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from .model import SceneModel
from .primitives import AXES, Box, Cylinder, Polygon, Polyhedron, Wire, axis_index
from .raster import material_index
from .shapes import polygon_vertices

#: our own palette: tissues by name, then by role
TISSUE_COLOURS = {
    "skin_dry": "#e8b48f", "skin_wet": "#d99a74", "fat_not_infiltrated": "#f3e27a", "fat_infiltrated": "#e6cf55",
    "muscle": "#b5484b", "bone_cortical": "#eeeadf", "blood": "#7c1020",
}
ROLE_COLOURS = {"pec": "#2b2b2b", "conductor": "#8a6d1f"}
FALLBACK_TISSUE = ["#9fc5a0", "#7fb2c9", "#c9a27f", "#a6a6d9", "#d9a6c7"]
FALLBACK_DIELECTRIC = ["#b9a7d8", "#8fc7c0", "#c7c08f", "#d8a7b9", "#a7b9d8"]
AIR_COLOUR = "#ffffff"

#: (horizontal axis, vertical axis) of each plane, named by its normal
PLANES = (("y", ("x", "z")), ("x", ("y", "z")), ("z", ("x", "y")))


def material_colours(model: SceneModel) -> list[str]:
    """One colour per material of the model (same order as ``model.materials``)."""
    out, k, j = [], 0, 0
    for m in model.materials:
        if m.kind in ("pec", "conductor"):
            out.append(ROLE_COLOURS[m.kind])
        elif m.name in TISSUE_COLOURS:
            out.append(TISSUE_COLOURS[m.name])
        elif m.is_tissue:
            out.append(FALLBACK_TISSUE[k % len(FALLBACK_TISSUE)])
            k += 1
        else:
            out.append(FALLBACK_DIELECTRIC[j % len(FALLBACK_DIELECTRIC)])
            j += 1
    return out


def plane_section(model: SceneModel, normal: str, level: float, h_range, v_range, n_px: int = 320):
    """Material index image of one plane.

    Parameters
    ----------
    normal : {"x", "y", "z"}
    level : float
        Coordinate of the plane along ``normal``.
    h_range, v_range : (lo, hi)
        Extents along the plane's horizontal and vertical axes (see ``PLANES``).
    n_px : int
        Pixels along the longer side.

    Returns
    -------
    image : ndarray of int, shape (nv, nh)
        Index into ``model.materials``, -1 for air; row 0 at ``v_range[0]``.
    h, v : ndarray, shapes (nh,), (nv,)
        Pixel centres.
    """
    ha, va = dict(PLANES)[normal]
    span = max(h_range[1] - h_range[0], v_range[1] - v_range[0])
    step = span / n_px
    h = np.arange(h_range[0] + step / 2, h_range[1], step)
    v = np.arange(v_range[0] + step / 2, v_range[1], step)
    H, V = np.meshgrid(h, v)
    pts = np.zeros((H.size, 3))
    pts[:, axis_index(ha)] = H.ravel()
    pts[:, axis_index(va)] = V.ravel()
    pts[:, axis_index(normal)] = level
    # sheets and thin wires get a little over half a pixel so that one lying on a pixel edge still shows
    return material_index(model, pts, tol=0.51 * step).reshape(H.shape), h, v


def _conductor_outlines(prim, ha: int, va: int):
    """Projected outline(s) of a conductor as arrays of shape (n, 2) in the plane's (h, v) coordinates."""
    if isinstance(prim, Wire):
        return [np.asarray(prim.points)[:, [ha, va]]]
    if isinstance(prim, Polygon):
        v = polygon_vertices(prim)[: len(prim.points)]
        return [np.concatenate([v, v[:1]])[:, [ha, va]]]
    if isinstance(prim, Polyhedron):
        pts = np.asarray(prim.vertices)[:, [ha, va]]
        from scipy.spatial import ConvexHull, QhullError
        try:
            ring = pts[ConvexHull(pts).vertices]
            return [np.concatenate([ring, ring[:1]])]
        except QhullError:  # flat in this projection: the bounding rectangle below
            pass
    if isinstance(prim, (Box, Cylinder, Polyhedron)):
        lo, hi = prim.bounds()
        return [np.array([(lo[ha], lo[va]), (hi[ha], lo[va]), (hi[ha], hi[va]), (lo[ha], hi[va]), (lo[ha], lo[va])])]
    return []


def _view_bounds(model: SceneModel) -> tuple[np.ndarray, np.ndarray]:
    """Body bounds joined with every non-tissue primitive and port (tissue lies inside the body bounds)."""
    boxes = [model.body_bounds] + [p.bounds() for p in model.primitives if not model.material(p.material).is_tissue]
    boxes += [p.bounds() for p in model.ports]
    lo = np.min([b[0] for b in boxes], axis=0)
    hi = np.max([b[1] for b in boxes], axis=0)
    return lo, hi


def preview_png(model: SceneModel, path, centre=None, n_px: int = 320, margin_m: float = 0.005) -> Path:
    """Write three orthogonal cross-sections of ``model`` to a PNG.

    Parameters
    ----------
    model : SceneModel
    path : str or Path
        Output file (written as PNG whatever its suffix).
    centre : (x, y, z) or None
        Point the planes pass through; default the implant anchor, else the surface anchor.
    n_px : int
        Pixels along the longer side of each section.
    margin_m : float
        Air shown around the bounding box of all primitives.

    Returns
    -------
    Path
    """
    # the figure and the Agg canvas directly, not pyplot: a scene job then imports a third less of matplotlib
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.colors import ListedColormap
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    if centre is None:
        centre = model.anchors.get("implant", model.anchors.get("surface", (0.0, 0.0, 0.0)))
    c = np.asarray(centre, dtype=float)
    lo, hi = _view_bounds(model)
    lo, hi = lo - margin_m, hi + margin_m
    colours = material_colours(model)
    cmap = ListedColormap([AIR_COLOUR] + colours)
    fig = Figure(figsize=(16, 5.8), layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(1, 3)
    used: set[int] = set()
    conductors = [p for p in model.primitives if model.material(p.material).kind in ("pec", "conductor")]
    for ax, (normal, (hname, vname)) in zip(axes, PLANES):
        ha, va, na = axis_index(hname), axis_index(vname), axis_index(normal)
        img, h, v = plane_section(model, normal, c[na], (lo[ha], hi[ha]), (lo[va], hi[va]), n_px)
        used.update(np.unique(img).tolist())
        ax.imshow(img + 1, cmap=cmap, vmin=0, vmax=len(colours), origin="lower", interpolation="nearest",
                  extent=(h[0] * 1e3 - (h[1] - h[0]) * 5e2, h[-1] * 1e3 + (h[1] - h[0]) * 5e2,
                          v[0] * 1e3 - (v[1] - v[0]) * 5e2, v[-1] * 1e3 + (v[1] - v[0]) * 5e2))
        for p in conductors:  # projected outlines of every conductor, cut by the plane or not
            for o in _conductor_outlines(p, ha, va):
                ax.plot(o[:, 0] * 1e3, o[:, 1] * 1e3, color="#3a3a3a", lw=0.6, ls="--", alpha=0.7)
        for port in model.ports:
            pc = np.asarray(port.centre)
            ax.plot(pc[ha] * 1e3, pc[va] * 1e3, marker="X", ms=10, mec="white", mfc="#1f5fbf", mew=1.2)
            ax.annotate(f"P{port.number}", (pc[ha] * 1e3, pc[va] * 1e3), xytext=(6, 6), textcoords="offset points",
                        color="#1f5fbf", fontsize=10, fontweight="bold")
        if vname == "z":
            ax.axhline(0.0, color="#555555", lw=0.5, ls=":")
        ax.set_xlabel(f"{hname} (mm)")
        ax.set_ylabel(f"{vname} (mm)")
        ax.set_title(f"{hname}-{vname} plane at {normal} = {c[na] * 1e3:.2f} mm")
        ax.set_xlim(lo[ha] * 1e3, hi[ha] * 1e3)
        ax.set_ylim(lo[va] * 1e3, hi[va] * 1e3)
        ax.set_aspect("equal", adjustable="box")
    handles = [Patch(facecolor=AIR_COLOUR, edgecolor="#999999", label="air")] if -1 in used else []
    for i, m in enumerate(model.materials):
        if i in used or m.kind in ("pec", "conductor"):
            extra = f"  eps_r {m.eps_r:.3g}, sigma {m.sigma_S_per_m:.3g} S/m" if m.kind == "dielectric" else \
                ("  PEC" if m.kind == "pec" else f"  sigma {m.sigma_S_per_m:.3g} S/m")
            handles.append(Patch(facecolor=colours[i], edgecolor="#666666", label=m.name + extra))
    handles.append(Line2D([], [], color="#3a3a3a", ls="--", lw=0.8, label="conductor outline (projected)"))
    handles.append(Line2D([], [], color="#1f5fbf", marker="X", ls="", label="port"))
    fig.legend(handles=handles, loc="outside lower center", ncol=4, fontsize=9, frameon=False)
    fig.suptitle(f"scene at {model.frequency_Hz / 1e6:.6g} MHz, planes through "
                 f"({c[0] * 1e3:.2f}, {c[1] * 1e3:.2f}, {c[2] * 1e3:.2f}) mm")
    path = Path(path)
    fig.savefig(path, format="png", dpi=90)
    return path


__all__ = ["preview_png", "plane_section", "material_colours", "PLANES", "AXES"]
