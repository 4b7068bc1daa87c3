"""The built scene: what a scene spec turns into at one frequency, and what a solver adapter reads.

A :class:`SceneModel` is plain data: materials already evaluated at ``frequency_Hz``, primitives
with priorities, ports, named anchor points and mesh hints. It round-trips through plain dicts
(:meth:`SceneModel.to_dict` / :meth:`SceneModel.from_dict`) so that a solver job can be handed a
JSON file and nothing else.
"""
from __future__ import annotations

from dataclasses import dataclass, field

from .primitives import Material, Port, Primitive, Vec3, primitive_from_dict, primitive_to_dict


@dataclass(frozen=True)
class MeshHint:
    """A request to the mesher: a fixed line, or a maximum cell size inside a region.

    ``axis`` is ``'x'|'y'|'z'``. For a fixed line, ``lo == hi`` is the coordinate. For a region,
    ``lo < hi`` bound it along ``axis`` and ``max_cell`` (metres) caps the cell size inside.
    """

    axis: str
    lo: float
    hi: float
    max_cell: float = 0.0
    reason: str = ""


@dataclass(frozen=True)
class ElementBuild:
    """An element built around the origin: conductors, feed-gap ends, port axis, and mesh hints."""

    primitives: tuple[Primitive, ...]
    feed_start: Vec3
    feed_stop: Vec3
    feed_axis: str
    hints: tuple[MeshHint, ...] = ()
    materials: tuple = ()  # Dielectric specs the element brings (a planar antenna's board)


@dataclass(frozen=True)
class PhantomBuild:
    """What a phantom turns into.

    Attributes
    ----------
    primitives : tuple of Primitive
    hints : tuple of MeshHint
    body_bounds : ((x0, y0, z0), (x1, y1, z1))
    materials : tuple of Dielectric
        Materials the phantom defines itself (e.g. the liquid box's shell).
    """

    primitives: tuple[Primitive, ...]
    hints: tuple[MeshHint, ...]
    body_bounds: tuple[Vec3, Vec3]
    materials: tuple = ()


@dataclass(frozen=True)
class SceneModel:
    """Everything a solver needs about the physical arrangement of one case at one frequency.

    Attributes
    ----------
    frequency_Hz : float
        Frequency at which the material properties were evaluated.
    materials : tuple of Material
        Every material referenced by a primitive (air is implicit background, eps_r = 1).
    primitives : tuple of Primitive
        Boxes, cylinders, wires and polygons, each naming a material and a priority.
    ports : tuple of Port
        Port 1 is the external antenna's feed; port 2 the implant antenna's feed (if present).
    anchors : dict of str to (x, y, z)
        Named points, e.g. ``"surface"``, ``"implant"``, ``"external_feed"``.
    body_bounds : ((x0, y0, z0), (x1, y1, z1))
        Bounding box of all tissue (the phantom), metres.
    hints : tuple of MeshHint
        Extra lines / refinement regions the builders ask for (layer interfaces, thin parts).
    """

    frequency_Hz: float
    materials: tuple[Material, ...]
    primitives: tuple[Primitive, ...]
    ports: tuple[Port, ...]
    anchors: dict[str, Vec3] = field(default_factory=dict)
    body_bounds: tuple[Vec3, Vec3] = ((0.0, 0.0, 0.0), (0.0, 0.0, 0.0))
    hints: tuple[MeshHint, ...] = ()

    def material(self, name: str) -> Material:
        for m in self.materials:
            if m.name == name:
                return m
        raise KeyError(f"material {name!r} is not defined in this scene; defined: {[m.name for m in self.materials]}")

    def port(self, number: int) -> Port:
        for p in self.ports:
            if p.number == number:
                return p
        raise KeyError(f"no port number {number}; ports: {[p.number for p in self.ports]}")

    def bounds(self) -> tuple[Vec3, Vec3]:
        """Bounding box of every primitive and port (metres)."""
        items = list(self.primitives) + list(self.ports)
        los, his = zip(*(it.bounds() for it in items))
        lo = tuple(min(v[i] for v in los) for i in range(3))
        hi = tuple(max(v[i] for v in his) for i in range(3))
        return lo, hi  # type: ignore[return-value]

    def to_dict(self) -> dict:
        return {
            "frequency_Hz": self.frequency_Hz,
            "materials": [m.to_dict() for m in self.materials],
            "primitives": [primitive_to_dict(p) for p in self.primitives],
            "ports": [primitive_to_dict(p) for p in self.ports],
            "anchors": {k: list(v) for k, v in self.anchors.items()},
            "body_bounds": [list(self.body_bounds[0]), list(self.body_bounds[1])],
            "hints": [dict(axis=h.axis, lo=h.lo, hi=h.hi, max_cell=h.max_cell, reason=h.reason) for h in self.hints],
        }

    @classmethod
    def from_dict(cls, d: dict) -> "SceneModel":
        return cls(
            frequency_Hz=float(d["frequency_Hz"]),
            materials=tuple(Material.from_dict(m) for m in d["materials"]),
            primitives=tuple(primitive_from_dict(p) for p in d["primitives"]),  # type: ignore[misc]
            ports=tuple(primitive_from_dict(p) for p in d["ports"]),  # type: ignore[misc]
            anchors={k: tuple(v) for k, v in d.get("anchors", {}).items()},  # type: ignore[misc]
            body_bounds=(tuple(d["body_bounds"][0]), tuple(d["body_bounds"][1])),  # type: ignore[arg-type]
            hints=tuple(MeshHint(**h) for h in d.get("hints", [])),
        )
