"""The scene spec: phantom + external antenna + implant antenna + concentrators + declared materials.

``Scene.from_dict`` / ``to_dict`` use SI units (keys ending ``_m``, ``_Hz``); each part dict names its
kind in a ``type`` key. A study file writes the same structure in edge units (``_mm``, ``_MHz``),
described by ``data/scene.schema.json`` and converted by :func:`~bodysweep.geometry.units.from_edge_units`
(see :meth:`Scene.from_edge_dict`).

``Scene.build(f_Hz)`` checks the geometry and returns a :class:`~bodysweep.geometry.model.SceneModel`
with the materials evaluated at that frequency.
"""
from __future__ import annotations

import json
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

from .antennas import CAPSULE_MATERIAL, CASING_MATERIAL, ExternalAntenna, ImplantAntenna
from .cad import CadConcentrator
from .concentrators import CONCENTRATOR_TYPES, Concentrator, concentrator_from_dict
from .model import SceneModel
from .phantoms import SHELL_MATERIAL, LabelVolume, LayeredCylinder, LiquidBox, NoPhantom, Phantom, phantom_from_dict
from .primitives import Box, Cylinder, Primitive, Vec3
from .shapes import clearance_to_box, sample_points
from .specs import positive
from .tissues import MaterialSpec, is_builtin, material_spec_from_dict, resolve_material
from .units import from_edge_units

RESERVED_MATERIALS = (CASING_MATERIAL, CAPSULE_MATERIAL, SHELL_MATERIAL)
SCENE_KEYS = ("phantom", "external", "implant", "concentrators", "materials", "min_clearance_m")


def _outline_points(p: Primitive) -> np.ndarray:
    """Points whose convex hull is (or encloses) the primitive, shape (n, 3)."""
    if isinstance(p, Box):
        lo, hi = p.bounds()
        return np.array([[x, y, z] for x in (lo[0], hi[0]) for y in (lo[1], hi[1]) for z in (lo[2], hi[2])])
    if isinstance(p, Cylinder):
        s, e = np.asarray(p.start), np.asarray(p.stop)
        a = (e - s) / np.linalg.norm(e - s)
        u = np.cross(a, [1.0, 0, 0] if abs(a[0]) < 0.9 else [0, 1.0, 0])
        u /= np.linalg.norm(u)
        v = np.cross(a, u)
        t = np.linspace(0, 2 * np.pi, 32, endpoint=False)
        ring = p.radius * (np.cos(t)[:, None] * u + np.sin(t)[:, None] * v)
        return np.concatenate([s + ring, e + ring])
    pts, r = sample_points(p, 1e9)
    return pts


@dataclass(frozen=True)
class Scene:
    """One physical arrangement, without frequency.

    Parameters
    ----------
    phantom : LayeredSlab, LayeredCylinder, LiquidBox or NoPhantom
        ``NoPhantom`` (``type: none``): antennas in air, the implant antenna too (free-space checks).
    external : ExternalAntenna
        Port 1.
    implant : ImplantAntenna or None
        Port 2.
    concentrators : tuple of Rod, RodPair, CrossedPairs, RodArray or Ring
    materials : tuple of FixedTissue, TissueLiquid, Dielectric or Conductor
        Declared materials, referred to by name from the parts (built-ins: the Gabriel tissues and ``pec``).
    min_clearance_m : float
        Smallest allowed distance between a concentrator and the implant (its capsule's bounding box).
    """

    phantom: Phantom
    external: ExternalAntenna
    implant: ImplantAntenna | None = None
    concentrators: tuple[Concentrator, ...] = ()
    materials: tuple[MaterialSpec, ...] = ()
    min_clearance_m: float = 0.5e-3

    def __post_init__(self):
        object.__setattr__(self, "concentrators", tuple(self.concentrators))
        object.__setattr__(self, "materials", tuple(self.materials))
        object.__setattr__(self, "min_clearance_m", positive("scene", "min_clearance_m", self.min_clearance_m, True))
        seen: set[str] = set()
        for m in self.materials:
            if m.name in seen:
                raise ValueError(f"scene materials: {m.name!r} is declared twice")
            if is_builtin(m.name) or m.name in RESERVED_MATERIALS:
                raise ValueError(f"scene materials: {m.name!r} is a built-in or reserved name; choose another")
            seen.add(m.name)
        self.check()

    # ------------------------------------------------------------------ checks
    def user_materials(self) -> dict[str, MaterialSpec]:
        return {m.name: m for m in self.materials}

    def _referenced_materials(self) -> list[tuple[str, str]]:
        """(part, material name) for every name the parts refer to."""
        ph = self.phantom
        refs = []
        if isinstance(ph, LiquidBox):
            refs.append(("phantom liquid", ph.liquid))
        elif isinstance(ph, LabelVolume):
            refs += [(f"phantom labels (label {r.label})", r.tissue) for r in ph.labels if r.tissue != "air"]
        elif not isinstance(ph, NoPhantom):
            refs += [(f"phantom layer {i}", l.tissue) for i, l in enumerate(ph.layers)]
            if isinstance(ph, LayeredCylinder):
                refs.append(("phantom core", ph.core_tissue))
        refs.append(("external antenna conductor", self.external.element.conductor))
        if self.implant is not None:
            refs.append(("implant antenna conductor", self.implant.element.conductor))
        refs += [(f"concentrator {i} ({c.type})", c.conductor) for i, c in enumerate(self.concentrators)
                 if c.conductor]  # a dielectric cad concentrator carries its material inline
        return refs

    def anchors(self) -> dict[str, Vec3]:
        """Named points: ``surface`` (0, 0, 0), ``external_feed`` (port 1 centre), ``implant`` (its centre)."""
        a: dict[str, Vec3] = {"surface": (0.0, 0.0, 0.0), "external_feed": self.external.build().port.centre}
        if self.implant is not None:
            a["implant"] = self.implant.centre
        return a

    def check(self) -> None:
        """Raise ValueError naming the part and the number for any geometric or naming inconsistency."""
        user = self.user_materials()
        for part, name in self._referenced_materials():
            if name not in user and not is_builtin(name):
                import difflib

                from .tissues import builtin_tissues

                known = sorted(builtin_tissues())
                near = difflib.get_close_matches(name, known + sorted(user), n=1)
                raise ValueError(f"{part}: material {name!r} is neither declared in the scene's materials "
                                 f"{sorted(user)} nor built in" + (f" (did you mean {near[0]}?)" if near else "")
                                 + f"; built-in tissues: {', '.join(known)}")
        ext = self.external.build()
        lo, _ = ext.bounds()
        if lo[2] < -1e-12:
            raise ValueError(f"external antenna overlaps the body: its lowest point is at z = {lo[2]:.4g} m "
                             f"(standoff_m = {self.external.standoff_m} m); it must stay at z >= 0")
        if self.implant is not None and isinstance(self.phantom, NoPhantom):
            imp = self.implant.build()  # in air: nothing to be inside; only the concentrators' clearance
            keep = [p for p in imp.primitives if p.name == "implant_capsule"] or list(imp.primitives)
            klo, khi = (np.min([p.bounds()[0] for p in keep], 0), np.max([p.bounds()[1] for p in keep], 0))
        elif self.implant is not None:
            imp = self.implant.build()
            keep = [p for p in imp.primitives if p.name == "implant_capsule"] or list(imp.primitives)
            pts = np.concatenate([_outline_points(p) for p in keep])
            inside = self.phantom.contains(pts)
            if not inside.all():
                q = pts[~inside][0]
                where = "capsule" if self.implant.capsule is not None else "antenna"
                fits = self._depths_that_fit(pts)
                room = (f"; at this position depth_m from {fits[0]:.4g} m to {fits[1]:.4g} m fits" if fits else
                        "; no depth fits at this position")
                raise ValueError(f"implant outside the phantom: its {where} reaches ({q[0]:.4g}, {q[1]:.4g}, "
                                 f"{q[2]:.4g}) m at depth_m = {self.implant.depth_m:.4g} m, position_m = "
                                 f"({self.implant.position_m[0]:.4g}, {self.implant.position_m[1]:.4g}) m{room}; keep it "
                                 f"inside the {'liquid' if isinstance(self.phantom, LiquidBox) else 'tissue'}")
            klo, khi = (np.min([p.bounds()[0] for p in keep], 0), np.max([p.bounds()[1] for p in keep], 0))
        anchors = self.anchors()
        for i, c in enumerate(self.concentrators):
            name = f"concentrator {i} ({c.type})"
            prims = c.build(anchors, name)
            if self.implant is None:
                continue
            dmin = min(clearance_to_box(p, klo, khi, 1e-4) for p in prims)
            if dmin < self.min_clearance_m:
                raise ValueError(f"{name} is {dmin * 1e3:.3g} mm from the implant; the minimum clearance is "
                                 f"{self.min_clearance_m * 1e3:.3g} mm (min_clearance_mm)")
        from .arrangement import arrangement_errors

        errors = arrangement_errors(self, anchors)
        if errors:
            raise ValueError(errors[0])

    # ------------------------------------------------------------------ build
    def build(self, frequency_Hz: float) -> SceneModel:
        """The scene at one frequency: materials evaluated there, primitives, ports, anchors, hints."""
        f = positive("scene build", "frequency_Hz", frequency_Hz)
        ph = self.phantom.build()
        ext = self.external.build()
        anchors = self.anchors()
        prims: list[Primitive] = list(ph.primitives)
        hints = list(ph.hints) + list(ext.hints)
        inline = {m.name: m for m in ph.materials + ext.materials}
        for i, c in enumerate(self.concentrators):
            prims += c.build(anchors, f"conc{i}_{c.type}")
            if isinstance(c, CadConcentrator):  # a cad part brings its mesh lines and its inline dielectric
                hints += c.hints(anchors, f"conc{i}_{c.type}")
            if hasattr(c, "materials"):  # a cad part's dielectric, a rod pair's insulation
                inline.update({m.name: m for m in c.materials(f"conc{i}_{c.type}")})
        ports = [ext.port]
        if self.implant is not None:
            imp = self.implant.build()
            prims += imp.primitives
            ports.append(imp.port)
            hints += imp.hints
            inline.update({m.name: m for m in imp.materials})
        prims += ext.primitives
        user = {**self.user_materials(), **inline}
        names = list(dict.fromkeys(p.material for p in prims))
        materials = tuple(resolve_material(n, f, user) for n in names)
        return SceneModel(frequency_Hz=f, materials=materials, primitives=tuple(prims), ports=tuple(ports),
                          anchors=dict(anchors), body_bounds=ph.body_bounds, hints=tuple(hints))

    # ------------------------------------------------------------------ dicts
    def _depths_that_fit(self, pts: np.ndarray, step_m: float = 1e-4, max_depth_m: float = 0.5):
        """(shallowest, deepest) implant depth in m at which the points (at the current depth) lie inside the
        phantom, scanning in ``step_m`` steps; None if none fits. The first connected run of depths is given."""
        depths = np.arange(step_m, max_depth_m, step_m)
        ok = np.zeros(depths.size, bool)
        for k in range(0, depths.size, 500):
            d = depths[k:k + 500]
            shifted = pts[None, :, :] + np.stack([np.zeros_like(d), np.zeros_like(d), self.implant.depth_m - d], 1)[:, None, :]
            ok[k:k + 500] = self.phantom.contains(shifted.reshape(-1, 3)).reshape(d.size, -1).all(1)
        if not ok.any():
            return None
        first = int(np.argmax(ok))
        last = first + (int(np.argmin(ok[first:])) - 1 if not ok[first:].all() else ok.size - first - 1)
        return float(depths[first]), float(depths[last])

    def to_dict(self) -> dict:
        d: dict[str, Any] = {"phantom": self.phantom.to_dict(), "external": self.external.to_dict()}
        if self.implant is not None:
            d["implant"] = self.implant.to_dict()
        d["concentrators"] = [c.to_dict() for c in self.concentrators]
        d["materials"] = [m.to_dict() for m in self.materials]
        d["min_clearance_m"] = self.min_clearance_m
        return d

    @classmethod
    def from_dict(cls, d: Mapping) -> "Scene":
        """Scene from an SI dict (see :meth:`to_dict`); unknown keys are errors."""
        unknown = sorted(set(d) - set(SCENE_KEYS))
        if unknown:
            raise ValueError(f"scene: unknown key(s) {unknown}; allowed: {list(SCENE_KEYS)}")
        for k in ("phantom", "external"):
            if k not in d:
                raise ValueError(f"scene: missing key {k!r}")
        implant = d.get("implant")
        kw: dict[str, Any] = dict(
            phantom=phantom_from_dict(d["phantom"]),
            external=ExternalAntenna.from_dict(d["external"]),
            implant=None if implant is None else ImplantAntenna.from_dict(implant),
            concentrators=tuple(concentrator_from_dict(c) for c in d.get("concentrators", ())),
            materials=tuple(material_spec_from_dict(m) for m in d.get("materials", ())),
        )
        if "min_clearance_m" in d:
            kw["min_clearance_m"] = d["min_clearance_m"]
        return cls(**kw)

    @classmethod
    def from_edge_dict(cls, d: Mapping) -> "Scene":
        """Scene from the study-file form (``_mm`` / ``_MHz`` keys)."""
        return cls.from_dict(from_edge_units(dict(d)))

    def canonical_json(self) -> str:
        """Stable JSON of :meth:`to_dict` for hashing: sorted keys, no spaces, floats normalised.

        Floats are rounded to 15 significant digits and written by ``repr`` (so that ``0.1 mm`` converted
        to metres and ``0.0001`` typed in metres give the same text); ``-0.0`` becomes ``0.0``.
        """
        return json.dumps(normalise_floats(self.to_dict()), sort_keys=True, separators=(",", ":"), allow_nan=False)


def normalise_floats(obj: Any) -> Any:
    """Recursively round floats to 15 significant digits (``-0.0`` -> ``0.0``); ints, bools, strings unchanged."""
    if isinstance(obj, bool) or obj is None or isinstance(obj, (int, str)):
        return obj
    if isinstance(obj, float):
        v = float(f"{obj:.15g}")
        return 0.0 if v == 0.0 else v
    if isinstance(obj, Mapping):
        return {str(k): normalise_floats(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [normalise_floats(v) for v in obj]
    if isinstance(obj, np.generic):
        return normalise_floats(obj.item())
    raise TypeError(f"cannot normalise {type(obj).__name__} for canonical JSON")


__all__ = ["Scene", "normalise_floats", "CONCENTRATOR_TYPES"]
