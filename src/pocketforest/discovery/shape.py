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
        forms["log"] = {"r2": _r2(np.column_stack([line, np.log(x)]), y, weights), "skewness": skew}
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
            cols.append(np.log(x + p.get("shift", 0.0)))
    return np.column_stack(cols)


def form_fit(x: np.ndarray, curve: np.ndarray, terms: list) -> tuple[np.ndarray, float]:
    """Least-squares fit of the equation's form for one variable to its curve, and its R²."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(curve, dtype=float).reshape(len(x), -1)
    D = form_columns(x, terms)
    coef, *_ = np.linalg.lstsq(D, y, rcond=None)
    return D @ coef, _r2(D, y)
