"""A tiny expression tree for equation terms, and the printers that read it.

Every export of the equation (statsmodels formula, text, LaTeX, SQL, Python, JavaScript, ONNX)
prints the same tree, so a new target is one more printer, never a second copy of the maths.
Column names and category values only ever appear as escaped string literals or quoted
identifiers in generated code.
"""
from __future__ import annotations

import json
import re
from dataclasses import dataclass

import numpy as np
import pandas as pd


class Node:
    """Base class of expression nodes (immutable)."""


@dataclass(frozen=True)
class Num(Node):
    """A numeric input; a missing value becomes ``fill`` (the discovery median)."""
    feature: str
    fill: float


@dataclass(frozen=True)
class Is(Node):
    """1 when a categorical input equals ``level`` (missing counts as the level ""), else 0."""
    feature: str
    level: str


@dataclass(frozen=True)
class Const(Node):
    value: float


@dataclass(frozen=True)
class Sub(Node):
    left: Node
    right: Node


@dataclass(frozen=True)
class Prod(Node):
    items: tuple[Node, ...]


@dataclass(frozen=True)
class Square(Node):
    arg: Node


@dataclass(frozen=True)
class Pos(Node):
    """max(0, arg): the hinge."""
    arg: Node


@dataclass(frozen=True)
class Log(Node):
    arg: Node


# ---------------------------------------------------------------- evaluation (numpy, float64)

def evaluate(node: Node, data: pd.DataFrame) -> np.ndarray:
    """Value of ``node`` on every row of ``data`` (raw columns, named as in the data file)."""
    if isinstance(node, Num):
        x = pd.to_numeric(data[node.feature], errors="coerce").to_numpy(dtype=np.float64)
        return np.where(np.isnan(x), node.fill, x)
    if isinstance(node, Is):
        v = data[node.feature].fillna("").astype(str).to_numpy()
        return (v == node.level).astype(np.float64)
    if isinstance(node, Const):
        return np.full(len(data), float(node.value))
    if isinstance(node, Sub):
        return evaluate(node.left, data) - evaluate(node.right, data)
    if isinstance(node, Prod):
        out = np.ones(len(data))
        for item in node.items:
            out = out * evaluate(item, data)
        return out
    if isinstance(node, Square):
        a = evaluate(node.arg, data)
        return a * a
    if isinstance(node, Pos):
        return np.maximum(evaluate(node.arg, data), 0.0)
    if isinstance(node, Log):
        a = evaluate(node.arg, data)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(a > 0, np.log(np.where(a > 0, a, 1.0)), np.nan)  # NaN, never -inf, for a <= 0
    raise TypeError(f"unknown node {node!r}")


# ---------------------------------------------------------------- shared literal helpers

def num_literal(value: float) -> str:
    """A float literal that round-trips exactly in Python, JavaScript and SQL."""
    value = float(value)
    if not np.isfinite(value):
        raise ValueError("non-finite constant in an equation")
    text = repr(value)
    return text if ("e" in text or "." in text) else text + ".0"


def str_literal(value: str) -> str:
    """A double-quoted, ASCII-only Python string literal (as patsy's Q() and Treatment() read it).

    Like JSON for the Basic Multilingual Plane, but a character beyond it is written as one
    ``\\UXXXXXXXX`` escape: JSON's surrogate pair would read back in Python as two lone surrogates,
    and a column named with an emoji would then not be found.
    """
    out = []
    for ch in str(value):
        code = ord(ch)
        if code > 0xFFFF:
            out.append(f"\\U{code:08x}")
        else:
            out.append(json.dumps(ch, ensure_ascii=True)[1:-1])
    return '"' + "".join(out) + '"'


def sql_string(value: str) -> str:
    return "'" + str(value).replace("'", "''") + "'"


def sql_ident(name: str) -> str:
    return '"' + str(name).replace('"', '""') + '"'


_PLAIN = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
_RESERVED_IN_FORMULA = {"C", "I", "Q", "np", "Treatment", "True", "False", "None"}


def formula_name(name: str) -> str:
    """A column reference inside a statsmodels formula: bare when safe, otherwise Q("...")."""
    if _PLAIN.match(name) and name not in _RESERVED_IN_FORMULA:
        return name
    return f"Q({str_literal(name)})"


# ---------------------------------------------------------------- the statsmodels formula

def to_formula(node: Node) -> str:
    """Expression inside I(...) of a statsmodels formula (numpy functions as np.*)."""
    if isinstance(node, Num):
        return formula_name(node.feature)
    if isinstance(node, Is):
        return f"({formula_name(node.feature)} == {str_literal(node.level)})"
    if isinstance(node, Const):
        return num_literal(node.value)
    if isinstance(node, Sub):
        if isinstance(node.right, Const) and node.right.value < 0:
            return f"({to_formula(node.left)} + {num_literal(-node.right.value)})"
        return f"({to_formula(node.left)} - {to_formula(node.right)})"
    if isinstance(node, Prod):
        return " * ".join(to_formula(i) for i in node.items)
    if isinstance(node, Square):
        inner = to_formula(node.arg)
        return f"{inner} ** 2" if isinstance(node.arg, (Sub, Num)) else f"({inner}) ** 2"
    if isinstance(node, Pos):
        return f"np.maximum({to_formula(node.arg)}, 0)"
    if isinstance(node, Log):
        return f"np.log({to_formula(node.arg)})"
    raise TypeError(f"{type(node).__name__} has no formula form inside I()")
