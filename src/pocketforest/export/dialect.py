"""One walker of the equation's expression trees, many target languages.

Each code export (SQL, Python, JavaScript, LaTeX) is a :class:`Dialect`: how that language writes
a number, a product, max(0, ·), a log and "category equals level". :func:`print_expr` walks the
tree from :mod:`pocketforest.expr` once, so the maths lives in exactly one place.

Column names and category values never reach the output as code: inputs are referred to by
generated local names (``x0``, ``c1``, ...) bound elsewhere from escaped literals, and levels are
printed through the dialect's string-literal function.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

from ..expr import Const, Is, Log, Node, Num, Pos, Prod, Square, Sub, num_literal


@dataclass(frozen=True)
class Dialect:
    number: Callable[[float], str]            # a float literal that round-trips exactly
    text: Callable[[str], str]                # an escaped string literal
    is_level: Callable[[str, str], str]       # (category variable, literal) -> 1.0 / 0.0
    square: Callable[[str], str]
    pos: Callable[[str], str]                 # max(0, ·)
    log: Callable[[str], str]                 # natural log
    times: str = " * "


@dataclass(frozen=True)
class InputRef:
    """A generated local name for one input: numeric (with its fill) or categorical."""
    var: str
    feature: str
    kind: str                 # "numeric" | "categorical"
    fill: float | None = None


class Inputs:
    """Generated names for the inputs an export reads, in first-use order.

    A numeric input is keyed by (feature, fill) so every place that imputes it agrees.
    """

    def __init__(self, prefix: str = "") -> None:
        self.refs: dict[tuple, InputRef] = {}
        self.prefix = prefix  # e.g. "i." where a query qualifies the generated names

    def numeric(self, feature: str, fill: float) -> str:
        key = ("n", feature, float(fill))
        if key not in self.refs:
            self.refs[key] = InputRef(f"x{len(self.refs)}", feature, "numeric", float(fill))
        return self.prefix + self.refs[key].var

    def categorical(self, feature: str) -> str:
        key = ("c", feature)
        if key not in self.refs:
            self.refs[key] = InputRef(f"c{len(self.refs)}", feature, "categorical")
        return self.prefix + self.refs[key].var

    def level(self, feature: str, level: str, d: "Dialect") -> str:
        """"feature equals level" as 1.0 / 0.0; a target that codes levels overrides this."""
        return d.is_level(self.categorical(feature), d.text(level))

    def __iter__(self):
        return iter(self.refs.values())


def plain_number(value: float) -> str:
    """Exact float literal; negatives in parentheses so ``a - -1`` never prints as ``a --1``
    (which SQL would read as a comment)."""
    text = num_literal(value)
    return f"({text})" if text.startswith("-") else text


def print_expr(node: Node, d: Dialect, inputs: Inputs) -> str:
    """The expression ``node`` in dialect ``d``; inputs are registered in ``inputs``."""
    if isinstance(node, Num):
        return inputs.numeric(node.feature, node.fill)
    if isinstance(node, Is):
        return inputs.level(node.feature, node.level, d)
    if isinstance(node, Const):
        return d.number(node.value)
    if isinstance(node, Sub):
        return f"({print_expr(node.left, d, inputs)} - {print_expr(node.right, d, inputs)})"
    if isinstance(node, Prod):
        return "(" + d.times.join(print_expr(i, d, inputs) for i in node.items) + ")"
    if isinstance(node, Square):
        return d.square(print_expr(node.arg, d, inputs))
    if isinstance(node, Pos):
        return d.pos(print_expr(node.arg, d, inputs))
    if isinstance(node, Log):
        return d.log(print_expr(node.arg, d, inputs))
    raise TypeError(f"unknown node {node!r}")


def equation_inputs(eq, feature_order: list[str]) -> list[tuple[str, str]]:
    """(name, kind) of the inputs the equation reads, in the data's column order. Walks the nodes'
    fields generically, so a new node kind needs no change here."""
    from dataclasses import fields, is_dataclass

    kinds: dict[str, str] = {}

    def walk(node) -> None:
        if isinstance(node, Num):
            kinds[node.feature] = "numeric"
        elif isinstance(node, Is):
            kinds[node.feature] = "categorical"
        elif is_dataclass(node):
            for f in fields(node):
                value = getattr(node, f.name)
                for item in (value if isinstance(value, tuple) else (value,)):
                    if isinstance(item, Node):
                        walk(item)

    for c in eq.columns:
        walk(c.node)
    return [(n, kinds[n]) for n in feature_order if n in kinds]


def linear_predictors(eq, d: Dialect, inputs: Inputs) -> list[str]:
    """eta for each non-reference class (one for regression and two classes), as sums of
    coefficient × design column; the intercept first."""
    import numpy as np

    design = [print_expr(c.node, d, inputs) for c in eq.columns]
    coef = np.asarray(eq.coef, dtype=float)
    blocks = [coef] if coef.ndim == 1 else [coef[:, k] for k in range(coef.shape[1])]
    out = []
    for b in blocks:
        parts = [d.number(b[0])] + [f"{d.number(w)}{d.times}{x}" for w, x in zip(b[1:], design)]
        out.append(" + ".join(parts))
    return out
