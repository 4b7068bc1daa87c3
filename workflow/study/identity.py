"""Case identity: a short hash of the canonical JSON of a fully resolved case plus the code versions.

Canonical JSON: keys sorted, no whitespace, every number written as a float through ``repr``
(so ``10``, ``10.0`` and ``1e1`` are the same) after rounding to 15 significant digits (so that
``0.1`` mm converted to metres and ``0.0001`` m give the same text: the conversion's rounding error
is below 1e-16 relative), ``-0.0`` written as ``0.0``, tuples as lists, non-finite numbers refused. The study name and the label are *not* part of the identity: the same
case in two studies has the same id.
"""
from __future__ import annotations

import hashlib
import json
import math
from typing import Any

#: hex characters kept of the sha256 digest
CASE_ID_LENGTH = 12
#: numbers are rounded to this many significant digits before hashing
SIGNIFICANT_DIGITS = 15


def _normalise(obj: Any, where: str = "") -> Any:
    if isinstance(obj, bool) or obj is None or isinstance(obj, str):
        return obj
    if isinstance(obj, (int, float)):
        x = float(obj)
        if not math.isfinite(x):
            raise ValueError(f"{where or 'value'}: non-finite number {obj!r} cannot be part of a case identity")
        x = float(f"{x:.{SIGNIFICANT_DIGITS}g}")
        return 0.0 if x == 0.0 else x
    if hasattr(obj, "item") and callable(obj.item) and getattr(obj, "shape", None) == ():  # numpy scalar
        return _normalise(obj.item(), where)
    if isinstance(obj, dict):
        out = {}
        for k, v in obj.items():
            if not isinstance(k, str):
                raise ValueError(f"{where or 'mapping'}: key {k!r} is not a string")
            out[k] = _normalise(v, f"{where}.{k}" if where else k)
        return out
    if isinstance(obj, (list, tuple)):
        return [_normalise(v, f"{where}.{i}" if where else str(i)) for i, v in enumerate(obj)]
    raise TypeError(f"{where or 'value'}: {type(obj).__name__} cannot be part of a case identity")


def canonical_json(obj: Any) -> str:
    """Canonical JSON text of plain data (see module docstring).

    Examples
    --------
    >>> canonical_json({"b": 10, "a": [1e1, -0.0]})
    '{"a":[10.0,0.0],"b":10.0}'
    """
    return json.dumps(_normalise(obj), sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)


def content2case_id(content: dict) -> str:
    """First :data:`CASE_ID_LENGTH` hex characters of the sha256 of :func:`canonical_json` of ``content``."""
    return hashlib.sha256(canonical_json(content).encode("utf-8")).hexdigest()[:CASE_ID_LENGTH]


def code_versions() -> dict[str, str]:
    """Versions of the code parts whose change alters results: builder, adapter, post."""
    from bodysweep.geometry import BUILDER_VERSION
    from bodysweep.workflow.post import POST_VERSION
    from bodysweep.workflow.solver import ADAPTER_VERSION

    return {"builder": str(BUILDER_VERSION), "adapter": str(ADAPTER_VERSION), "post": str(POST_VERSION)}
