"""Small helpers shared by the spec dataclasses: checked numbers, checked dict -> spec construction."""
from __future__ import annotations

import dataclasses
import math
from typing import Any, Mapping


def positive(part: str, key: str, value: Any, allow_zero: bool = False) -> float:
    """``float(value)``, checked to be finite and > 0 (or >= 0); the error names part, key and number."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{part}: {key} must be a number, got {value!r}") from None
    ok = (v >= 0.0) if allow_zero else (v > 0.0)
    if not ok or not math.isfinite(v):
        raise ValueError(f"{part}: {key} must be {'>= 0' if allow_zero else '> 0'} m, got {v}"
                         if key.endswith("_m") else
                         f"{part}: {key} must be {'>= 0' if allow_zero else '> 0'}, got {v}")
    return v


def number(part: str, key: str, value: Any) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{part}: {key} must be a number, got {value!r}") from None
    if not math.isfinite(v):
        raise ValueError(f"{part}: {key} must be finite, got {v}")
    return v


def vector(part: str, key: str, value: Any, n: int) -> tuple[float, ...]:
    """A tuple of ``n`` finite floats."""
    try:
        t = tuple(float(c) for c in value)
    except (TypeError, ValueError):
        raise ValueError(f"{part}: {key} must be {n} numbers, got {value!r}") from None
    if len(t) != n or not all(math.isfinite(c) for c in t):
        raise ValueError(f"{part}: {key} must be {n} finite numbers, got {value!r}")
    return t


def choice(part: str, key: str, value: Any, allowed: tuple) -> Any:
    if value not in allowed:
        raise ValueError(f"{part}: {key} must be one of {list(allowed)}, got {value!r}")
    return value


def construct(cls, d: Mapping, part: str, **converted):
    """``cls(**d)`` with a clear error on unknown or missing keys.

    ``converted`` overrides entries of ``d`` (already turned into nested specs).
    """
    names = [f.name for f in dataclasses.fields(cls) if f.init]
    kw = {k: v for k, v in d.items() if k != "type"}
    kw.update(converted)
    unknown = sorted(set(kw) - set(names))
    if unknown:
        raise ValueError(f"{part}: unknown key(s) {unknown}; allowed: {sorted(names)}")
    required = [f.name for f in dataclasses.fields(cls)
                if f.init and f.default is dataclasses.MISSING and f.default_factory is dataclasses.MISSING]
    missing = [k for k in required if k not in kw]
    if missing:
        raise ValueError(f"{part}: missing key(s) {missing}")
    return cls(**kw)
