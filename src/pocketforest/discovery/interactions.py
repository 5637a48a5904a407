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
