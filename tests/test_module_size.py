"""Every module of bodysweep stays at or under 600 lines (the project's rule: split a module by idea
before it grows past that; common practice for keeping modules readable)."""
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
MAX_LINES = 600
MODULES = sorted(p for folder in ("api", "geometry", "workflow") for p in (ROOT / folder).rglob("*.py"))


def test_there_are_modules_to_check():
    assert len(MODULES) > 50


@pytest.mark.parametrize("path", MODULES, ids=lambda p: str(p.relative_to(ROOT)))
def test_module_is_at_most_600_lines(path):
    n = len(path.read_text(encoding="utf-8").splitlines())
    assert n <= MAX_LINES, f"{path.relative_to(ROOT)} has {n} lines; split it by idea (limit {MAX_LINES})"
