"""The equation broken down by term: one label and one set of design columns per term.

"Why this score" shows each term's contribution to the linear predictor (coefficient × column,
summed over a term's columns: a category's levels, or the level products of an interaction),
with the intercept as a term of its own. The ONNX graph (``contributions`` output), the
calculator page and the workbook all take the grouping from here, so they agree on what a term is.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

INTERCEPT = "(intercept)"


@dataclass(frozen=True)
class TermGroup:
    label: str
    columns: tuple[int, ...]      # indices into eq.columns (0-based, intercept excluded)


def _base_label(eq, term: int, cols: list[int]) -> str:
    """A single-column term reads as its column; a term with one column per level (a category,
    or a product with one) is named by its variables, since a row only ever takes one level."""
    if len(cols) == 1:
        return eq.columns[cols[0]].label
    return " × ".join(eq.terms[term].variables)


def term_groups(eq) -> list[TermGroup]:
    """The terms that own at least one design column, in the order of ``eq.terms``; labels are
    unique (a repeated label gets " (2)", " (3)", ...)."""
    by_term: dict[int, list[int]] = {}
    for j, c in enumerate(eq.columns):
        by_term.setdefault(c.term, []).append(j)
    out, seen = [], {INTERCEPT: 1}
    for t in sorted(by_term):
        label = _base_label(eq, t, by_term[t])
        seen[label] = seen.get(label, 0) + 1
        if seen[label] > 1:
            label = f"{label} ({seen[label]})"
        out.append(TermGroup(label, tuple(by_term[t])))
    return out


def labels(eq) -> list[str]:
    """Contribution labels, intercept first (the order of the ONNX ``contributions`` output)."""
    return [INTERCEPT] + [g.label for g in term_groups(eq)]


def grouping_matrix(eq) -> np.ndarray:
    """[1 + terms, 1 + columns] of 0/1: row g sums the intercept (g = 0) or term g's columns."""
    groups = term_groups(eq)
    m = np.zeros((1 + len(groups), 1 + len(eq.columns)))
    m[0, 0] = 1.0
    for g, grp in enumerate(groups, start=1):
        for j in grp.columns:
            m[g, 1 + j] = 1.0
    return m


def blocks(eq) -> list[tuple[str | None, np.ndarray]]:
    """(class or None, coefficients [1 + p]) per linear predictor: one for regression and two
    classes, one per non-reference class otherwise."""
    coef = np.asarray(eq.coef, dtype=float)
    if coef.ndim == 1:
        return [(eq.classes[1] if eq.task == "classification" else None, coef)]
    return [(eq.classes[k + 1], coef[:, k]) for k in range(coef.shape[1])]
