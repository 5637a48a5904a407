"""From candidate terms to the suggested equation: forward selection on the discovery rows.

The forest puts candidates forward (bends, products, bends in products); each earns its place
only if it lowers the Bayesian information criterion (Schwarz 1978) of a GLM fitted on the
discovery rows — the rows that choose, never the rows that later estimate and test. Hierarchy is
kept: every numeric variable of a product enters as a main effect, and a squared product only
after its plain product.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import log_loss

from ..expr import evaluate
from ..terms import Term, design_columns, resolve_levels


@dataclass
class Candidate:
    key: str
    terms: list[Term]
    requires: list[str] = field(default_factory=list)   # keys that must already be in the model
    excludes: str | None = None                          # alternatives share this key; one at most


def _columns(terms: list[Term], data: pd.DataFrame, fills: dict, kinds: dict) -> np.ndarray:
    resolved = resolve_levels(terms, data, kinds)
    cols = design_columns(resolved, fills, kinds)
    if not cols:
        return np.empty((len(data), 0))
    return np.column_stack([evaluate(c.node, data) for c in cols])


class Criterion:
    """BIC of the GLM with the given design columns (Gaussian or multinomial/binomial logit)."""

    def __init__(self, y: np.ndarray, task: str, classes: list[str] | None):
        self.task = task
        self.n = len(y)
        if task == "regression":
            self.y = np.asarray(y, dtype=float)
        else:
            self.labels = np.searchsorted(np.asarray(classes, dtype=object), np.asarray(y, dtype=object))
            self.k = len(classes)

    def __call__(self, X: np.ndarray) -> float:
        n = self.n
        D = np.column_stack([np.ones(n), X]) if X.size else np.ones((n, 1))
        if self.task == "regression":
            coef, *_ = np.linalg.lstsq(D, self.y, rcond=None)
            rss = float(np.sum((self.y - D @ coef) ** 2))
            return n * np.log(max(rss, 1e-300) / n) + D.shape[1] * np.log(n)
        if X.size:
            sd = X.std(axis=0)
            Z = (X - X.mean(axis=0)) / np.where(sd > 0, sd, 1.0)
            model = LogisticRegression(C=np.inf, max_iter=1000).fit(Z, self.labels)
            proba = model.predict_proba(Z)
        else:
            counts = np.bincount(self.labels, minlength=self.k) / n
            proba = np.tile(counts, (n, 1))
        ll = -log_loss(self.labels, proba, labels=np.arange(self.k), normalize=False)
        return -2.0 * ll + D.shape[1] * (self.k - 1) * np.log(n)


def forward_select(base: list[Term], candidates: list[Candidate], data: pd.DataFrame, y: np.ndarray, *,
                   task: str, classes: list[str] | None, fills: dict, kinds: dict,
                   max_terms: int | None = None) -> tuple[list[Term], list[dict], dict[str, float]]:
    """Greedy forward selection; returns terms, the step log, and each chosen key's BIC gain."""
    crit = Criterion(y, task, classes)
    if max_terms is not None and len(base) > max_terms:
        base = base[:max_terms]
    cols = {c.key: _columns(c.terms, data, fills, kinds) for c in candidates}
    current = _columns(base, data, fills, kinds)
    score = crit(current)
    chosen: list[str] = []
    log = [{"step": 0, "added": "main effects", "bic": float(score)}]
    gains: dict[str, float] = {}
    n_terms = len(base)
    by_key = {c.key: c for c in candidates}
    while True:
        best, best_score = None, score
        for c in candidates:
            if c.key in chosen or not all(r in chosen for r in c.requires):
                continue
            if c.excludes and any(by_key[k].excludes == c.excludes for k in chosen):
                continue
            if max_terms is not None and n_terms + len(c.terms) > max_terms:
                continue
            s = crit(np.column_stack([current, cols[c.key]]))
            if s < best_score - 1e-9:
                best, best_score = c, s
        if best is None:
            break
        gains[best.key] = float(score - best_score)
        chosen.append(best.key)
        current = np.column_stack([current, cols[best.key]])
        score = best_score
        n_terms += len(best.terms)
        log.append({"step": len(chosen), "added": best.key, "bic": float(score), "bic_drop": gains[best.key]})
    # Backward pass: a candidate chosen early may be made redundant by one chosen later.
    changed = True
    while changed and len(chosen) > 1:
        changed = False
        for key in list(chosen):
            rest = [k for k in chosen if k != key]
            X = np.column_stack([_columns(base, data, fills, kinds)] + [cols[k] for k in rest])
            s = crit(X)
            if s < score - 1e-9:
                log.append({"step": len(log), "removed": key, "bic": float(s), "bic_drop": float(score - s)})
                chosen, score, changed = rest, s, True
                gains.pop(key, None)
                break
    terms = list(base)
    for key in chosen:
        terms += by_key[key].terms
    return terms, log, gains


def drop_one(terms: list[Term], data: pd.DataFrame, y: np.ndarray, *, task: str, classes: list[str] | None,
             fills: dict, kinds: dict) -> list[float]:
    """BIC increase when each term alone is removed from the final model (its marginal worth)."""
    crit = Criterion(y, task, classes)
    blocks = [_columns([t], data, fills, kinds) for t in terms]
    full = crit(np.column_stack(blocks)) if blocks else crit(np.empty((len(y), 0)))
    out = []
    for i in range(len(terms)):
        rest = [b for j, b in enumerate(blocks) if j != i]
        X = np.column_stack(rest) if rest else np.empty((len(y), 0))
        out.append(float(crit(X) - full))
    return out
