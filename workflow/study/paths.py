"""Dotted key paths into nested study data: ``scene.phantom.layers.0.thickness_mm``.

A path is a string of parts joined by ``.``; a part that is a decimal integer indexes a list.
"""
from __future__ import annotations

import copy
import re
from typing import Any

_PATH = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*(\.(?:[A-Za-z_][A-Za-z0-9_]*|0|[1-9][0-9]*))*$")

_MISSING = object()


def is_valid_path(path: Any) -> bool:
    """True for a syntactically valid dotted path (names and list indexes)."""
    return isinstance(path, str) and bool(_PATH.match(path))


def path2parts(path: str) -> list[str | int]:
    """Split ``"a.b.0.c"`` into ``["a", "b", 0, "c"]``."""
    return [int(p) if p.isdigit() else p for p in path.split(".")]


def get_path(data: Any, path: str, default: Any = _MISSING) -> Any:
    """Value at ``path`` in nested dicts/lists; ``default`` (or ``KeyError``) when it does not exist."""
    node = data
    for part in path2parts(path):
        if isinstance(part, int) and isinstance(node, list) and 0 <= part < len(node):
            node = node[part]
        elif isinstance(part, str) and isinstance(node, dict) and part in node:
            node = node[part]
        else:
            if default is _MISSING:
                raise KeyError(path)
            return default
    return node


def has_path(data: Any, path: str) -> bool:
    """True when ``path`` exists in ``data``."""
    return get_path(data, path, _ABSENT) is not _ABSENT


_ABSENT = object()


def parent_exists(data: Any, path: str) -> bool:
    """True when everything but the last part of ``path`` exists and can hold the last part."""
    parts = path2parts(path)
    parent = data if len(parts) == 1 else get_path(data, ".".join(str(p) for p in parts[:-1]), _ABSENT)
    last = parts[-1]
    if isinstance(last, int):
        return isinstance(parent, list) and 0 <= last < len(parent)
    return isinstance(parent, dict)


def set_path(data: Any, path: str, value: Any) -> None:
    """Set the value at ``path`` in place (the parent must exist; a missing last mapping key is added)."""
    parts = path2parts(path)
    node = data
    for part in parts[:-1]:
        node = node[part]
    last = parts[-1]
    node[last] = value


def with_values(data: Any, assignments: list[tuple[str, Any]]) -> Any:
    """Deep copy of ``data`` with each ``(path, value)`` applied in order (values are deep-copied too)."""
    out = copy.deepcopy(data)
    for path, value in assignments:
        set_path(out, path, copy.deepcopy(value))
    return out
