"""geometry/ must stay solver-neutral: no module imports openEMS or CSXCAD (DEVELOPERS.md, layout rule)."""
import re
from pathlib import Path

import pytest

GEOMETRY = Path(__file__).resolve().parents[2] / "geometry"
FORBIDDEN = re.compile(r"^\s*(import|from)\s+(openEMS|CSXCAD)\b", re.MULTILINE)
SOURCES = sorted(GEOMETRY.rglob("*.py"))


def test_there_are_sources_to_check():
    assert len(SOURCES) >= 10


@pytest.mark.parametrize("path", SOURCES, ids=lambda p: p.name)
def test_no_solver_import(path):
    text = path.read_text(encoding="utf-8")
    assert not FORBIDDEN.search(text), f"{path.name} imports a field solver"
    assert "importlib" not in text or "openEMS" not in text


def test_the_pattern_catches_an_import():
    assert FORBIDDEN.search("x = 1\nfrom CSXCAD import ContinuousStructure\n")
    assert FORBIDDEN.search("    import openEMS\n")
    assert not FORBIDDEN.search("# openEMS is only imported in workflow/solver/engine.py\n")
