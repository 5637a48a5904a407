"""How each material variable bends: a curve from the forest and the term kind that fits it.

The curve is the forest's partial dependence (Friedman 2001) on a quantile grid — exact by tree
recursion for regression forests — or, when the variable is strongly correlated with another
material one, its accumulated local effect (Apley & Zhu 2020), which does not extrapolate. The
candidate forms are the ones every export can print: a straight line, a line plus a centred
square, a line plus one or two hinges max(0, x − k) at data-chosen knots, a line plus log(x) for
positive skewed data. Classification curves are on the log-odds scale the GLM uses.
"""
from __future__ import annotations

import numpy as np
from scipy import stats

# A straight line must miss at least this share of the curve's variance before a bend is put
# forward; the discovery-row selection then decides whether the bend earns its place.
BEND_SHARE = 0.05
# Two hinges are preferred to the best one-term form only when they halve what it misses.
TWO_HINGE_GAIN = 0.5


def link_scale(values: np.ndarray, task: str) -> np.ndarray:
    """Regression values as they are; probabilities [g, K] as log-odds against the first class."""
    if task == "regression":
        return values.reshape(len(values), -1)
    # Clipped at 1 % so that rows a forest calls certain do not dominate differences of log-odds.
    p = np.clip(values.reshape(len(values), -1), 0.01, 0.99)
    return np.log(p[:, 1:]) - np.log(p[:, :1])


def _r2(design: np.ndarray, y: np.ndarray, weights: np.ndarray | None = None) -> float:
    """Pooled R² of least-squares fits of every column of ``y`` on ``design``."""
    w = np.ones(len(y)) if weights is None else weights
    sw = np.sqrt(w)[:, None]
    coef, *_ = np.linalg.lstsq(design * sw, y * sw, rcond=None)
    resid = y - design @ coef
    mean = (w[:, None] * y).sum(axis=0) / w.sum()
    tot = float((w[:, None] * (y - mean) ** 2).sum())
    return 1.0 - float((w[:, None] * resid ** 2).sum()) / tot if tot > 0 else 1.0


def choose_form(x: np.ndarray, curve: np.ndarray, data: np.ndarray, weights: np.ndarray | None = None) -> dict:
    """Fit each candidate form to ``curve`` (values at grid ``x``) and pick one.

    ``data`` are the variable's discovery values (for the centre, the log's eligibility and skew).
    Returns the evidence: R² of every form, the share a line misses, the chosen kind and params.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(curve, dtype=float).reshape(len(x), -1)
    ones = np.ones_like(x)
    line = np.column_stack([ones, x])
    centre = float(np.mean(data))
    r2_line = _r2(line, y, weights)
    forms: dict[str, dict] = {"linear": {"r2": r2_line}}
    forms["quadratic"] = {"r2": _r2(np.column_stack([line, (x - centre) ** 2]), y, weights), "centre": centre}
    interior = x[2:-2] if len(x) > 6 else x[1:-1]
    best_k, best = None, -np.inf
    for k in interior:
        r = _r2(np.column_stack([line, np.maximum(x - k, 0)]), y, weights)
        if r > best:
            best_k, best = float(k), r
    if best_k is not None:
        forms["hinge"] = {"r2": best, "knots": [best_k]}
    pair, best2 = None, -np.inf
    for a in range(len(interior)):
        for b in range(a + 2, len(interior)):
            r = _r2(np.column_stack([line, np.maximum(x - interior[a], 0), np.maximum(x - interior[b], 0)]), y, weights)
            if r > best2:
                pair, best2 = [float(interior[a]), float(interior[b])], r
    if pair is not None:
        forms["two_hinges"] = {"r2": best2, "knots": pair}
    skew = float(stats.skew(data)) if len(data) > 2 else 0.0
    if np.min(data) > 0 and skew > 1.0:
        # Guarded: log(max(x, floor)) is defined for any later value, zero and negatives included.
        floor = log_floor(data)
        forms["log"] = {"r2": _r2(np.column_stack([line, np.log(np.maximum(x, floor))]), y, weights),
                        "skewness": skew, "floor": floor}
    missed = max(0.0, 1.0 - r2_line)
    singles = {k: v for k, v in forms.items() if k in ("quadratic", "hinge", "log")}
    chosen = max(singles, key=lambda k: singles[k]["r2"])
    if "two_hinges" in forms:
        miss1 = 1.0 - forms[chosen]["r2"]
        if 1.0 - forms["two_hinges"]["r2"] < TWO_HINGE_GAIN * miss1:
            chosen = "two_hinges"
    bends = missed >= BEND_SHARE
    return {"share_missed_by_line": missed, "forms": forms, "best_bend": chosen,
            "best_bend_r2": forms[chosen]["r2"], "bend_put_forward": bool(bends),
            "chosen": chosen if bends else "linear", "centre": centre}


def log_floor(data: np.ndarray) -> float:
    """The guard of a log term: half the smallest value seen (all positive when a log is offered),
    rounded to 6 significant digits so every export prints the same constant."""
    return float(f"{0.5 * float(np.min(data)):.6g}")


def form_columns(x: np.ndarray, terms: list) -> np.ndarray:
    """Columns of a line plus the given bend terms (quadratic / hinge / log) at ``x``."""
    cols = [np.ones_like(x), x]
    for t in terms:
        p = t.params
        if t.kind == "quadratic":
            cols.append((x - p["centre"]) ** 2)
        elif t.kind == "hinge":
            cols.append(np.maximum(x - p["knot"], 0) if p.get("direction", "above") == "above" else np.maximum(p["knot"] - x, 0))
        elif t.kind == "log":
            cols.append(np.log(np.maximum(x, p["floor"])))
    return np.column_stack(cols)


def form_fit(x: np.ndarray, curve: np.ndarray, terms: list) -> tuple[np.ndarray, float]:
    """Least-squares fit of the equation's form for one variable to its curve, and its R²."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(curve, dtype=float).reshape(len(x), -1)
    D = form_columns(x, terms)
    coef, *_ = np.linalg.lstsq(D, y, rcond=None)
    return D @ coef, _r2(D, y)


# ---------------------------------------------------------------- per-variable shapes

GRID_POINTS = 25
PD_ROWS = 300             # background rows for brute-force partial dependence
SHAPE_ROWS = 2000         # rows for accumulated local effects


def variable_shapes(ctx, material: list[str]) -> dict:
    """Curve and form evidence for each material variable (numbers: PD/ALE; categories: levels)."""
    from .effects import partial_dependence_brute
    Xt = ctx.design
    rng = ctx.rng(1)
    pd_rows = Xt[rng.permutation(len(Xt))[:min(len(Xt), PD_ROWS)]]
    ale_rows = Xt[rng.permutation(len(Xt))[:min(len(Xt), SHAPE_ROWS)]]
    correlated = {v for c in ctx.correlated_clusters(material) for v in c}
    shapes = {}
    for v in material:
        cols = ctx.groups[v]
        if ctx.kinds[v] == "numeric":
            shapes[v] = _numeric_shape(ctx, pd_rows, ale_rows, cols[0], v in correlated)
        else:
            levels = [ctx.forest.columns[c].level for c in cols]
            effects = partial_dependence_brute(ctx.predict_link, pd_rows, cols, np.eye(len(cols)))
            shapes[v] = {"kind": "categorical", "levels": levels, "pd": compact(squeeze(effects)),
                         "spread": float(np.ptp(effects, axis=0).max()) if len(effects) else 0.0}
    return shapes


def _numeric_shape(ctx, pd_rows: np.ndarray, ale_rows: np.ndarray, col: int, correlated: bool) -> dict:
    from .effects import ale_numeric, partial_dependence_brute, partial_dependence_recursion, quantile_grid
    task = ctx.task
    x = ctx.design[:, col]
    # the grid is recorded to 6 decimals, so compute on exactly the recorded values
    distinct = np.unique(np.round(x, 6))
    # A number with few values is drawn at every one of them: quantiles of a number that is mostly
    # one value (randhie's physlm, 83% zeros, 11 values) give a grid of 3 points and no curve.
    grid = distinct if len(distinct) <= GRID_POINTS else np.unique(np.round(quantile_grid(x, GRID_POINTS), 6))
    if len(grid) < 2:
        return {"kind": "numeric", "grid": grid.tolist(), "pd": [], "chosen": "linear",
                "note": "too few distinct values for a curve"}
    if task == "regression":
        pd_values = partial_dependence_recursion(ctx.forest.model, pd_rows, col, grid).reshape(-1, 1)
        method = "recursion"
    else:
        pd_values = link_scale(partial_dependence_brute(ctx.predict, pd_rows, [col], grid[:, None]), task)
        method = "brute"
    edges = np.unique(np.quantile(ale_rows[:, col], np.linspace(0, 1, 21)))
    ale = (ale_numeric(ctx.predict_link, ale_rows, col, edges).reshape(len(edges), -1)
           if len(edges) > 1 else None)
    use_ale = correlated and ale is not None and len(edges) > 3
    cx, cy = (edges, ale) if use_ale else (grid, pd_values)
    form = choose_form(cx, cy, x) if len(cx) >= 4 else {"chosen": "linear", "share_missed_by_line": 0.0,
                                                         "forms": {}, "bend_put_forward": False,
                                                         "centre": float(np.mean(x))}
    return {"kind": "numeric", "grid": compact(grid), "pd": compact(squeeze(pd_values)), "pd_method": method,
            "scale": "value" if task == "regression" else "log-odds",
            "ale": {"edges": compact(edges), "values": compact(squeeze(ale))} if ale is not None else None,
            "curve_used": "ale" if use_ale else "pd", **form}


def attach_equation_forms(shapes: dict, terms: list) -> None:
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
                             "x": compact(x), "fitted": compact(squeeze(fitted)), "r2_to_curve": r2}


def squeeze(a):
    if a is None:
        return None
    a = np.asarray(a)
    return a[:, 0] if a.ndim == 2 and a.shape[1] == 1 else a


def compact(a):
    if a is None:
        return None
    return np.round(np.asarray(a, dtype=float), 6).tolist()
