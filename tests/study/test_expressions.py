"""The safe expression evaluator: arithmetic as Python evaluates it, everything else refused."""
from __future__ import annotations

import math

import pytest

from bodysweep.workflow.study import StudyError
from bodysweep.workflow.study.expressions import evaluate_text, expression_names, parse_expression

VALUES = {"depth": 12.5, "fat": 4.0, "skin": 1.5, "n": 3}


@pytest.mark.parametrize("expr, expected", [
    # reference values: hand arithmetic (analytic), operator precedence as in Python's grammar
    ("depth + 2", 14.5),
    ("depth - fat * 2", 4.5),
    ("(depth - fat) * 2", 17.0),
    ("depth / fat", 3.125),
    ("-depth + 1", -11.5),
    ("- -fat", 4.0),
    ("+skin", 1.5),
    ("min(depth, fat, skin)", 1.5),
    ("max(depth, 20)", 20.0),
    ("max(depth * 2, 30) + skin - fat / 2", 29.5),
    ("n * 0.5", 1.5),
    ("1e1 + .5", 10.5),
    ("min(3)", 3.0),
])
def test_arithmetic(expr, expected):
    assert math.isclose(evaluate_text(expr, VALUES), expected, rel_tol=0, abs_tol=1e-12)


@pytest.mark.parametrize("expr", [
    "depth.__class__", "__import__('os').system('ls')", "(lambda: 1)()", "depth ** 2", "depth % 2",
    "depth // 2", "fat[0]", "'a' * 3", "[1, 2]", "(1, 2)", "{1: 2}", "depth if fat else skin", "depth > 1",
    "depth and fat", "abs(depth)", "max(*[1, 2])", "max(depth, key=1)", "max()", "(y := 3)", "f'{depth}'",
    "depth << 2", "~depth", "not depth", "True + 1", "None", "1j", "open('x')", "exec('1')", "", "depth +",
    "x" * 500, "globals()", "depth.real", "__builtins__",
])
def test_refused_constructs_name_the_expression(expr):
    with pytest.raises(StudyError) as info:
        evaluate_text(expr, VALUES, key_path="derived.x.expr")
    err = info.value
    assert err.key_path == "derived.x.expr"
    assert "\n" not in str(err)
    if len(expr) < 60:
        assert repr(expr)[1:-1] in str(err) or expr in str(err)


def test_division_by_zero_and_non_finite_are_errors():
    with pytest.raises(StudyError, match="division by zero"):
        evaluate_text("depth / (fat - fat)", VALUES)
    with pytest.raises(StudyError, match="not finite"):
        evaluate_text("1e308 * 10", VALUES)  # IEEE 754 double overflows past ~1.8e308 (IEEE 754-2019)
    with pytest.raises(StudyError, match="not finite"):
        evaluate_text("1" + "0" * 350 + " * 2", VALUES)  # an integer beyond the double range


def test_names_are_collected_without_function_names():
    assert expression_names(parse_expression("max(depth, fat) - min(skin, 2)")) == {"depth", "fat", "skin"}


def test_unknown_name_at_evaluation():
    with pytest.raises(StudyError, match="unknown name 'width'"):
        evaluate_text("depth + width", VALUES)
