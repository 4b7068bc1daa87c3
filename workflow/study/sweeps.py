"""Sweep parameters and blocks: what varies between cases, and the rows each block contributes.

A study's ``sweep`` section names *parameters* and lists *blocks* of values::

    sweep:
      parameters:
        depth: scene.implant.depth_mm             # a scalar at a dotted path
        ext:                                      # a path taking named alternatives
          path: scene.external
          options: {loop: {...}, dipole: {...}}
      blocks:
        - grid: {depth: [5, 10, 20], ext: [loop, dipole]}     # every combination
        - zip: {skin: [1, 2], fat: [4, 8]}                    # varied together
        - list: [{gap: 1}, {gap: 2}]                          # explicit rows
        - random: {seed: 7, count: 5, ranges: {r: [5, 20]}}   # uniform samples
        - latin_hypercube: {seed: 7, count: 5, ranges: {r: [5, 20]}}

Each block yields rows (one value per parameter of the block); a case takes one row of every block
(product of blocks). A parameter belongs to one block at most.
"""
from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .errors import StudyError, join_path

BLOCK_KINDS = ("grid", "zip", "list", "random", "latin_hypercube")
RESERVED_NAMES = frozenset({"min", "max", "frequency_MHz"})

#: edge-unit suffix of a key -> unit shown in labels
LABEL_UNITS = (("_MHz", "MHz"), ("_GHz", "GHz"), ("_mm", "mm"), ("_g", "g"))


def path2unit(path: str) -> str:
    """Unit of the value at a dotted path, from its last key's suffix (``depth_mm`` -> ``mm``)."""
    last = path.rsplit(".", 1)[-1]
    for suffix, unit in LABEL_UNITS:
        if last.endswith(suffix):
            return unit
    return ""


@dataclass(frozen=True)
class Parameter:
    """A named knob: a dotted path, and optionally named alternatives for the value at that path.

    Attributes
    ----------
    name : str
        Short name used in blocks, derived expressions and labels.
    path : str
        Dotted path into ``scene`` or ``solver`` (edge units).
    options : dict or None
        Option name -> value (a whole sub-tree) for a choice; ``None`` for a plain scalar.
    """

    name: str
    path: str
    options: dict | None = None

    @property
    def is_choice(self) -> bool:
        return self.options is not None

    @property
    def unit(self) -> str:
        return "" if self.is_choice else path2unit(self.path)


@dataclass(frozen=True)
class Block:
    """One block of a sweep: its kind, its parameter names and its rows (one value per name)."""

    kind: str
    names: tuple[str, ...]
    rows: tuple[tuple[Any, ...], ...] = field(repr=False)
    key_path: str = ""

    def __len__(self) -> int:
        return len(self.rows)


def block_kind(block: dict) -> str:
    """The single kind key of a (schema-valid) block mapping."""
    return next(iter(block))


def block_names(kind: str, spec: Any) -> tuple[str, ...]:
    """Parameter names a block sets, in the order they are written."""
    if kind in ("grid", "zip"):
        return tuple(spec)
    if kind == "list":
        return tuple(spec[0]) if spec else ()
    return tuple(spec["ranges"])


def block_size(kind: str, spec: Any, key_path: str) -> int:
    """Number of rows a (schema-valid) block yields, computed without building them.

    Raises
    ------
    StudyError
        Zipped lists of different lengths.
    """
    if kind == "grid":
        return math.prod(len(v) for v in spec.values())
    if kind == "zip":
        lengths = {k: len(v) for k, v in spec.items()}
        if len(set(lengths.values())) > 1:
            raise StudyError(join_path(key_path, "zip"), "zipped lists have different lengths", lengths,
                             "lists of equal length")
        return next(iter(lengths.values()))
    if kind == "list":
        return len(spec)
    return int(spec["count"])


def _lhs_unit_samples(d: int, count: int, seed: int) -> np.ndarray:
    from scipy.stats import qmc

    try:
        sampler = qmc.LatinHypercube(d=d, rng=np.random.default_rng(seed))
    except TypeError:  # scipy < 1.15 names the argument seed
        sampler = qmc.LatinHypercube(d=d, seed=np.random.default_rng(seed))
    return sampler.random(count)


def sample_rows(kind: str, spec: dict, key_path: str) -> tuple[tuple[float, ...], ...]:
    """Rows of a ``random`` or ``latin_hypercube`` block, shape ``(count, n_ranges)`` as tuples.

    ``random`` draws ``numpy.random.default_rng(seed).uniform(low, high, size=(count, d))``;
    ``latin_hypercube`` scales ``scipy.stats.qmc.LatinHypercube(d, rng=default_rng(seed)).random(count)``
    to the ranges with ``qmc.scale``. Samples are rounded to ``decimals`` (default 3; ``null`` keeps all).
    """
    from scipy.stats import qmc

    names = list(spec["ranges"])
    lo = np.array([float(spec["ranges"][n][0]) for n in names])
    hi = np.array([float(spec["ranges"][n][1]) for n in names])
    for n, a, b in zip(names, lo, hi):
        if not a < b:
            raise StudyError(join_path(key_path, kind, "ranges", n), "range low must be below high", spec["ranges"][n],
                             "[low, high] with low < high")
    count, seed = int(spec["count"]), int(spec["seed"])
    if kind == "random":
        samples = np.random.default_rng(seed).uniform(lo, hi, size=(count, len(names)))
    else:
        samples = qmc.scale(_lhs_unit_samples(len(names), count, seed), lo, hi)
    decimals = spec.get("decimals", 3)
    if decimals is not None:
        samples = np.round(samples, int(decimals))
    return tuple(tuple(float(x) for x in row) for row in samples)


def block_rows(kind: str, spec: Any, key_path: str) -> tuple[tuple[Any, ...], ...]:
    """Rows of a (schema-valid) block, in a fixed order.

    ``grid`` rows run like nested loops with the last-written parameter fastest
    (``itertools.product``); ``zip`` takes the i-th value of each list; ``list`` keeps the written rows.

    Raises
    ------
    StudyError
        List rows naming different parameters, or a repeated row.
    """
    if kind == "grid":
        rows = tuple(itertools.product(*spec.values()))
    elif kind == "zip":
        block_size(kind, spec, key_path)
        rows = tuple(zip(*spec.values()))
    elif kind == "list":
        names = tuple(spec[0])
        for i, row in enumerate(spec):
            if set(row) != set(names):
                raise StudyError(join_path(key_path, "list", i), "every row of a list block must name the same "
                                 "parameters", sorted(row), ", ".join(names))
        rows = tuple(tuple(row[n] for n in names) for row in spec)
    else:
        rows = sample_rows(kind, spec, key_path)
    seen: dict[tuple, int] = {}
    for i, row in enumerate(rows):
        k = tuple((type(v) is str, float(v) if type(v) is not str else v) for v in row)
        if k in seen:
            names = block_names(kind, spec)
            raise StudyError(join_path(key_path, kind), f"row {i} repeats row {seen[k]} (same values twice)",
                             dict(zip(names, row)), "each combination of values once")
        seen[k] = i
    return rows
