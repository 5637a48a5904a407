"""Discovery: from the fitted forest to suggested GLM terms a statistician would write down.

Four steps, each on the discovery rows only, each owned by its module and reading one
:class:`~.context.Context`:
1. materiality — which variables the main forest's out-of-bag importances single out against a
   null calibrated on the data (:mod:`.materiality`);
2. shape — how each material number bends, from partial dependence or accumulated local effects,
   and level effects for categories (:mod:`.shape`);
3. interactions — every pair of leading material variables, of every kind, described by
   Friedman & Popescu's H² (:mod:`.interactions`);
4. selection — main effects first, then bends and products that lower the extended BIC of the
   discovery-row GLM within the estimation rows' coefficient budget; category × category pairs the
   forest cannot see (crossovers) are tried here by the GLM itself (:mod:`.select`).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..errors import InputError
from ..forest import ForestFit
from ..importance import Importance, Increases
from ..features import Feature
from ..terms import Term
from .context import Context, Requests
from .interactions import PAIR_VARIABLES, search_pairs
from .materiality import judge_materiality, top_ranked
from .select import drop_one, removal_reason, select_terms
from .shape import attach_equation_forms, variable_shapes

__all__ = ["Discovery", "Requests", "discover", "check_requests"]


@dataclass
class Discovery:
    terms: list[Term]
    main_variables: list[str]
    interactions: list[dict] = field(default_factory=list)
    shapes: dict = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)
    materiality: dict = field(default_factory=dict)
    selection: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        return {"main_variables": self.main_variables, "shapes": self.shapes,
                "materiality": self.materiality, "selection": self.selection}


def discover(forest: ForestFit, features: list[Feature], task: str, disc: pd.DataFrame, y: np.ndarray,
             importance: list[Importance], increases: Increases, fills: dict,
             requests: Requests = Requests()) -> Discovery:
    """``increases``: the out-of-bag increases behind ``importance``, features in the order of
    ``features``."""
    kinds = {f.name: f.kind for f in features}
    check_requests(kinds, requests.keep, requests.drop, requests.max_terms)
    ctx = Context(forest, list(features), task, disc, y, fills, requests)

    ctx.say("  which variables matter (out-of-bag importance against its null)")
    mat = judge_materiality(ctx, increases, [f.name for f in features])
    notes = list(mat.notes)
    material = list(mat.material)
    if not material:
        top = top_ranked(importance, requests.drop)
        if top is not None:
            material = [top]
            notes.append(f"no variable passed the importance test; {top}, ranked first by out-of-bag "
                         "importance, is kept so the equation has one slope: treat it with caution")
    requested = set(requests.keep)

    ctx.say("  shapes (partial dependence, accumulated local effects)")
    shapes = variable_shapes(ctx, material)

    if len(material) > PAIR_VARIABLES:
        notes.append(f"interactions were searched among the {PAIR_VARIABLES} most important material "
                     f"variables only ({len(material)} are material)")
    pairs = search_pairs(ctx, material)

    ctx.say("  choosing terms on the discovery rows")
    weak = {v for v in material if not mat.evidence[v].strong and not mat.evidence[v].requested}
    sel = select_terms(ctx, material, requested, shapes, pairs, [i.feature for i in importance], weak)
    terms = sel.terms
    pairs = pairs + sel.screened_pairs
    chosen_pairs = {frozenset(t.variables) for t in terms if t.kind == "interaction"}
    for rec in pairs:
        rec["kept"] = frozenset(rec["variables"]) in chosen_pairs
    rows = np.sort(ctx.rng(29).permutation(len(disc))[:sel.rows])
    worth = drop_one(terms, disc.iloc[rows].reset_index(drop=True), np.asarray(y)[rows], task=task,
                     classes=forest.classes, fills=fills, kinds=kinds,
                     family=requests.family)
    for t, w in zip(terms, worth):
        t.evidence["bic_increase_if_removed"] = w
        if t.kind in ("linear", "categorical"):
            ev = mat.evidence[t.variables[0]]
            t.evidence.update({"decision": ev.decision, "z": ev.z, "oob_importance": ev.oob_importance,
                               "oob_se": ev.oob_se})
    main_variables = [t.variables[0] for t in terms if t.kind in ("linear", "categorical")]
    if sel.removed_main_effects:
        notes.append("main effects left out by the discovery-row selection (they added nothing once the other "
                     "terms were in): " + ", ".join(removal_reason(ctx, v, main_variables)
                                                     for v in sel.removed_main_effects))
    attach_equation_forms(shapes, terms)
    return Discovery(terms, main_variables, pairs, shapes, notes,
                     {**mat.summary, "variables": {k: v.to_dict() for k, v in mat.evidence.items()}},
                     sel.to_dict())


def check_requests(kinds: dict, keep, drop, max_terms) -> None:
    for opt, names in (("--keep-var", keep), ("--drop-var", drop)):
        unknown = [v for v in names if v not in kinds]
        if unknown:
            raise InputError(f"{opt}: column {unknown[0]!r} is not a feature of this table "
                             f"(features: {', '.join(sorted(kinds))})")
    both = sorted(set(keep) & set(drop))
    if both:
        raise InputError(f"column {both[0]!r} is given to both --keep-var and --drop-var: choose one")
    if max_terms is not None and max_terms < 1:
        raise InputError("--max-terms must be at least 1")
