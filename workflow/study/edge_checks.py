"""Plausibility of edge-unit values (mm, MHz, g) anywhere in a scene or solver section.

These checks complement the section schemas: they catch values that no schema can know the
meaning of from the key alone, using the unit and the physical idea in the key's name.

* every number is finite;
* a length (``*_mm``) lies within +-10 m (10 000 mm): a larger value is most likely a unit slip;
* a size (``thickness``, ``radius``, ``length``, ``width``, ``height``, ``diameter``, ``depth``,
  ``gap``, ``size``, ``spacing``, ``pitch``, ``side`` in the key) must not be negative (zero is left to
  the builders: a wire radius 0 means a thin wire);
* a frequency (``*_MHz``) lies within the tissue models' validity 10 ... 6000 MHz (``*_GHz`` 0.01 ... 6);
* a mass (``*_g``) is > 0.
"""
from __future__ import annotations

import math
from typing import Any, Iterator

from .errors import StudyError, join_path

MAX_ABS_LENGTH_MM = 10_000.0
#: larger integers cannot be represented as floats exactly (IEEE 754 double: 2**53) and are refused
MAX_ABS_INTEGER = 2**53
FREQUENCY_RANGE_MHZ = (10.0, 6000.0)
SIZE_WORDS = ("thickness", "radius", "length", "width", "height", "diameter", "depth", "gap", "size",
              "spacing", "pitch", "side")


def _numbers(value: Any, path: str) -> Iterator[tuple[str, float]]:
    if isinstance(value, bool):
        return
    if isinstance(value, (int, float)):
        yield path, value
    elif isinstance(value, list):
        for i, v in enumerate(value):
            yield from _numbers(v, join_path(path, i))


def check_finite(data: Any, path: str = "") -> None:
    """Every number in ``data`` is finite and every integer within +-2**53 (refused with their key path)."""
    if isinstance(data, dict):
        for k, v in data.items():
            check_finite(v, join_path(path, k))
    elif isinstance(data, list):
        for i, v in enumerate(data):
            check_finite(v, join_path(path, i))
    elif isinstance(data, float) and not math.isfinite(data):
        raise StudyError(path or "(root)", "number is not finite", data, "finite numbers")
    elif isinstance(data, int) and not isinstance(data, bool) and abs(data) > MAX_ABS_INTEGER:
        raise StudyError(path or "(root)", "integer too large", data, "integers within +-2**53")


def check_edge_values(data: Any, path: str = "", context: str = "") -> None:
    """Walk nested data and check every unit-carrying key (see module docstring).

    Parameters
    ----------
    data : Any
        A scene or solver section (or any part of one) in edge units.
    path : str
        Key path of ``data`` (prefix of the reported key paths).
    context : str
        Appended to the problem, e.g. ``"in case f=403MHz depth=10mm"``.
    """
    suffix = f" {context}" if context else ""
    if isinstance(data, list):
        for i, v in enumerate(data):
            check_edge_values(v, join_path(path, i), context)
        return
    if not isinstance(data, dict):
        return
    for key, value in data.items():
        where = join_path(path, key)
        is_number_list = isinstance(value, list) and all(
            isinstance(v, (int, float)) and not isinstance(v, bool) for v in value)
        if isinstance(value, dict) or (isinstance(value, list) and not is_number_list):
            check_edge_values(value, where, context)
            continue
        lower = key.lower()
        for at, x in _numbers(value, where):
            if not math.isfinite(x):
                raise StudyError(at, "number is not finite" + suffix, x, "finite numbers")
            if key.endswith("_mm"):
                if abs(x) > MAX_ABS_LENGTH_MM:
                    raise StudyError(at, "length out of range (mm expected)" + suffix, x,
                                     f"-{MAX_ABS_LENGTH_MM:g} ... {MAX_ABS_LENGTH_MM:g} mm")
                if any(w in lower for w in SIZE_WORDS) and x < 0:
                    raise StudyError(at, "a size must not be negative" + suffix, x, "a length >= 0 mm")
            elif key.endswith("_MHz"):
                lo, hi = FREQUENCY_RANGE_MHZ
                if not lo <= x <= hi:
                    raise StudyError(at, "frequency outside the tissue models' validity" + suffix, x,
                                     f"{lo:g} ... {hi:g} MHz")
            elif key.endswith("_GHz"):
                lo, hi = FREQUENCY_RANGE_MHZ
                if not lo / 1e3 <= x <= hi / 1e3:
                    raise StudyError(at, "frequency outside the tissue models' validity" + suffix, x,
                                     f"{lo / 1e3:g} ... {hi / 1e3:g} GHz")
            elif key.endswith("_g"):
                if not x > 0:
                    raise StudyError(at, "a mass must be positive" + suffix, x, "a mass > 0 g")
