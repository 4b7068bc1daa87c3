"""Tissue phantoms: layered slab, layered cylinder (limb), a liquid-filled box with a shell, or none.

Every phantom has its body surface (the face nearest the external antenna) at ``z = 0`` with
tissue below, and is centred laterally on ``x = y = 0``. ``build()`` returns a :class:`PhantomBuild`:
primitives with priorities (deeper / inner layers win), mesh hints at every layer interface
(so that the mesher can put at least two cells across each layer) and the body bounds.
:class:`NoPhantom` (``type: none``) leaves the antennas in air, for checks against free-space antenna
theory; ``z = 0`` is then only the reference plane of the placements.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Mapping

import numpy as np

from .model import MeshHint, PhantomBuild  # noqa: F401  (PhantomBuild is part of this module's interface)
from .primitives import PRIORITY_TISSUE, Box, Cylinder, Primitive, Vec3, axis_index
from .specs import choice, construct, positive
from .tissues import Dielectric

#: mesh hints ask for at least this many cells across each layer
CELLS_PER_LAYER = 2


@dataclass(frozen=True)
class Layer:
    """One tissue layer: a material name (built-in tissue or declared material) and its thickness."""

    tissue: str
    thickness_m: float

    def __post_init__(self):
        if not isinstance(self.tissue, str) or not self.tissue:
            raise ValueError(f"layer: tissue must be a material name, got {self.tissue!r}")
        object.__setattr__(self, "thickness_m",
                           positive(f"layer {self.tissue!r}", "thickness_m", self.thickness_m))

    def to_dict(self) -> dict:
        return {"tissue": self.tissue, "thickness_m": self.thickness_m}

    @classmethod
    def from_dict(cls, d: Mapping) -> "Layer":
        return construct(cls, d, "layer")


def _layers(value, part: str) -> tuple[Layer, ...]:
    out = tuple(v if isinstance(v, Layer) else Layer.from_dict(v) for v in value)
    if not out:
        raise ValueError(f"{part}: needs at least one layer")
    return out


def _layer_hints(axis: str, lo: float, hi: float, name: str, thickness: float | None = None) -> list[MeshHint]:
    """Fixed lines at both faces and a cell cap of thickness / CELLS_PER_LAYER inside."""
    t = hi - lo if thickness is None else thickness
    return [MeshHint(axis, lo, lo, 0.0, f"{name} interface"),
            MeshHint(axis, hi, hi, 0.0, f"{name} interface"),
            MeshHint(axis, lo, hi, t / CELLS_PER_LAYER, f"{name}: >= {CELLS_PER_LAYER} cells across")]


@dataclass(frozen=True)
class LayeredSlab:
    """Flat layers from the surface inward, finite in x and y.

    Parameters
    ----------
    layers : tuple of Layer
        Outermost (at z = 0) first; the last may be thick ("the rest of the body").
    size_x_m, size_y_m : float
        Lateral extents, centred on x = y = 0.
    """

    layers: tuple[Layer, ...]
    size_x_m: float
    size_y_m: float

    type = "layered_slab"

    def __post_init__(self):
        object.__setattr__(self, "layers", _layers(self.layers, "layered slab"))
        object.__setattr__(self, "size_x_m", positive("layered slab", "size_x_m", self.size_x_m))
        object.__setattr__(self, "size_y_m", positive("layered slab", "size_y_m", self.size_y_m))

    @property
    def total_thickness_m(self) -> float:
        return float(sum(l.thickness_m for l in self.layers))

    def interfaces_z(self) -> np.ndarray:
        """z of the layer faces, shape (n_layers + 1,), from 0 downwards."""
        return -np.concatenate([[0.0], np.cumsum([l.thickness_m for l in self.layers])])

    def build(self) -> PhantomBuild:
        hx, hy = self.size_x_m / 2, self.size_y_m / 2
        z = [float(v) for v in self.interfaces_z()]
        prims, hints = [], []
        for i, layer in enumerate(self.layers):
            prims.append(Box(f"layer{i}_{layer.tissue}", layer.tissue, (-hx, -hy, z[i + 1]), (hx, hy, z[i]),
                             priority=PRIORITY_TISSUE + i))
            hints += _layer_hints("z", z[i + 1], z[i], f"layer {i} ({layer.tissue})", layer.thickness_m)
        return PhantomBuild(tuple(prims), tuple(hints), ((-hx, -hy, z[-1]), (hx, hy, 0.0)))

    def contains(self, points) -> np.ndarray:
        """Whether points (shape (n, 3)) lie in tissue; returns shape (n,) bool."""
        p = np.atleast_2d(np.asarray(points, dtype=float))
        return ((np.abs(p[:, 0]) <= self.size_x_m / 2) & (np.abs(p[:, 1]) <= self.size_y_m / 2)
                & (p[:, 2] <= 0.0) & (p[:, 2] >= -self.total_thickness_m))

    def to_dict(self) -> dict:
        return {"type": self.type, "layers": [l.to_dict() for l in self.layers],
                "size_x_m": self.size_x_m, "size_y_m": self.size_y_m}

    @classmethod
    def from_dict(cls, d: Mapping) -> "LayeredSlab":
        return construct(cls, d, "layered slab", layers=_layers(d.get("layers", ()), "layered slab"))


@dataclass(frozen=True)
class LayeredCylinder:
    """A limb: concentric layers around a core, axis along x or y, top of the skin at z = 0.

    Parameters
    ----------
    layers : tuple of Layer
        Outermost first.
    core_tissue : str
        Material of the core (e.g. ``"bone_cortical"``).
    core_radius_m : float
    axis : {"x", "y"}
        Direction of the cylinder axis; the axis lies at ``z = -outer_radius``.
    length_m : float
        Length along the axis, centred on 0.
    """

    layers: tuple[Layer, ...]
    core_tissue: str
    core_radius_m: float
    axis: str = "y"
    length_m: float = 0.08

    type = "layered_cylinder"

    def __post_init__(self):
        part = "layered cylinder"
        object.__setattr__(self, "layers", _layers(self.layers, part))
        object.__setattr__(self, "core_radius_m", positive(part, "core_radius_m", self.core_radius_m))
        object.__setattr__(self, "length_m", positive(part, "length_m", self.length_m))
        choice(part, "axis", self.axis, ("x", "y"))
        if not isinstance(self.core_tissue, str) or not self.core_tissue:
            raise ValueError(f"{part}: core tissue must be a material name, got {self.core_tissue!r}")

    @property
    def outer_radius_m(self) -> float:
        return self.core_radius_m + float(sum(l.thickness_m for l in self.layers))

    def radii(self) -> np.ndarray:
        """Outer radius of each layer then the core radius, shape (n_layers + 1,), decreasing."""
        r = self.outer_radius_m - np.concatenate([[0.0], np.cumsum([l.thickness_m for l in self.layers])])
        r[-1] = self.core_radius_m  # exact, no round-off
        return r

    def _ends(self) -> tuple[Vec3, Vec3]:
        a = axis_index(self.axis)
        R = self.outer_radius_m
        s, e = [0.0, 0.0, -R], [0.0, 0.0, -R]
        s[a], e[a] = -self.length_m / 2, self.length_m / 2
        return tuple(s), tuple(e)  # type: ignore[return-value]

    def build(self) -> PhantomBuild:
        R = self.outer_radius_m
        s, e = self._ends()
        lateral = "x" if self.axis == "y" else "y"
        r = [float(v) for v in self.radii()]
        names = [l.tissue for l in self.layers] + [self.core_tissue]
        prims, hints = [], []
        for i, (name, radius) in enumerate(zip(names, r)):
            label = "core" if i == len(self.layers) else f"layer{i}"
            prims.append(Cylinder(f"{label}_{name}", name, s, e, float(radius), priority=PRIORITY_TISSUE + i))
            if i < len(self.layers):
                ri = float(r[i + 1])
                what, t = f"layer {i} ({name})", self.layers[i].thickness_m
                hints += _layer_hints("z", -R + ri, -R + float(radius), what + " top", t)
                hints += _layer_hints("z", -R - float(radius), -R - ri, what + " bottom", t)
                hints += _layer_hints(lateral, ri, float(radius), what + " side", t)
                hints += _layer_hints(lateral, -float(radius), -ri, what + " side", t)
        a = axis_index(self.axis)
        lo, hi = [-R, -R, -2 * R], [R, R, 0.0]
        lo[a], hi[a] = -self.length_m / 2, self.length_m / 2
        return PhantomBuild(tuple(prims), tuple(hints), (tuple(lo), tuple(hi)))  # type: ignore[arg-type]

    def contains(self, points) -> np.ndarray:
        p = np.atleast_2d(np.asarray(points, dtype=float))
        a = axis_index(self.axis)
        lat = 1 - a  # x <-> y
        rho = np.hypot(p[:, lat], p[:, 2] + self.outer_radius_m)
        return (rho <= self.outer_radius_m) & (np.abs(p[:, a]) <= self.length_m / 2)

    def to_dict(self) -> dict:
        return {"type": self.type, "layers": [l.to_dict() for l in self.layers],
                "core": {"tissue": self.core_tissue, "radius_m": self.core_radius_m},
                "axis": self.axis, "length_m": self.length_m}

    @classmethod
    def from_dict(cls, d: Mapping) -> "LayeredCylinder":
        d = dict(d)
        core = d.pop("core", None)
        if not isinstance(core, Mapping) or set(core) != {"tissue", "radius_m"}:
            raise ValueError(f"layered cylinder: core must be {{'tissue': name, 'radius_m': r}}, got {core!r}")
        return construct(cls, d, "layered cylinder", layers=_layers(d.get("layers", ()), "layered cylinder"),
                         core_tissue=core["tissue"], core_radius_m=core["radius_m"])


SHELL_MATERIAL = "phantom_shell"


@dataclass(frozen=True)
class LiquidBox:
    """A box of tissue-simulating liquid under a dielectric shell on its top face (z = 0).

    The shell occupies ``-shell_thickness_m <= z <= 0``, the liquid ``-depth_m <= z < -shell_thickness_m``;
    depths are measured from the outer face of the shell.

    Parameters
    ----------
    liquid : str
        Material name of the liquid (usually a declared ``liquid``).
    size_x_m, size_y_m, depth_m : float
    shell_thickness_m : float
    shell : Dielectric
        Shell material (its name is always ``phantom_shell``).
    """

    liquid: str
    size_x_m: float
    size_y_m: float
    depth_m: float
    shell_thickness_m: float
    shell: Dielectric = field(default_factory=lambda: Dielectric(SHELL_MATERIAL, 3.7, loss_tangent=0.0))

    type = "liquid_box"

    def __post_init__(self):
        part = "liquid box"
        for k in ("size_x_m", "size_y_m", "depth_m", "shell_thickness_m"):
            object.__setattr__(self, k, positive(part, k, getattr(self, k)))
        if self.shell_thickness_m >= self.depth_m:
            raise ValueError(f"liquid box: shell_thickness_m ({self.shell_thickness_m} m) must be smaller "
                             f"than depth_m ({self.depth_m} m)")
        if not isinstance(self.liquid, str) or not self.liquid:
            raise ValueError(f"liquid box: liquid must be a material name, got {self.liquid!r}")

    def build(self) -> PhantomBuild:
        hx, hy, t, D = self.size_x_m / 2, self.size_y_m / 2, self.shell_thickness_m, self.depth_m
        prims = (Box(f"liquid_{self.liquid}", self.liquid, (-hx, -hy, -D), (hx, hy, 0.0), priority=PRIORITY_TISSUE),
                 Box("shell", SHELL_MATERIAL, (-hx, -hy, -t), (hx, hy, 0.0), priority=PRIORITY_TISSUE + 1))
        hints = _layer_hints("z", -t, 0.0, "shell", t) + _layer_hints("z", -D, -t, "liquid")
        return PhantomBuild(prims, tuple(hints), ((-hx, -hy, -D), (hx, hy, 0.0)), (self.shell,))

    def contains(self, points) -> np.ndarray:
        """Whether points lie in the liquid (not in the shell)."""
        p = np.atleast_2d(np.asarray(points, dtype=float))
        return ((np.abs(p[:, 0]) <= self.size_x_m / 2) & (np.abs(p[:, 1]) <= self.size_y_m / 2)
                & (p[:, 2] <= -self.shell_thickness_m) & (p[:, 2] >= -self.depth_m))

    def to_dict(self) -> dict:
        return {"type": self.type, "liquid": self.liquid, "size_x_m": self.size_x_m, "size_y_m": self.size_y_m,
                "depth_m": self.depth_m,
                "shell": {"thickness_m": self.shell_thickness_m, **self.shell.to_inline_dict()}}

    @classmethod
    def from_dict(cls, d: Mapping) -> "LiquidBox":
        d = dict(d)
        shell = dict(d.pop("shell", None) or {})
        if "thickness_m" not in shell:
            raise ValueError(f"liquid box: shell needs thickness_m (and eps_r, loss_tangent or sigma_S_per_m), "
                             f"got {shell!r}")
        t = shell.pop("thickness_m")
        try:
            diel = Dielectric(SHELL_MATERIAL, **shell)
        except TypeError as e:
            raise ValueError(f"liquid box shell: {e}") from None
        return construct(cls, d, "liquid box", shell_thickness_m=t, shell=diel)


@dataclass(frozen=True)
class NoPhantom:
    """No tissue at all: the antennas (and an implant antenna) sit in air.

    For validation against free-space antenna theory (input impedance of a dipole, Friis link).
    ``z = 0`` stays the reference plane: the external antenna above it, the implant ``depth_m``
    below it, both in air. There is no SAR (no tissue cell); a scene without tissue has empty
    body bounds at the origin.
    """

    type = "none"

    def build(self) -> PhantomBuild:
        return PhantomBuild((), (), ((0.0, 0.0, 0.0), (0.0, 0.0, 0.0)))

    def contains(self, points) -> np.ndarray:
        """Whether points (shape (n, 3)) lie in tissue: never; returns shape (n,) bool."""
        return np.zeros(len(np.atleast_2d(np.asarray(points, dtype=float))), dtype=bool)

    def to_dict(self) -> dict:
        return {"type": self.type}

    @classmethod
    def from_dict(cls, d: Mapping) -> "NoPhantom":
        return construct(cls, d, "phantom none")


from .anatomy import LabelVolume  # noqa: E402  (it builds a PhantomBuild from this module)

Phantom = LayeredSlab | LayeredCylinder | LiquidBox | NoPhantom | LabelVolume
PHANTOM_TYPES: dict[str, type] = {c.type: c for c in (LayeredSlab, LayeredCylinder, LiquidBox, NoPhantom,
                                                      LabelVolume)}


def phantom_from_dict(d: Mapping) -> Phantom:
    kind = d.get("type")
    if kind not in PHANTOM_TYPES:
        raise ValueError(f"phantom: type must be one of {sorted(PHANTOM_TYPES)}, got {kind!r}")
    return PHANTOM_TYPES[kind].from_dict(d)
