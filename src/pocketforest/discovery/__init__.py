"""Discovery: from the fitted forest to suggested GLM terms a statistician would write down.

Four steps, each on the discovery rows only:
1. materiality — which variables beat shadow copies of the columns (:mod:`.materiality`);
2. shape — how each material number bends, from partial dependence or accumulated local effects
   (:mod:`.shape`), and level effects for categories;
3. interactions — Friedman & Popescu's H² for pairs of material variables against a null forest
   grown on an additive version of the forest (:mod:`.interactions`);
4. selection — the candidates enter a discovery-row GLM only when they lower its BIC, keeping
   hierarchy, a term cap and the user's keep/drop requests (:mod:`.select`).
"""
from __future__ import annotations

import sys
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats
from sklearn.ensemble import RandomForestClassifier, RandomForestRegressor

from ..design import model_frame
from ..errors import InputError
from ..forest import ForestFit
from ..importance import Importance
from ..features import Table
from ..terms import Term
from .effects import (ale_numeric, forest_predictor, partial_dependence_brute, partial_dependence_recursion,
                      quantile_grid)
from .interactions import HCalculator
from .materiality import correlated_with, judge_materiality
from .select import Candidate, drop_one, forward_select
from .shape import BEND_SHARE, choose_form, form_fit, link_scale

PAIR_VARIABLES = 10       # pairs are searched among at most this many material variables
PAIR_ROWS = (100, 200)    # fewest and most rows for H² (Friedman & Popescu evaluate at the data points)
# H² on m rows costs m² forest predictions per pair (and per variable). Growing the forest costs
# about (discovery rows × log rows × features tried) per tree, so keeping m² × pairs under a
# multiple of the discovery rows keeps H² a fixed, small share of the forest fit at any size.
PAIR_ROWS_PER_DISCOVERY_ROW = 8
PAIR_ALPHA = 0.05         # family-wise share of interaction-free pairs allowed through (common practice)
NULL_TREES = 100
NULL_ROWS = 3000
SHAPE_ROWS = 2000         # rows for accumulated local effects
PD_ROWS = 300             # background rows for brute-force partial dependence
SELECT_ROWS = {"regression": 20000, "classification": 4000}


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


def _say(quiet: bool, text: str, end: str = "\n") -> None:
    if not quiet:
        print(text, end=end, file=sys.stderr, flush=True)


def discover(forest: ForestFit, table: Table, disc: pd.DataFrame, y: np.ndarray,
             importance: list[Importance], fills: dict, *, seed: int = 0, quiet: bool = False,
             max_terms: int | None = None, keep: list[str] | tuple = (), drop: list[str] | tuple = (),
             min_samples_leaf: int = 5) -> Discovery:
    features = table.features
    kinds = {f.name: f.kind for f in features}
    check_requests(kinds, keep, drop, max_terms)
    task = table.task
    rng = np.random.default_rng(seed + 1)

    _say(quiet, "  which variables matter (shadow columns, held-out check)")
    mat = judge_materiality(features, disc, y, task, importance, min_samples_leaf=min_samples_leaf,
                            seed=seed, trees=len(forest.model.estimators_), keep=list(keep), drop=list(drop))
    notes = list(mat.notes)
    material = list(mat.material)
    if not material:
        top = next((i.feature for i in importance if i.feature not in drop), None)
        if top is not None:
            material = [top]
            mat.evidence[top]["decision"] = "kept as the top-ranked variable (none beat the shadows)"
            notes.append(f"no variable beat the shadow columns; {top}, ranked first by out-of-bag "
                         "importance, is kept so the equation has one slope: treat it with caution")

    prep = forest.pipeline.named_steps["prep"]
    Xt = np.asarray(prep.transform(model_frame(disc, features)), dtype=np.float64)
    groups = {f.name: [i for i, c in enumerate(forest.columns) if c.feature == f.name] for f in features}
    predict = forest_predictor(forest.model, task)
    predict_link = (lambda X: link_scale(predict(X), task))

    _say(quiet, "  shapes (partial dependence, accumulated local effects)")
    pd_rows = Xt[rng.permutation(len(Xt))[:min(len(Xt), PD_ROWS)]]
    ale_rows = Xt[rng.permutation(len(Xt))[:min(len(Xt), SHAPE_ROWS)]]
    correlated = correlated_with(features, disc, material)
    shapes = {}
    for v in material:
        if kinds[v] == "numeric":
            shapes[v] = _numeric_shape(forest, task, predict, predict_link, Xt, pd_rows, ale_rows,
                                       groups[v][0], v in correlated)
        else:
            shapes[v] = _level_shape(forest, predict_link, pd_rows, groups[v])

    pair_vars = material[:PAIR_VARIABLES]
    if len(material) > PAIR_VARIABLES:
        notes.append(f"interactions were searched among the {PAIR_VARIABLES} most important material "
                     f"variables only ({len(material)} are material)")
    pairs = [(a, b) for i, a in enumerate(pair_vars) for b in pair_vars[i + 1:]
             if "numeric" in (kinds[a], kinds[b])]
    pairs = [(a, b) if kinds[a] == "numeric" else (b, a) for a, b in pairs]
    interactions = _interactions(forest, task, Xt, y, groups, kinds, shapes, material, pairs, predict_link,
                                 seed, quiet, min_samples_leaf, rng)

    _say(quiet, "  choosing terms on the discovery rows")
    terms, selection = _select(features, kinds, disc, y, task, forest.classes, fills, material, shapes,
                               interactions, mat, max_terms, seed)
    main_variables = [t.variables[0] for t in terms if t.kind in ("linear", "categorical")]
    _attach_equation_forms(shapes, terms)
    selection["rule"] = ("forward selection: a candidate enters when it lowers the BIC of the GLM fitted "
                         "on the discovery rows")
    return Discovery(terms, main_variables, interactions, shapes, notes,
                     {"rule": mat.summary, "variables": mat.evidence}, selection)


def _attach_equation_forms(shapes: dict, terms: list[Term]) -> None:
    """Beside each numeric curve, the form the equation gives that variable, fitted to the curve,
    so a report can draw both without redoing any maths."""
    for v, sh in shapes.items():
        if sh["kind"] != "numeric" or not sh.get("pd"):
            continue
        bends = [t for t in terms if t.variables == [v] and t.kind in ("quadratic", "hinge", "log")]
        if sh.get("curve_used") == "ale" and sh.get("ale"):
            x, curve = sh["ale"]["edges"], sh["ale"]["values"]
        else:
            x, curve = sh["grid"], sh["pd"]
        fitted, r2 = form_fit(np.asarray(x), np.asarray(curve), bends)
        sh["in_equation"] = {"terms": [{"kind": t.kind, **t.params} for t in bends] or [{"kind": "linear"}],
                             "x": _compact(x), "fitted": _compact(_squeeze(fitted)), "r2_to_curve": r2}


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


# ---------------------------------------------------------------- shapes

def _numeric_shape(forest, task, predict, predict_link, Xt, pd_rows, ale_rows, col, correlated) -> dict:
    x = Xt[:, col]
    # the grid is recorded to 6 decimals, so compute on exactly the recorded values
    grid = np.unique(np.round(quantile_grid(x, 25), 6))
    if len(grid) < 2:
        return {"kind": "numeric", "grid": grid.tolist(), "pd": [], "chosen": "linear",
                "note": "too few distinct values for a curve"}
    if task == "regression":
        pd_values = partial_dependence_recursion(forest.model, pd_rows, col, grid).reshape(-1, 1)
        method = "recursion"
    else:
        pd_values = link_scale(partial_dependence_brute(predict, pd_rows, [col], grid[:, None]), task)
        method = "brute"
    edges = np.unique(np.quantile(ale_rows[:, col], np.linspace(0, 1, 21)))
    ale = ale_numeric(predict_link, ale_rows, col, edges).reshape(len(edges), -1) if len(edges) > 1 else None
    use_ale = correlated and ale is not None and len(edges) > 3
    cx, cy = (edges, ale) if use_ale else (grid, pd_values)
    form = choose_form(cx, cy, x) if len(cx) >= 4 else {"chosen": "linear", "share_missed_by_line": 0.0,
                                                         "forms": {}, "bend_put_forward": False, "centre": float(np.mean(x))}
    out = {"kind": "numeric", "grid": _compact(grid), "pd": _compact(_squeeze(pd_values)), "pd_method": method,
           "scale": "value" if task == "regression" else "log-odds",
           "ale": {"edges": _compact(edges), "values": _compact(_squeeze(ale))} if ale is not None else None,
           "curve_used": "ale" if use_ale else "pd", **form}
    return out


def _level_shape(forest, predict_link, pd_rows, cols) -> dict:
    levels = [forest.columns[c].level for c in cols]
    values = np.eye(len(cols))
    effects = partial_dependence_brute(predict_link, pd_rows, cols, values)
    return {"kind": "categorical", "levels": levels, "pd": _compact(_squeeze(effects)),
            "spread": float(np.ptp(effects, axis=0).max()) if len(effects) else 0.0}


def _squeeze(a):
    if a is None:
        return None
    a = np.asarray(a)
    return a[:, 0] if a.ndim == 2 and a.shape[1] == 1 else a


def _compact(a):
    if a is None:
        return None
    return np.round(np.asarray(a, dtype=float), 6).tolist()


def _curve(shape: dict, x: np.ndarray) -> np.ndarray:
    """The shape's curve at values ``x`` (flat beyond the grid): for the additive null."""
    grid = np.asarray(shape["grid"], dtype=float)
    pdv = np.asarray(shape["pd"], dtype=float).reshape(len(grid), -1)
    return np.column_stack([np.interp(x, grid, pdv[:, q]) for q in range(pdv.shape[1])])


# ---------------------------------------------------------------- interactions

def _interactions(forest, task, Xt, y, groups, kinds, shapes, material, pairs, predict_link, seed, quiet,
                  min_samples_leaf, rng) -> list[dict]:
    if not pairs:
        return []
    blocks = len(pairs) + len({v for p in pairs for v in p}) + 1
    lo, hi = PAIR_ROWS
    m = int(min(hi, len(Xt), max(lo, np.sqrt(PAIR_ROWS_PER_DISCOVERY_ROW * len(Xt) / blocks))))
    rows = np.sort(rng.permutation(len(Xt))[:m])
    Xe = Xt[rows]
    _say(quiet, f"  interactions: H² for {len(pairs)} pairs on {m} rows")
    calc = HCalculator(predict_link, Xe, groups)
    stats = {}
    for i, (a, b) in enumerate(pairs, 1):
        stats[(a, b)] = calc.pair(a, b)
        _say(quiet, f"\r  interactions: {i}/{len(pairs)} pairs", end="")
    _say(quiet, "")
    null = _null_forest(forest, task, Xt, y, groups, kinds, shapes, material, seed, min_samples_leaf, rng)
    null_calc = HCalculator(lambda X: link_scale(null(X), task), Xe, groups)
    null_stats = {p: null_calc.pair(*p) for p in pairs}
    ref, ref_rule = _strength_bound([z.strength for z in null_stats.values()])
    out = []
    for (a, b) in pairs:
        s, z = stats[(a, b)], null_stats[(a, b)]
        kept = bool(s.strength > ref and s.h2 > z.h2)
        rec = {"variables": [a, b], "h2": s.h2, "strength": s.strength,
               "kind": f"{kinds[a]}×{kinds[b]}", "null_h2": z.h2, "null_strength": z.strength,
               "strength_threshold": ref, "threshold_rule": ref_rule, "kept": kept, "rows": m}
        if kept and kinds[a] == kinds[b] == "numeric":
            rec["product"] = _product_fit(Xe, groups[a][0], groups[b][0], Xt, s.residual)
        out.append(rec)
    out.sort(key=lambda r: -r["strength"])
    return out


def _strength_bound(null: list[float]) -> tuple[float, str]:
    """The interaction strength a forest invents on data without interactions, family-wise.

    The null pairs' strengths are draws from that distribution; the bound is the upper
    1 − α/P prediction limit of a Student t (Bonferroni over the P pairs tested). With fewer
    than three pairs the largest null strength is the bound.
    """
    v = np.asarray(null, dtype=float)
    if len(v) < 3:
        return float(v.max()), "largest strength of the same pairs in the additive null forest"
    q = stats.t.ppf(1.0 - PAIR_ALPHA / len(v), len(v) - 1)
    bound = float(v.mean() + q * v.std(ddof=1) * np.sqrt(1.0 + 1.0 / len(v)))
    return bound, (f"{100 * (1 - PAIR_ALPHA):.0f}% family-wise prediction bound of the pairs' strengths "
                   "in a forest grown on an additive version of the data (Student t, Bonferroni over pairs)")


def _product_fit(Xe, ca, cb, Xt, resid) -> dict:
    """How much of the interaction surface a centred product, and a product with a bend, recover."""
    ma, mb = float(Xt[:, ca].mean()), float(Xt[:, cb].mean())
    a, b = Xe[:, ca], Xe[:, cb]
    r = resid.reshape(len(resid), -1)
    p = (a - ma) * (b - mb)
    tot = float(np.sum((r - r.mean(axis=0)) ** 2))

    def r2(*cols):
        D = np.column_stack([np.ones(len(a)), *cols])
        coef, *_ = np.linalg.lstsq(D, r, rcond=None)
        return 1.0 - float(np.sum((r - D @ coef) ** 2)) / tot if tot > 0 else 1.0

    out = {"centres": {"mean": [ma, mb]}, "r2_product": r2(p), "r2_product_squared": {"mean": r2(p, p ** 2)}}
    if Xt[:, ca].min() >= 0 and Xt[:, cb].min() >= 0:
        out["r2_product_squared"]["zero"] = r2(p, (a * b) ** 2, a, b, a ** 2, b ** 2)
    out["bends"] = bool(1.0 - out["r2_product"] >= BEND_SHARE)
    return out


def _null_forest(forest, task, Xt, y, groups, kinds, shapes, material, seed, min_samples_leaf, rng):
    """A forest grown on an additive version of the data: the interaction it invents is noise.

    The outcome is the sum of the material variables' curves (what the forest says each does
    alone) plus the forest's own out-of-bag residuals in shuffled order (regression), or labels
    drawn from the additive log-odds (classification).
    """
    rows = np.sort(rng.permutation(len(Xt))[:min(len(Xt), NULL_ROWS)])
    X = Xt[rows]
    parts = []
    for v in material:
        sh = shapes[v]
        if sh["kind"] == "numeric":
            if not sh.get("pd"):
                continue
            c = _curve(sh, X[:, groups[v][0]])
        else:
            eff = np.asarray(sh["pd"], dtype=float).reshape(len(sh["levels"]), -1)
            onehot = X[:, groups[v]]
            c = onehot @ eff + (1 - onehot.sum(axis=1, keepdims=True)) * eff.mean(axis=0)
        parts.append(c - c.mean(axis=0))
    model = forest.model
    params = dict(n_estimators=min(NULL_TREES, len(model.estimators_)), min_samples_leaf=min_samples_leaf,
                  max_features=model.max_features, random_state=seed + 13, n_jobs=-1)
    if task == "regression":
        add = np.sum(parts, axis=0)[:, 0] if parts else np.zeros(len(rows))
        resid = y[rows] - np.nan_to_num(forest.oob_prediction[rows], nan=float(np.mean(y)))
        y_null = float(np.mean(y)) + add + resid[rng.permutation(len(rows))]
        est = RandomForestRegressor(**params).fit(X.astype(np.float32), y_null)
    else:
        classes = np.asarray(model.classes_)
        codes = np.searchsorted(classes, np.asarray(y)[rows])
        base = np.log(np.clip(np.bincount(codes, minlength=len(classes)) / len(rows), 1e-3, None))
        eta = np.tile(base[1:] - base[0], (len(rows), 1))
        if parts:
            eta = eta + np.sum(parts, axis=0)
        full = np.column_stack([np.zeros(len(rows)), eta])
        prob = np.exp(full - full.max(axis=1, keepdims=True))
        prob /= prob.sum(axis=1, keepdims=True)
        u = rng.random(len(rows))[:, None]
        labels = np.minimum((u > np.cumsum(prob, axis=1)).sum(axis=1), len(classes) - 1)
        est = RandomForestClassifier(**params).fit(X.astype(np.float32), classes[labels])
        if len(est.classes_) < len(classes):
            return lambda Z: np.full((len(Z), len(classes)), 1.0 / len(classes))
    est.set_params(n_jobs=1)
    return forest_predictor(est, task)


# ---------------------------------------------------------------- selection

def _select(features, kinds, disc, y, task, classes, fills, material, shapes, interactions, mat, max_terms, seed):
    n = len(disc)
    limit = SELECT_ROWS[task]
    rows = np.sort(np.random.default_rng(seed + 29).permutation(n)[:min(n, limit)])
    data = disc.iloc[rows].reset_index(drop=True)
    yy = np.asarray(y)[rows]
    # Requested variables first, then by importance; a term cap keeps the front of this list, and
    # only variables that keep their main effect may bend or enter a product (hierarchy).
    order = sorted(material, key=lambda v: (not mat.evidence[v]["decision"].startswith("kept by request"),
                                            material.index(v)))
    if max_terms is not None:
        order = order[:max_terms]
    base = []
    for v in order:
        ev = {"reason": "main effect", **{k: mat.evidence[v].get(k) for k in ("decision", "z", "oob_importance", "oob_se")}}
        base.append(Term("linear" if kinds[v] == "numeric" else "categorical", [v], evidence=ev))
    candidates: list[Candidate] = []
    for v in order:
        sh = shapes[v]
        if sh["kind"] != "numeric" or not sh.get("bend_put_forward"):
            continue
        # Every bend form the curve supports is put forward; the discovery rows pick at most one.
        for kind, info in sh["forms"].items():
            if kind == "linear":
                continue
            ev = {"reason": "bend", "curve": sh["curve_used"], "share_missed_by_line": sh["share_missed_by_line"],
                  "form": kind, "form_r2": info["r2"], "best_form_on_curve": sh["best_bend"]}
            if kind == "quadratic":
                ts = [Term("quadratic", [v], {"centre": round(sh["centre"], 6)}, ev)]
            elif kind == "log":
                ts = [Term("log", [v], {"shift": 0.0}, ev)]
            else:
                ts = [Term("hinge", [v], {"knot": float(f"{k:.6g}"), "direction": "above"}, dict(ev))
                      for k in info["knots"]]
            candidates.append(Candidate(f"bend ({kind}):{v}", ts, excludes=f"bend:{v}"))
    for rec in interactions:
        if not rec["kept"] or not set(rec["variables"]) <= set(order):
            continue
        a, b = rec["variables"]
        ev = {"reason": "interaction", "h2": rec["h2"], "strength": rec["strength"], "null_h2": rec["null_h2"],
              "strength_threshold": rec["strength_threshold"]}
        if kinds[b] == "numeric":
            centres = {v: round(float(pd.to_numeric(disc[v], errors="coerce").fillna(fills[v]).mean()), 6)
                       for v in (a, b)}
        else:
            # A number times a category's indicators is left uncentred: with both main effects in
            # the model centring changes nothing fitted, and the plain product keeps the formula's
            # treatment coding (one slope change per non-reference level).
            centres = {}
        group = f"product:{a}*{b}"
        plain = Term("interaction", [a, b], {"centres": centres, "power": 1}, ev)
        candidates.append(Candidate(group, [plain], excludes=group))
        prod = rec.get("product")
        if prod and prod["bends"]:
            for name, r2 in prod["r2_product_squared"].items():
                c = centres if name == "mean" else {a: 0.0, b: 0.0}
                ev2 = {**ev, "reason": "bend in the interaction", "r2_product": prod["r2_product"],
                       "r2_with_square": r2, "centring": name}
                # The squared product brings its plain product (hierarchy), so both enter together.
                candidates.append(Candidate(f"product with bend ({name}):{a}*{b}",
                                            [Term("interaction", [a, b], {"centres": centres, "power": 1}, dict(ev)),
                                             Term("interaction", [a, b], {"centres": c, "power": 2}, ev2)],
                                            excludes=group))
    terms, log, gains = forward_select(base, candidates, data, yy, task=task, classes=classes, fills=fills,
                                       kinds=kinds, max_terms=max_terms)
    by_key = {c.key: c for c in candidates}
    for key, gain in gains.items():
        for t in by_key[key].terms:
            t.evidence["bic_drop_on_entry"] = gain
    worth = drop_one(terms, data, yy, task=task, classes=classes, fills=fills, kinds=kinds)
    for t, w in zip(terms, worth):
        t.evidence["bic_increase_if_removed"] = w
    left = [c.key for c in candidates if c.key not in gains]
    return terms, {"rows": int(len(rows)), "steps": log, "not_chosen": left}
