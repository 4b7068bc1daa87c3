"""The one error type of the study layer: names the key, the bad value and what is allowed, on one line."""
from __future__ import annotations

import re
from typing import Any

#: longest rendering of a bad value inside a message
MAX_VALUE_CHARS = 80


def value2text(value: Any, limit: int = MAX_VALUE_CHARS) -> str:
    """Short one-line ``repr`` of ``value`` (newlines escaped, long values cut with ``...``)."""
    try:
        text = repr(value)
    except Exception:  # pragma: no cover - repr of plain YAML data does not fail
        text = f"<{type(value).__name__}>"
    text = text.replace("\r", "\\r").replace("\n", "\\n")
    if len(text) > limit:
        text = text[: limit - 3] + "..."
    return text


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


class StudyError(ValueError):
    """A study file that cannot be used.

    Attributes
    ----------
    key_path : str
        Dotted path of the offending key (list items by index, ``sweep.blocks.0.grid.depth``);
        ``"file"`` for problems of the file as a whole (size, encoding, YAML syntax).
    value : Any
        The offending value (``None`` when there is none, e.g. a missing key).
    allowed : str
        What would have been accepted.
    problem : str
        What is wrong, in a few words.

    ``str(err)`` is one line: ``"<key path>: <problem> (got <value>; allowed: <allowed>)"``.
    """

    def __init__(self, key_path: str, problem: str = "", value: Any = None, allowed: str = "", *,
                 show_value: bool = True):
        if not problem and ": " in str(key_path):  # StudyError("<key path>: <problem>") also works
            key_path, problem = str(key_path).split(": ", 1)
            show_value = show_value and value is not None
        self.key_path = _one_line(key_path) or "(root)"
        self.problem = _one_line(problem)
        self.value = value
        self.allowed = _one_line(allowed)
        self.show_value = show_value
        super().__init__(self._message())

    def _message(self) -> str:
        got = value2text(self.value) if self.show_value else "-"
        return f"{self.key_path}: {self.problem} (got {got}; allowed: {self.allowed or '-'})"

    def __str__(self) -> str:
        return self._message()

    def __reduce__(self):
        return (_rebuild, (self.key_path, self.problem, self.value, self.allowed, self.show_value))


def _rebuild(key_path, problem, value, allowed, show_value):
    return StudyError(key_path, problem, value, allowed, show_value=show_value)


def join_path(*parts: Any) -> str:
    """Dotted key path from parts (strings and list indexes); empty parts are skipped."""
    return ".".join(str(p) for p in parts if p is not None and str(p) != "")


_NUM = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"


def _mm(x: str) -> str:
    return f"{float(x) * 1e3:.4g}"


def si2edge_text(text: str) -> str:
    """A builder's message (SI: metres, keys ending ``_m``) in the study file's own units and key names.

    ``(0, -0.008, -0.066) m`` -> ``(0, -8, -66) mm``; ``0.06 m`` -> ``60 mm``; ``depth_m`` -> ``depth_mm``.
    Other units (``mm``, ``m3``, ``W/kg``) are left alone.
    """
    text = re.sub(rf"\(\s*({_NUM}(?:\s*,\s*{_NUM})*)\s*\)\s*m\b",
                  lambda m: "(" + ", ".join(_mm(x) for x in m.group(1).split(",")) + ") mm", text)
    text = re.sub(rf"\[\s*({_NUM}(?:\s*,\s*{_NUM})*)\s*\]\s*m\b",
                  lambda m: "[" + ", ".join(_mm(x) for x in m.group(1).split(",")) + "] mm", text)
    text = re.sub(rf"(?<![\w.])({_NUM})\s*m\b(?![/\w])", lambda m: f"{_mm(m.group(1))} mm", text)
    return re.sub(r"\b([A-Za-z][A-Za-z0-9]*(?:_[A-Za-z0-9]+)*)_m\b", r"\1_mm", text)
