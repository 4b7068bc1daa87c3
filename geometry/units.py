"""Conversion between edge units (study files: mm, MHz) and SI (everything inside bodysweep)."""
from __future__ import annotations

from typing import Any

#: suffix at the edge -> (suffix inside, factor to SI)
EDGE_SUFFIXES: dict[str, tuple[str, float]] = {
    "_mm": ("_m", 1e-3),
    "_MHz": ("_Hz", 1e6),
    "_GHz": ("_Hz", 1e9),
    "_g": ("_kg", 1e-3),
}


def _convert(key: str, value: Any) -> tuple[str, Any]:
    for edge, (inner, factor) in EDGE_SUFFIXES.items():
        if key.endswith(edge):
            return key[: -len(edge)] + inner, _scale(value, factor)
    return key, from_edge_units(value)


def _scale(value: Any, factor: float) -> Any:
    if isinstance(value, bool) or value is None:
        return value
    if isinstance(value, (int, float)):
        return value * factor
    if isinstance(value, (list, tuple)):
        return [_scale(v, factor) for v in value]
    return value


def from_edge_units(obj: Any) -> Any:
    """Recursively rename ``*_mm`` keys to ``*_m`` (x 1e-3), ``*_MHz`` to ``*_Hz`` (x 1e6), ``*_g`` to ``*_kg``.

    Lists of numbers under a unit key are scaled element-wise; other values pass through unchanged.

    Examples
    --------
    >>> from_edge_units({"depth_mm": 5, "layers": [{"thickness_mm": 2.0}]})
    {'depth_m': 0.005, 'layers': [{'thickness_m': 0.002}]}
    """
    if isinstance(obj, dict):
        return dict(_convert(k, v) for k, v in obj.items())
    if isinstance(obj, list):
        return [from_edge_units(v) for v in obj]
    return obj
