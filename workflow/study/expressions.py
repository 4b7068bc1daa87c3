"""Derived parameters: small arithmetic expressions over named parameters, evaluated safely.

The expression is parsed with :mod:`ast` and walked by hand; nothing is ever passed to ``eval``.
Allowed: numbers, parameter names, ``+ - * /``, unary ``-`` and ``+``, parentheses, ``min(...)`` and
``max(...)`` with one or more arguments. Everything else (attribute access, subscripts, other calls,
keywords, lambdas, comparisons, ``**``, strings, ...) is refused with a :class:`StudyError` that names
the expression.
"""
from __future__ import annotations

import ast
import math
import operator
from typing import Callable, Mapping

from .errors import StudyError

#: longest accepted expression (characters)
MAX_EXPRESSION_CHARS = 400
#: most syntax-tree nodes in one expression
MAX_EXPRESSION_NODES = 200

_BINARY: dict[type, Callable[[float, float], float]] = {
    ast.Add: operator.add, ast.Sub: operator.sub, ast.Mult: operator.mul, ast.Div: operator.truediv,
}
_UNARY: dict[type, Callable[[float], float]] = {ast.USub: operator.neg, ast.UAdd: operator.pos}
_FUNCTIONS: dict[str, Callable[..., float]] = {"min": min, "max": max}
ALLOWED_TEXT = "numbers, parameter names, + - * /, unary minus, parentheses, min(), max()"


def _refuse(key_path: str, expr: str, problem: str) -> StudyError:
    return StudyError(key_path, f"expression {expr!r}: {problem}", expr, ALLOWED_TEXT)


def parse_expression(expr: str, key_path: str = "derived") -> ast.Expression:
    """Parse and check an expression; returns the checked syntax tree.

    Raises
    ------
    StudyError
        Not a string, too long, a syntax error, or any construct outside the allowed set.
    """
    if not isinstance(expr, str) or isinstance(expr, bool):
        raise StudyError(key_path, "an expression must be a string", expr, ALLOWED_TEXT)
    if len(expr) > MAX_EXPRESSION_CHARS:
        raise StudyError(key_path, f"expression longer than {MAX_EXPRESSION_CHARS} characters", expr, ALLOWED_TEXT)
    try:
        tree = ast.parse(expr.strip(), mode="eval")
    except (SyntaxError, ValueError, RecursionError, MemoryError) as exc:
        raise _refuse(key_path, expr, f"not valid arithmetic ({type(exc).__name__})") from None
    nodes = list(ast.walk(tree))
    if len(nodes) > MAX_EXPRESSION_NODES:
        raise _refuse(key_path, expr, f"more than {MAX_EXPRESSION_NODES} terms")
    for node in nodes:
        if isinstance(node, (ast.Expression, ast.Load)) or type(node) in _BINARY or type(node) in _UNARY:
            continue
        if isinstance(node, ast.BinOp):
            if type(node.op) not in _BINARY:
                raise _refuse(key_path, expr, f"operator {type(node.op).__name__} is not allowed")
        elif isinstance(node, ast.UnaryOp):
            if type(node.op) not in _UNARY:
                raise _refuse(key_path, expr, f"operator {type(node.op).__name__} is not allowed")
        elif isinstance(node, ast.Constant):
            if isinstance(node.value, bool) or not isinstance(node.value, (int, float)):
                raise _refuse(key_path, expr, f"constant {node.value!r} is not a number")
        elif isinstance(node, ast.Name):
            pass
        elif isinstance(node, ast.Call):
            if not isinstance(node.func, ast.Name) or node.func.id not in _FUNCTIONS:
                raise _refuse(key_path, expr, "only min() and max() may be called")
            if node.keywords or not node.args or any(isinstance(a, ast.Starred) for a in node.args):
                raise _refuse(key_path, expr, f"{node.func.id}() takes one or more plain arguments")
        else:
            raise _refuse(key_path, expr, f"{type(node).__name__} is not allowed")
    return tree


def expression_names(tree: ast.Expression) -> set[str]:
    """Parameter names used by a checked expression (``min``/``max`` in call position excluded)."""
    called = {id(n.func) for n in ast.walk(tree) if isinstance(n, ast.Call)}
    return {n.id for n in ast.walk(tree) if isinstance(n, ast.Name) and id(n) not in called}


def evaluate(tree: ast.Expression, values: Mapping[str, float], expr: str = "", key_path: str = "derived") -> float:
    """Evaluate a checked expression with the given parameter values.

    Raises
    ------
    StudyError
        Unknown name, a non-numeric parameter, division by zero or a non-finite result.
    """

    def ev(node: ast.AST) -> float:
        if isinstance(node, ast.Expression):
            return ev(node.body)
        if isinstance(node, ast.Constant):
            return node.value
        if isinstance(node, ast.Name):
            if node.id not in values:
                raise _refuse(key_path, expr, f"unknown name {node.id!r} (known: {sorted(values)})")
            v = values[node.id]
            if isinstance(v, bool) or not isinstance(v, (int, float)):
                raise _refuse(key_path, expr, f"parameter {node.id!r} is not a number here ({v!r})")
            return v
        if isinstance(node, ast.BinOp):
            a, b = ev(node.left), ev(node.right)
            if isinstance(node.op, ast.Div) and b == 0:
                raise _refuse(key_path, expr, "division by zero")
            return _BINARY[type(node.op)](a, b)
        if isinstance(node, ast.UnaryOp):
            return _UNARY[type(node.op)](ev(node.operand))
        if isinstance(node, ast.Call):
            return _FUNCTIONS[node.func.id]([ev(a) for a in node.args])  # type: ignore[union-attr]
        raise _refuse(key_path, expr, f"{type(node).__name__} is not allowed")  # pragma: no cover - checked at parse

    try:
        result = float(ev(tree))
    except OverflowError:
        result = math.inf
    if not math.isfinite(result):
        raise _refuse(key_path, expr, f"result {result!r} is not finite")
    return result


def evaluate_text(expr: str, values: Mapping[str, float], key_path: str = "derived") -> float:
    """Parse, check and evaluate in one call."""
    return evaluate(parse_expression(expr, key_path), values, expr, key_path)
