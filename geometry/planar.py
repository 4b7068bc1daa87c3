"""Planar implant antennas on a grounded substrate: inverted-F patch, meandered line, spiral.

Each element is a printed radiator on the top face of a dielectric substrate whose bottom face carries a
ground plane, optionally under a dielectric superstrate. A vertical probe (the lumped port) runs from the
ground to the radiator; an optional shorting pin next to it connects radiator and ground. These are the
shapes miniaturised implant antennas at 401-406 MHz and 433 MHz are commonly built from (common practice).

Frame (around the element's own origin, before placement): the board lies in the x-y plane, centred on
x = y = 0; the ground plane is at ``z = -h/2``, the radiator at ``z = +h/2`` (``h`` the substrate
thickness), the superstrate from ``+h/2`` to ``+h/2 + t``. Every radiator's trace starts at a *start
point* S going in a *start direction* t: the shorting pin (if any) stands at S, the feed probe at
``S + feed_distance * t``. Traces and planes are zero-thickness sheets; the pin and the probe are thin
wires on the mesh.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping

import numpy as np

from .model import ElementBuild, MeshHint
from .primitives import PRIORITY_CONDUCTOR, PRIORITY_ENCAPSULATION, Box, Polygon, Primitive, Wire
from .shapes import strip_outline
from .specs import choice, positive, vector
from .tissues import Dielectric

#: substrate and superstrate sit above a capsule and below the metal
PRIORITY_BOARD = PRIORITY_ENCAPSULATION + 1


@dataclass(frozen=True)
class Slab:
    """A dielectric layer of the board: thickness plus ``eps_r`` and a loss tangent or conductivity."""

    thickness_m: float
    eps_r: float
    loss_tangent: float | None = None
    sigma_S_per_m: float | None = None

    def __post_init__(self):
        object.__setattr__(self, "thickness_m", positive("board layer", "thickness_m", self.thickness_m))
        Dielectric("board layer", self.eps_r, self.loss_tangent, self.sigma_S_per_m)  # checks the values

    def dielectric(self, name: str) -> Dielectric:
        return Dielectric(name, self.eps_r, self.loss_tangent, self.sigma_S_per_m)

    def to_dict(self) -> dict:
        d: dict = {"thickness_m": self.thickness_m, "eps_r": float(self.eps_r)}
        if self.loss_tangent is not None:
            d["loss_tangent"] = self.loss_tangent
        if self.sigma_S_per_m is not None:
            d["sigma_S_per_m"] = self.sigma_S_per_m
        return d

    @classmethod
    def coerce(cls, value, part: str, key: str) -> "Slab | None":
        if value is None or isinstance(value, Slab):
            return value
        if not isinstance(value, Mapping):
            raise ValueError(f"{part}: {key} must be a mapping with thickness_m and eps_r, got {value!r}")
        allowed = ("thickness_m", "eps_r", "loss_tangent", "sigma_S_per_m")
        unknown = sorted(set(value) - set(allowed))
        if unknown:
            raise ValueError(f"{part}: {key}: unknown key(s) {unknown}; allowed: {list(allowed)}")
        missing = [k for k in ("thickness_m", "eps_r") if k not in value]
        if missing:
            raise ValueError(f"{part}: {key}: missing key(s) {missing}")
        try:
            return cls(**value)
        except ValueError as e:
            raise ValueError(f"{part}: {key}: {e}") from None


@dataclass(frozen=True)
class _Trace:
    """What a radiator contributes: its sheet outline(s) in (x, y), start point and direction, hints."""

    outlines: tuple[np.ndarray, ...]
    start: tuple[float, float]
    direction: tuple[float, float]
    first_segment_m: float
    min_gap_m: float  # smallest metal-to-metal spacing inside the radiator (inf for a solid patch)


class _Board:
    """Shared checks and build of the grounded board; subclasses provide ``_trace()``."""

    type = "planar"

    def _check_board(self, part: str) -> None:
        object.__setattr__(self, "board_size_m", vector(part, "board_size_m", self.board_size_m, 2))
        for i, a in enumerate("xy"):
            positive(part, f"board_size_m[{i}] ({a})", self.board_size_m[i])
        object.__setattr__(self, "substrate", Slab.coerce(self.substrate, part, "substrate"))
        if self.substrate is None:
            raise ValueError(f"{part}: substrate is required (thickness_m and eps_r)")
        object.__setattr__(self, "superstrate", Slab.coerce(self.superstrate, part, "superstrate"))
        object.__setattr__(self, "feed_distance_m", positive(part, "feed_distance_m", self.feed_distance_m))
        if not isinstance(self.shorting_pin, bool):
            raise ValueError(f"{part}: shorting_pin must be true or false, got {self.shorting_pin!r}")
        tr = self._trace()
        w = self.trace_width_m
        if self.feed_distance_m > tr.first_segment_m - w / 2:
            raise ValueError(f"{part}: feed_distance_m ({self.feed_distance_m:.4g} m) must be shorter than the "
                             f"radiator's first straight run less half a trace ({tr.first_segment_m - w / 2:.4g} m)")
        pts = np.concatenate(tr.outlines)
        bx, by = self.board_size_m
        reach = np.max(np.abs(pts), axis=0)
        if reach[0] > bx / 2 or reach[1] > by / 2:
            raise ValueError(f"{part}: the radiator ({2 * reach[0]:.4g} x {2 * reach[1]:.4g} m) does not fit on the "
                             f"board ({bx:.4g} x {by:.4g} m); enlarge board_size_m or shrink the radiator")

    def _trace(self) -> _Trace:  # pragma: no cover - every subclass provides it
        raise NotImplementedError

    def feed_points(self) -> tuple[tuple[float, float], tuple[float, float]]:
        """(pin, feed) positions in (x, y) on the trace's centre line."""
        tr = self._trace()
        s, t = np.asarray(tr.start), np.asarray(tr.direction)
        f = s + self.feed_distance_m * t
        return (float(s[0]), float(s[1])), (float(f[0]), float(f[1]))

    def build(self, name: str):
        h = self.substrate.thickness_m
        bx, by = self.board_size_m
        tr = self._trace()
        prims: list[Primitive] = []
        mats: list[Dielectric] = [self.substrate.dielectric(f"{name}_substrate")]
        prims.append(Box(f"{name}_substrate", f"{name}_substrate", (-bx / 2, -by / 2, -h / 2), (bx / 2, by / 2, h / 2),
                         priority=PRIORITY_BOARD))
        top = h / 2
        if self.superstrate is not None:
            t = self.superstrate.thickness_m
            mats.append(self.superstrate.dielectric(f"{name}_superstrate"))
            prims.append(Box(f"{name}_superstrate", f"{name}_superstrate", (-bx / 2, -by / 2, h / 2),
                             (bx / 2, by / 2, h / 2 + t), priority=PRIORITY_BOARD))
            top = h / 2 + t
        ground = ((-bx / 2, -by / 2), (bx / 2, -by / 2), (bx / 2, by / 2), (-bx / 2, by / 2))
        prims.append(Polygon(f"{name}_ground", self.conductor, "z", -h / 2, ground, priority=PRIORITY_CONDUCTOR))
        for i, o in enumerate(tr.outlines):
            prims.append(Polygon(f"{name}_radiator{i}", self.conductor, "z", h / 2,
                                 tuple((float(u), float(v)) for u, v in o), priority=PRIORITY_CONDUCTOR))
        pin, feed = self.feed_points()
        if self.shorting_pin:
            prims.append(Wire(f"{name}_pin", self.conductor, ((pin[0], pin[1], -h / 2), (pin[0], pin[1], h / 2))))
        hints = [MeshHint("z", v, v, 0.0, f"{name} board plane") for v in (-h / 2, h / 2, top)]
        hints += [MeshHint("z", -h / 2, h / 2, h / 2, f"{name} substrate: at least two cells across")]
        hints += [MeshHint("x", v, v, 0.0, f"{name} board edge") for v in (-bx / 2, bx / 2)]
        hints += [MeshHint("y", v, v, 0.0, f"{name} board edge") for v in (-by / 2, by / 2)]
        for a, i in (("x", 0), ("y", 1)):
            vals = {round(feed[i], 12)} | ({round(pin[i], 12)} if self.shorting_pin else set())
            hints += [MeshHint(a, v, v, 0.0, f"{name} feed probe and pin") for v in sorted(vals)]
        pts = np.concatenate(tr.outlines)
        if math.isfinite(tr.min_gap_m):  # keep neighbouring turns apart: two cells across each gap
            lo, hi = pts.min(axis=0), pts.max(axis=0)
            cap = tr.min_gap_m / 2
            hints += [MeshHint(a, float(lo[i]), float(hi[i]), cap, f"{name} gaps between turns")
                      for i, a in enumerate("xy")]
        else:
            lo, hi = pts.min(axis=0), pts.max(axis=0)
            hints += [MeshHint(a, float(v), float(v), 0.0, f"{name} radiator edge")
                      for i, a in enumerate("xy") for v in (lo[i], hi[i])]
        fs, fe = (feed[0], feed[1], -h / 2), (feed[0], feed[1], h / 2)
        return ElementBuild(tuple(prims), fs, fe, "z", tuple(hints), tuple(mats))

    def _board_dict(self) -> dict:
        d = {"board_size_m": list(self.board_size_m), "substrate": self.substrate.to_dict(),
             "feed_distance_m": self.feed_distance_m, "shorting_pin": self.shorting_pin,
             "conductor": self.conductor}
        if self.superstrate is not None:
            d["superstrate"] = self.superstrate.to_dict()
        return d


@dataclass(frozen=True)
class InvertedF(_Board):
    """Planar inverted-F: a rectangular patch shorted to the ground by a pin at its ``x``-minimum edge.

    The pin stands on that edge at ``pin_position_m`` from the patch's ``y``-minimum corner; the feed probe
    is ``feed_distance_m`` from the pin along ``+x``. Parameters in metres.
    """

    patch_length_m: float
    patch_width_m: float
    board_size_m: tuple[float, float]
    substrate: Slab
    feed_distance_m: float
    pin_position_m: float = 0.0
    superstrate: Slab | None = None
    shorting_pin: bool = True
    conductor: str = "pec"

    type = "inverted_f"

    def __post_init__(self):
        part = "inverted_f"
        for k in ("patch_length_m", "patch_width_m"):
            object.__setattr__(self, k, positive(part, k, getattr(self, k)))
        object.__setattr__(self, "pin_position_m", positive(part, "pin_position_m", self.pin_position_m, True))
        if self.pin_position_m > self.patch_width_m:
            raise ValueError(f"{part}: pin_position_m ({self.pin_position_m:.4g} m) must lie on the patch's "
                             f"shorted edge, 0 to patch_width_m ({self.patch_width_m:.4g} m)")
        self._check_board(part)

    @property
    def trace_width_m(self) -> float:
        return 0.0

    def _trace(self) -> _Trace:
        L, W = self.patch_length_m, self.patch_width_m
        outline = np.array([(-L / 2, -W / 2), (L / 2, -W / 2), (L / 2, W / 2), (-L / 2, W / 2)])
        return _Trace((outline,), (-L / 2, -W / 2 + self.pin_position_m), (1.0, 0.0), L, math.inf)

    def to_dict(self) -> dict:
        return {"type": self.type, "patch_length_m": self.patch_length_m, "patch_width_m": self.patch_width_m,
                "pin_position_m": self.pin_position_m, **self._board_dict()}


@dataclass(frozen=True)
class MeanderLine(_Board):
    """A meandered trace: a lead along ``+x`` then ``legs`` legs along ``y`` joined alternately at the top
    and the bottom, ``leg_pitch_m`` apart, ``meander_height_m`` between the centre lines of the two joins.
    The pin (if any) stands at the lead's start, the feed ``feed_distance_m`` along the lead.
    """

    legs: int
    leg_pitch_m: float
    meander_height_m: float
    trace_width_m: float
    board_size_m: tuple[float, float]
    substrate: Slab
    feed_distance_m: float
    lead_length_m: float = 0.0
    superstrate: Slab | None = None
    shorting_pin: bool = True
    conductor: str = "pec"

    type = "meander"

    def __post_init__(self):
        part = "meander"
        if not isinstance(self.legs, int) or isinstance(self.legs, bool) or self.legs < 1:
            raise ValueError(f"{part}: legs must be an integer >= 1, got {self.legs!r}")
        for k in ("leg_pitch_m", "meander_height_m", "trace_width_m"):
            object.__setattr__(self, k, positive(part, k, getattr(self, k)))
        object.__setattr__(self, "lead_length_m", positive(part, "lead_length_m", self.lead_length_m, True))
        if not self.leg_pitch_m > 2 * self.trace_width_m:
            raise ValueError(f"{part}: leg_pitch_m ({self.leg_pitch_m:.4g} m) must exceed twice trace_width_m "
                             f"({self.trace_width_m:.4g} m) so that the gaps are at least one trace wide")
        if not self.meander_height_m > 2 * self.trace_width_m:
            raise ValueError(f"{part}: meander_height_m ({self.meander_height_m:.4g} m) must exceed twice "
                             f"trace_width_m ({self.trace_width_m:.4g} m)")
        self._check_board(part)

    def centreline(self) -> np.ndarray:
        """Centre line (n, 2), centred on the origin."""
        p, a = self.leg_pitch_m, self.meander_height_m / 2
        lead = self.lead_length_m or p
        pts = [(-lead, -a)]
        y = -a
        for k in range(self.legs):
            x = k * p
            pts += [(x, y), (x, -y)]
            y = -y
        c = np.asarray(pts, float)
        c[:, 0] -= (c[:, 0].min() + c[:, 0].max()) / 2
        return c

    def _trace(self) -> _Trace:
        c = self.centreline()
        first = float(c[1, 0] - c[0, 0])
        return _Trace((strip_outline(c, self.trace_width_m),), (float(c[0, 0]), float(c[0, 1])), (1.0, 0.0),
                      first, self.leg_pitch_m - self.trace_width_m)

    def to_dict(self) -> dict:
        return {"type": self.type, "legs": self.legs, "leg_pitch_m": self.leg_pitch_m,
                "meander_height_m": self.meander_height_m, "trace_width_m": self.trace_width_m,
                "lead_length_m": self.lead_length_m, **self._board_dict()}


@dataclass(frozen=True)
class Spiral(_Board):
    """A single-arm spiral winding inward from its outer start, square or circular.

    Square: the outer turn's centre line is a square of side ``2 * outer_half_size_m``; each quarter turn
    steps ``turn_pitch_m`` inward. Circular: an Archimedean spiral ``r = R - pitch * angle / (2 pi)`` from
    ``(0, -R)`` counter-clockwise. ``turns`` full turns (may be fractional in steps of 0.25 for squares).
    """

    shape: str
    turns: float
    outer_half_size_m: float
    turn_pitch_m: float
    trace_width_m: float
    board_size_m: tuple[float, float]
    substrate: Slab
    feed_distance_m: float
    superstrate: Slab | None = None
    shorting_pin: bool = True
    segments_per_turn: int = 48
    conductor: str = "pec"

    type = "spiral"

    def __post_init__(self):
        part = "spiral"
        choice(part, "shape", self.shape, ("square", "circular"))
        object.__setattr__(self, "turns", positive(part, "turns", self.turns))
        for k in ("outer_half_size_m", "turn_pitch_m", "trace_width_m"):
            object.__setattr__(self, k, positive(part, k, getattr(self, k)))
        if not isinstance(self.segments_per_turn, int) or self.segments_per_turn < 8:
            raise ValueError(f"{part}: segments_per_turn must be an integer >= 8, got {self.segments_per_turn!r}")
        if self.shape == "square" and abs(self.turns * 4 - round(self.turns * 4)) > 1e-9:
            raise ValueError(f"{part}: a square spiral takes turns in quarter steps, got {self.turns}")
        if not self.turn_pitch_m > 2 * self.trace_width_m:
            raise ValueError(f"{part}: turn_pitch_m ({self.turn_pitch_m:.4g} m) must exceed twice trace_width_m "
                             f"({self.trace_width_m:.4g} m)")
        inner = self.outer_half_size_m - self.turns * self.turn_pitch_m
        if not inner > self.trace_width_m:
            raise ValueError(f"{part}: {self.turns} turns at turn_pitch_m {self.turn_pitch_m:.4g} m do not fit in "
                             f"outer_half_size_m {self.outer_half_size_m:.4g} m (innermost half size {inner:.4g} m); "
                             f"use fewer turns or a smaller pitch")
        self._check_board(part)

    def centreline(self) -> np.ndarray:
        R, p = self.outer_half_size_m, self.turn_pitch_m
        if self.shape == "circular":
            n = max(2, int(math.ceil(self.segments_per_turn * self.turns)) + 1)
            th = np.linspace(0.0, 2 * math.pi * self.turns, n)
            r = R - p * th / (2 * math.pi)
            ang = -math.pi / 2 + th
            return np.stack([r * np.cos(ang), r * np.sin(ang)], 1)
        # square, inward: quarters run +x, +y, -x, -y; the left and top sides step one pitch inward
        pts = [(-R, -R)]
        x, y = -R, -R
        for k in range(int(round(self.turns * 4))):
            a = R - (k // 4) * p  # half size of this turn's bottom and right sides
            if k % 4 == 0:
                x = a
            elif k % 4 == 1:
                y = a
            elif k % 4 == 2:
                x = -(a - p)
            else:
                y = -(a - p)
            pts.append((x, y))
        return np.asarray(pts, float)

    def _trace(self) -> _Trace:
        c = self.centreline()
        seg = np.linalg.norm(c[1] - c[0])
        if self.shape == "circular":  # the first straight run of a polyline arc: pin and feed on the arc
            seg = self.outer_half_size_m * math.pi / 4
        return _Trace((strip_outline(c, self.trace_width_m),), (float(c[0, 0]), float(c[0, 1])), (1.0, 0.0),
                      float(seg), self.turn_pitch_m - self.trace_width_m)

    def feed_points(self):
        if self.shape != "circular":
            return super().feed_points()
        R = self.outer_half_size_m
        th = self.feed_distance_m / R  # along the arc; the radius shrinks by pitch * th / 2 pi
        r = R - self.turn_pitch_m * th / (2 * math.pi)
        return (0.0, -R), (float(r * math.sin(th)), float(-r * math.cos(th)))

    def to_dict(self) -> dict:
        return {"type": self.type, "shape": self.shape, "turns": self.turns,
                "outer_half_size_m": self.outer_half_size_m, "turn_pitch_m": self.turn_pitch_m,
                "trace_width_m": self.trace_width_m, "segments_per_turn": self.segments_per_turn,
                **self._board_dict()}


PLANAR_TYPES: dict[str, type] = {"inverted_f": InvertedF, "meander": MeanderLine, "spiral": Spiral}
