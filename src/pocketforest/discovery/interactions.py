"""Pairwise interaction strength: Friedman & Popescu's H² and a null reference for it.

H²ⱼₖ = Σᵢ [PDⱼₖ(xᵢⱼ, xᵢₖ) − PDⱼ(xᵢⱼ) − PDₖ(xᵢₖ)]² / Σᵢ PDⱼₖ(xᵢⱼ, xᵢₖ)²  (Friedman & Popescu
2008, Annals of Applied Statistics 2:916–954, eq. 44), each partial dependence centred over the
rows. H² is a share, so it is large for pairs whose joint effect is tiny; the unnormalised
strength — root mean square of the numerator relative to the spread of predictions — says
whether the interaction matters at all. For classification the partial dependences of every
class probability are pooled.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .effects import Predict, partial_dependence_brute


@dataclass
class PairStat:
    h2: float
    strength: float
    residual: np.ndarray  # PDjk − PDj − PDk at the rows (centred); [m] or [m, K]


class HCalculator:
    """H² for many pairs on one set of rows, reusing each variable's one-way partial dependence."""

    def __init__(self, predict: Predict, X: np.ndarray, groups: dict[str, list[int]]):
        self.predict = predict
        self.X = np.asarray(X, dtype=np.float64)
        self.groups = groups
        self._one: dict[str, np.ndarray] = {}
        pred = np.asarray(predict(self.X), dtype=np.float64).reshape(len(self.X), -1)
        self.spread = float(np.sqrt(np.sum(pred.var(axis=0))))

    def one_way(self, var: str) -> np.ndarray:
        if var not in self._one:
            cols = self.groups[var]
            self._one[var] = _centre(partial_dependence_brute(self.predict, self.X, cols, self.X[:, cols]))
        return self._one[var]

    def pair(self, a: str, b: str) -> PairStat:
        cols = self.groups[a] + self.groups[b]
        joint = _centre(partial_dependence_brute(self.predict, self.X, cols, self.X[:, cols]))
        resid = joint - self.one_way(a) - self.one_way(b)
        den = float(np.sum(joint ** 2))
        num = float(np.sum(resid ** 2))
        h2 = num / den if den > 0 else 0.0
        rms = np.sqrt(num / len(self.X))
        strength = float(rms / self.spread) if self.spread > 0 else 0.0
        return PairStat(h2, strength, resid)


def _centre(values: np.ndarray) -> np.ndarray:
    values = values.reshape(len(values), -1)
    return values - values.mean(axis=0, keepdims=True)


def h_squared(predict: Predict, X: np.ndarray, cols_a: list[int], cols_b: list[int]) -> float:
    """H² of one pair of column groups for any prediction function (used by the analytic tests)."""
    calc = HCalculator(predict, X, {"a": list(cols_a), "b": list(cols_b)})
    return calc.pair("a", "b").h2


# ---------------------------------------------------------------- the search over pairs

PAIR_VARIABLES = 10       # pairs are searched among at most this many material variables
PAIR_ROWS = (100, 300)    # fewest and most rows for H² (Friedman & Popescu evaluate at the data points)
# H² on m rows costs m² forest predictions per pair (and per variable). Growing the forest costs
# about (discovery rows × log rows × features tried) per tree, so keeping m² × pairs under a
# multiple of the discovery rows keeps H² a fixed, small share of the forest fit at any size.
PAIR_ROWS_PER_DISCOVERY_ROW = 8


def search_pairs(ctx, material: list[str]) -> list[dict]:
    """Every pair among the leading material variables, of every kind (number × number,
    number × category, category × category), with its H² and strength on a sample of rows.

    H² here only ranks and describes the pairs: whether a pair's product enters the equation is
    decided on *all* discovery rows by the GLM (:mod:`pocketforest.discovery.select`), whose power
    grows with the rows; the H² sample is sized for cost, not for power.
    """
    kinds = ctx.kinds
    pair_vars = material[:PAIR_VARIABLES]
    pairs = [(a, b) for i, a in enumerate(pair_vars) for b in pair_vars[i + 1:]]
    # numbers first in a mixed pair: the product reads "number × level"
    pairs = [(b, a) if kinds[a] == "categorical" and kinds[b] == "numeric" else (a, b) for a, b in pairs]
    if not pairs:
        return []
    Xt = ctx.design
    blocks = len(pairs) + len(pair_vars) + 1
    lo, hi = PAIR_ROWS
    m = int(min(hi, len(Xt), max(lo, np.sqrt(PAIR_ROWS_PER_DISCOVERY_ROW * len(Xt) / blocks))))
    rows = np.sort(ctx.rng(3).permutation(len(Xt))[:m])
    Xe = Xt[rows]
    ctx.say(f"  interactions: H² for {len(pairs)} pairs on {m} rows")
    calc = HCalculator(ctx.predict_link, Xe, ctx.groups)
    out = []
    for i, (a, b) in enumerate(pairs, 1):
        s = calc.pair(a, b)
        rec = {"variables": [a, b], "kind": f"{kinds[a]}×{kinds[b]}", "h2": s.h2, "strength": s.strength,
               "rows": m, "kept": False}
        if kinds[a] == kinds[b] == "numeric":
            rec["product"] = _product_fit(Xe, ctx.groups[a][0], ctx.groups[b][0], Xt, s.residual)
        out.append(rec)
        ctx.say(f"\r  interactions: {i}/{len(pairs)} pairs", end="")
    ctx.say("")
    out.sort(key=lambda r: -r["strength"])
    return out


def _product_fit(Xe: np.ndarray, ca: int, cb: int, Xt: np.ndarray, resid: np.ndarray) -> dict:
    """How much of the interaction surface a centred product, and a product with a bend, recover."""
    from .shape import BEND_SHARE
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
