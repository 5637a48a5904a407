"""Which variables matter: permutation importance judged against shadow columns.

A forest splits on pure noise too, so a noise column's out-of-bag permutation importance is
positive and, with many trees, many standard errors above zero: a z threshold alone lets noise in.
The reference here is a second forest, grown on part of the discovery rows with a *shadow* copy of
every column beside the real ones (each shadow is its column with the rows permuted, so it keeps
the column's distribution and has no relation to the outcome). The shadows' importances are
draws from the null distribution of a useless column's importance; a column is material when
its mean importance lies above the family-wise 95 % prediction bound of that distribution and
more than ``Z_MATERIAL`` standard errors (sd over trees / √trees) above zero.

The rows the second forest did not see give the held-out cross-check with scikit-learn's
``permutation_importance`` (raw columns permuted, categories as a whole).
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats
from sklearn.base import BaseEstimator
from sklearn.inspection import permutation_importance

from ..design import make_preprocessor, model_frame
from ..forest import fit_forest
from ..importance import Importance, oob_rows
from ..features import Feature
from .effects import forest_predictor

ALPHA = 0.05          # family-wise share of useless columns allowed through (common practice)
Z_MATERIAL = 2.0      # one-sided, about 2.3 % if the differences were normal (common practice)
SHADOW_TREES = 100    # trees of the shadow forest
SHADOW_ROWS = 3000    # discovery rows it may use (2/3 fit, 1/3 held out), for speed on big tables
HELD_OUT_REPEATS = 3
CORRELATED = 0.7      # |Spearman| at which importances are shared out (Strobl et al. 2008)


@dataclass
class Materiality:
    material: list[str]
    evidence: dict[str, dict]
    notes: list[str] = field(default_factory=list)
    summary: dict = field(default_factory=dict)


def judge_materiality(features: list[Feature], disc: pd.DataFrame, y: np.ndarray, task: str,
                      importance: list[Importance], *, min_samples_leaf: int, seed: int, trees: int = SHADOW_TREES,
                      keep: list[str] = (), drop: list[str] = ()) -> Materiality:
    rng = np.random.default_rng(seed + 101)
    n = len(disc)
    rows = rng.permutation(n)[:min(n, SHADOW_ROWS)]
    n_fit = max(2, int(round(len(rows) * 2 / 3)))
    fit_rows, held_rows = np.sort(rows[:n_fit]), np.sort(rows[n_fit:])
    shadows = [dataclasses.replace(f, name=f"__pf_shadow_{i}", onnx_input=f"__pf_shadow_{i}")
               for i, f in enumerate(features)]
    frame = disc[[f.name for f in features]].copy()
    for f, s in zip(features, shadows):
        frame[s.name] = frame[f.name].to_numpy()[rng.permutation(n)]
    allf = list(features) + shadows
    prep, columns = make_preprocessor(allf, frame)
    X = model_frame(frame, allf)
    fit = fit_forest(X.iloc[fit_rows], y[fit_rows], prep, columns, task, trees=min(SHADOW_TREES, trees),
                     min_samples_leaf=min_samples_leaf, seed=seed + 7, quiet=True)
    Xt = np.ascontiguousarray(prep.transform(X.iloc[fit_rows]), dtype=np.float32)
    names = [f.name for f in allf]
    inc = _per_tree_increases(fit, Xt, y[fit_rows], names, seed + 11)
    real, shadow = inc[:, :len(features)], inc[:, len(features):]
    t = len(real)
    mean = real.mean(axis=0)
    se = real.std(axis=0, ddof=1) / np.sqrt(t) if t > 1 else np.full(len(features), np.inf)
    z = np.divide(mean, se, out=np.zeros_like(mean), where=se > 0)
    threshold, rule = _null_threshold(shadow, len(features))

    held = _held_out(fit, X.iloc[held_rows], y[held_rows], names, task, seed) if len(held_rows) >= 10 else None
    main = {i.feature: i for i in importance}
    evidence, material, notes = {}, [], []
    for j, f in enumerate(features):
        ev = {"oob_importance": main[f.name].mean if f.name in main else None,
              "oob_se": main[f.name].se if f.name in main else None,
              "shadow_forest_importance": float(mean[j]), "shadow_forest_se": float(se[j]), "z": float(z[j]),
              "null_threshold": float(threshold)}
        passed = bool(mean[j] > threshold and z[j] > Z_MATERIAL)
        if held is not None:
            h_mean, h_std, shadow_max = held[0][j], held[1][j], float(held[0][len(features):].max())
            ev["held_out"] = {"importance": float(h_mean), "sd_over_repeats": float(h_std),
                              "largest_shadow": shadow_max, "rows": int(len(held_rows)),
                              "above_shadows": bool(h_mean > shadow_max)}
            if passed != bool(h_mean > shadow_max):
                notes.append(f"{f.name}: out-of-bag and held-out importance disagree on whether it beats "
                             f"the shadow columns (out-of-bag {mean[j]:.4g} vs null threshold {threshold:.4g}; "
                             f"held-out {h_mean:.4g} vs largest shadow {shadow_max:.4g}); the out-of-bag rule decides")
        if f.name in drop:
            ev["decision"] = "left out by request"
        elif f.name in keep:
            ev["decision"] = "kept by request" + ("" if passed else " (did not beat the shadows)")
            material.append(f.name)
        elif passed:
            ev["decision"] = "material"
            material.append(f.name)
        else:
            ev["decision"] = "not material"
        evidence[f.name] = ev
    order = {name: k for k, name in enumerate(i.feature for i in importance)}
    material.sort(key=lambda v: order.get(v, len(order)))
    summary = {"rule": rule, "null_threshold": float(threshold), "z_threshold": Z_MATERIAL,
               "shadow_importance": [float(v) for v in shadow.mean(axis=0)], "shadow_forest": {"trees": min(SHADOW_TREES, trees), "rows_fit": int(len(fit_rows)),
                                                                    "rows_held_out": int(len(held_rows))}}
    notes += correlated_pairs(features, disc, material)
    return Materiality(material, evidence, notes, summary)


def _null_threshold(shadow: np.ndarray, p: int) -> tuple[float, str]:
    """Importance a useless column stays below, family-wise 95 % over the ``p`` columns.

    The shadows' mean importances are draws from the null distribution; a new draw falls below
    mean + t(1 − α/p; S − 1) · sd · √(1 + 1/S) with probability 1 − α/p (a normal prediction
    bound, Bonferroni over columns). With fewer than three shadows the largest one is the bound.
    """
    means = shadow.mean(axis=0)
    s = len(means)
    if s < 3:
        return float(means.max()), "mean out-of-bag importance above the largest shadow's, and mean/se above 2"
    q = stats.t.ppf(1.0 - ALPHA / p, s - 1)
    bound = float(means.mean() + q * means.std(ddof=1) * np.sqrt(1.0 + 1.0 / s))
    return bound, (f"mean out-of-bag importance above the shadows' {100 * (1 - ALPHA):.0f}% family-wise "
                   "prediction bound (Student t, Bonferroni over columns), and mean/se above 2")


def _per_tree_increases(fit, Xt: np.ndarray, y: np.ndarray, features: list[str], seed: int) -> np.ndarray:
    """Out-of-bag error increase per tree and raw column (Breiman 2001), as a [trees, columns] array."""
    forest = fit.model
    rng = np.random.default_rng(seed)
    groups = [[i for i, c in enumerate(fit.columns) if c.feature == f] for f in features]
    target = y if fit.task == "regression" else np.searchsorted(forest.classes_, y)
    out = np.zeros((len(forest.estimators_), len(features)))
    for t, (est, rows) in enumerate(zip(forest.estimators_, oob_rows(forest, len(y)))):
        if len(rows) < 2:
            continue
        Xo, yo = Xt[rows], target[rows]
        base = _error(est, Xo, yo, fit.task)
        perm = rng.permutation(len(rows))
        for j, g in enumerate(groups):
            Xp = Xo.copy()
            Xp[:, g] = Xo[perm][:, g]
            Xp = np.ascontiguousarray(Xp)
            out[t, j] = _error(est, Xp, yo, fit.task) - base
    return out


class _Scorer(BaseEstimator):
    """The shadow forest behind its preprocessing, predicting through the deterministic threaded
    predictor (scikit-learn's own forest predict runs on one thread here to stay reproducible)."""

    def __init__(self, fit=None):
        self.fit_ = fit

    def __sklearn_is_fitted__(self) -> bool:
        return True

    def fit(self, X, y=None):  # never refitted: permutation_importance only scores
        return self

    def predict(self, X):
        Xt = self.fit_.pipeline.named_steps["prep"].transform(X)
        out = forest_predictor(self.fit_.model, self.fit_.task)(Xt)
        if self.fit_.task == "regression":
            return out
        return self.fit_.model.classes_[np.argmax(out, axis=1)]


def _error(est, X: np.ndarray, y: np.ndarray, task: str) -> float:
    """Mean squared error or share misclassified of one tree (inputs already float32)."""
    if task == "regression":
        return float(np.mean((est.predict(X, check_input=False) - y) ** 2))
    return float(np.mean(np.argmax(est.predict_proba(X, check_input=False), axis=1) != y))


def _held_out(fit, X: pd.DataFrame, y: np.ndarray, names: list[str], task: str, seed: int):
    scoring = "neg_mean_squared_error" if task == "regression" else "accuracy"
    res = permutation_importance(_Scorer(fit), X, y, scoring=scoring, n_repeats=HELD_OUT_REPEATS,
                                 random_state=seed, n_jobs=1)
    return np.asarray(res.importances_mean), np.asarray(res.importances_std)


def correlated_pairs(features: list[Feature], disc: pd.DataFrame, material: list[str]) -> list[str]:
    """Notes for strongly rank-correlated numeric pairs among the material ones."""
    nums = [f.name for f in features if f.kind == "numeric" and f.name in material]
    if len(nums) < 2:
        return []
    rho = disc[nums].apply(pd.to_numeric, errors="coerce").corr(method="spearman")
    notes = []
    for i, a in enumerate(nums):
        for b in nums[i + 1:]:
            r = rho.loc[a, b]
            if np.isfinite(r) and abs(r) >= CORRELATED:
                notes.append(f"{a} and {b} are strongly correlated (Spearman {r:+.2f}): their importances "
                             "are shared out between them and partial dependence extrapolates; "
                             "accumulated local effects are used for their shapes")
    return notes


def correlated_with(features: list[Feature], disc: pd.DataFrame, material: list[str]) -> set[str]:
    nums = [f.name for f in features if f.kind == "numeric" and f.name in material]
    if len(nums) < 2:
        return set()
    rho = disc[nums].apply(pd.to_numeric, errors="coerce").corr(method="spearman").abs().to_numpy().copy()
    np.fill_diagonal(rho, 0.0)
    return {v for v, r in zip(nums, np.nanmax(rho, axis=1)) if r >= CORRELATED}
