"""The one term model: suggested GLM terms as data.

A :class:`Term` records what the discovery step chose (kind, variables, centre, knot, ...) and why
(``evidence``). Everything else is printed from it: the statsmodels formula, the design columns
as expression trees (:mod:`pocketforest.expr`), and through those every export.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import pandas as pd

from .expr import Const, Is, Log, Node, Num, Pos, Prod, Square, Sub, formula_name, str_literal, to_formula

KINDS = ("linear", "quadratic", "hinge", "log", "categorical", "interaction")


@dataclass
class Term:
    kind: str
    variables: list[str]
    params: dict[str, Any] = field(default_factory=dict)
    evidence: dict[str, Any] = field(default_factory=dict)

    def to_dict(self) -> dict:
        return {"kind": self.kind, "variables": list(self.variables), **self.params,
                "evidence": self.evidence}


@dataclass(frozen=True)
class Column:
    """One design column of the equation: a term's expression (one per level for categories)."""
    term: int
    label: str
    node: Node


def level_label(level: str) -> str:
    return level if level else "(missing)"


def resolve_levels(terms: list[Term], data: pd.DataFrame, kinds: dict[str, str]) -> list[Term]:
    """Fix each categorical part's reference (most common) and levels on the rows that fit it.

    Levels absent from those rows get no coefficient; like unseen levels they score as the
    reference level.
    """
    out = []
    for t in terms:
        params = dict(t.params)
        cats = [v for v in t.variables if kinds[v] == "categorical"]
        if cats:
            refs, levels = {}, {}
            subset = params.get("subset", {})
            for v in cats:
                counts = data[v].fillna("").astype(str).value_counts()
                order = sorted(counts.index, key=lambda lv: (-counts[lv], lv))
                refs[v] = order[0]
                if v in subset:
                    # A product kept for chosen levels only: those levels, whichever is the reference
                    # here (the main effects carry the rest); levels absent from these rows drop out.
                    levels[v] = sorted(lv for lv in subset[v] if lv in counts.index)
                else:
                    levels[v] = sorted(lv for lv in counts.index if lv != order[0])
            params["reference"] = refs
            params["levels"] = levels
        out.append(Term(t.kind, list(t.variables), params, dict(t.evidence)))
    return out


def _offset(var: str, centre: float) -> str:
    """"(x - 3.2)" or "(x + 0.5)" for a label: no double signs."""
    return f"({var} - {centre:.4g})" if centre >= 0 else f"({var} + {-centre:.4g})"


def _num(var: str, fills: dict) -> Num:
    return Num(var, float(fills[var]))


def _centred(var: str, centre: float, fills: dict) -> Node:
    return Sub(_num(var, fills), Const(float(centre))) if centre else _num(var, fills)


def term_columns(index: int, term: Term, fills: dict[str, float | str], kinds: dict[str, str]) -> list[Column]:
    """The design columns of one term (after :func:`resolve_levels`)."""
    p = term.params
    v = term.variables
    if term.kind == "linear":
        return [Column(index, v[0], _num(v[0], fills))]
    if term.kind == "quadratic":
        node = Square(Sub(_num(v[0], fills), Const(float(p["centre"]))))
        return [Column(index, f"{_offset(v[0], float(p['centre']))}^2", node)]
    if term.kind == "hinge":
        k = float(p["knot"])
        if p.get("direction", "above") == "above":
            return [Column(index, f"max(0, {_offset(v[0], k)[1:-1]})", Pos(Sub(_num(v[0], fills), Const(k))))]
        return [Column(index, f"max(0, {k:.4g} - {v[0]})", Pos(Sub(Const(k), _num(v[0], fills))))]
    if term.kind == "log":
        # Guarded log: log(max(x, floor)) = log(max(0, x - floor) + floor), defined for every value
        # that can arrive (zero and negatives too) and printed by every export from the same nodes.
        floor = float(p["floor"])
        node = Log(Sub(Pos(Sub(_num(v[0], fills), Const(floor))), Const(-floor)))
        return [Column(index, f"log(max({v[0]}, {floor:.4g}))", node)]
    if term.kind == "categorical":
        return [Column(index, f"[{v[0]} = {level_label(lv)}]", Is(v[0], lv)) for lv in p["levels"][v[0]]]
    if term.kind == "interaction":
        return _interaction_columns(index, term, fills, kinds)
    raise ValueError(f"unknown term kind {term.kind!r}")


def _interaction_columns(index: int, term: Term, fills: dict, kinds: dict[str, str]) -> list[Column]:
    p = term.params
    centres = p.get("centres", {})
    nums = [v for v in term.variables if kinds[v] == "numeric"]
    cats = [v for v in term.variables if kinds[v] == "categorical"]
    num_nodes = [_centred(v, centres.get(v, 0.0), fills) for v in nums]
    num_label = " * ".join(_offset(v, centres[v]) if centres.get(v) else v for v in nums)
    power = int(p.get("power", 1))
    if not cats:
        node: Node = Prod(tuple(num_nodes))
        label = num_label
        if power == 2:
            node, label = Square(node), f"({label})^2"
        return [Column(index, label, node)]
    combos: list[list[tuple[str, str]]] = [[]]
    for c in cats:
        combos = [prev + [(c, lv)] for prev in combos for lv in p["levels"][c]]
    cols = []
    for combo in combos:
        parts = num_nodes + [Is(c, lv) for c, lv in combo]
        lab = " * ".join(([num_label] if num_label else []) + [f"[{c} = {level_label(lv)}]" for c, lv in combo])
        cols.append(Column(index, lab, Prod(tuple(parts))))
    return cols


def design_columns(terms: list[Term], fills: dict, kinds: dict[str, str]) -> list[Column]:
    cols: list[Column] = []
    for i, t in enumerate(terms):
        cols += term_columns(i, t, fills, kinds)
    return cols


def formula_piece(term: Term, fills: dict, kinds: dict[str, str]) -> str:
    """The term as statsmodels reads it (Wilkinson & Rogers 1973 notation)."""
    v = term.variables
    if term.kind == "linear":
        return formula_name(v[0])
    if term.kind == "categorical":
        return _cat_formula(v[0], term.params["reference"][v[0]])
    if term.kind == "interaction" and any(kinds[x] == "categorical" for x in v):
        # One product column per non-reference level, spelled out: "x:C(g)" would make the
        # formula engine choose the coding, and with a centred x it codes every level.
        return " + ".join(f"I({to_formula(c.node)})" for c in term_columns(0, term, fills, kinds))
    (col,) = term_columns(0, term, fills, kinds)
    # The formula is fitted on imputed data, so inputs print as bare names.
    return f"I({to_formula(col.node)})"


def _cat_formula(var: str, reference: str) -> str:
    return f"C({formula_name(var)}, Treatment(reference={str_literal(reference)}))"


def formula(target: str, terms: list[Term], fills: dict, kinds: dict[str, str]) -> str:
    rhs = " + ".join(formula_piece(t, fills, kinds) for t in terms) or "1"
    return f"{formula_name(target)} ~ {rhs}"


def main_effects(features) -> list[Term]:
    """One term per feature: linear for numbers, treatment-coded levels for categories."""
    return [Term("linear" if f.kind == "numeric" else "categorical", [f.name],
                 evidence={"reason": "main effect"}) for f in features]
