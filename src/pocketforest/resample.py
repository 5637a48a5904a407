"""The small-data plan: judge the whole modelling process by repeated cross-validation.

On a small table one test split leaves every figure on a few dozen rows and starves the stages
that fit. Below :data:`SMALL_DATA_ROWS` rows there is therefore no test split: the rows go to
discovery and confirmation, the bundle's models are fitted once on them, and every accuracy,
fidelity and loss figure comes from repeated k-fold cross-validation of the *whole* pipeline —
forest, discovery, equation and tree refitted in every fold on that fold's training rows only
(internal validation of the modelling process: Harrell, Lee & Mark 1996, Stat Med 15:361-387;
Steyerberg 2019, Clinical Prediction Models, 2nd ed., ch. 5 and 17). The refits only judge; the
bundle holds the models fitted once. The apparent figures (the bundle's models on the rows they
were fitted on) are reported beside the cross-validated ones, whose gap is the optimism. Those
figures are about the procedure; the loss of the bundle's own models is judged beside them on
the confirmation rows (:mod:`pocketforest.own_loss`, which shares :func:`fold_loop` and
:func:`pair_loop`).
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Callable

import numpy as np

from .defaults import NESTED_REPEATS  # noqa: F401  (the nested cross-validation's repeats)

#: Below this many rows the small-data plan applies. docs/performance.md ("Small data") has the
#: simulation of both plans by size (`bench --small`): the split plan's reported figures are
#: noisier than cross-validation's at 500 rows and stop losing from about 800.
SMALL_DATA_ROWS = 800
FOLDS = 5
REPEATS = 2
#: Discovery / confirmation shares when there is no test split.
SMALL_SPLIT = (0.5, 0.5, 0.0)


@dataclass(frozen=True)
class Plan:
    """How the rows are used: one test split, or cross-validation of the whole pipeline."""
    kind: str                                  # "test" | "cross-validation"
    split: tuple[float, float, float]
    folds: int = 0
    repeats: int = 0
    reason: str = ""

    def to_dict(self) -> dict:
        out = {"kind": self.kind, "split": list(self.split), "reason": self.reason}
        if self.kind == "cross-validation":
            out.update({"folds": self.folds, "repeats": self.repeats})
        return out


def choose_plan(n_rows: int, requested: tuple[float, float, float] | None) -> Plan:
    if requested is not None:
        return Plan("test", tuple(requested), reason="--split given: three-way split")
    if n_rows < SMALL_DATA_ROWS:
        return Plan("cross-validation", SMALL_SPLIT, FOLDS, REPEATS,
                    reason=f"{n_rows} rows (< {SMALL_DATA_ROWS}): no test split; figures from {REPEATS} x "
                           f"{FOLDS}-fold cross-validation of the whole pipeline")
    return Plan("test", (0.5, 0.25, 0.25), reason=f"{n_rows} rows: discovery / confirmation / test split")


def fold_assignments(y: np.ndarray, task: str, plan: Plan, seed: int) -> np.ndarray:
    """[repeats, rows] fold number of every row (stratified by class for classification)."""
    from sklearn.model_selection import KFold, StratifiedKFold
    n = len(y)
    out = np.empty((plan.repeats, n), dtype=int)
    for r in range(plan.repeats):
        if task == "classification":
            counts = np.unique(np.asarray(y, dtype=str), return_counts=True)[1]
            folds = max(2, min(plan.folds, int(counts.min())))
            split = StratifiedKFold(folds, shuffle=True, random_state=seed + 1000 + r).split(np.zeros(n), y)
        else:
            split = KFold(plan.folds, shuffle=True, random_state=seed + 1000 + r).split(np.zeros(n))
        for k, (_, held) in enumerate(split):
            out[r, held] = k
    return out


def _refit(table, inner, train: np.ndarray, seed: int, fit_models):
    """The whole pipeline fitted on the rows ``train`` only."""
    sub = dataclasses.replace(table, data=table.data.iloc[train].reset_index(drop=True))
    return fit_models(sub, dataclasses.replace(inner, seed=seed))


#: ``fit_predict(train, held, key)``: fit on the row positions ``train``, and return for each array
#: of row positions in ``held`` a {model: predictions} dict. ``key`` names the fit: (repeat, fold)
#: in :func:`fold_loop`, (repeat, fold j, fold k) in :func:`pair_loop`; callers derive seeds from it.
FitPredict = Callable[[np.ndarray, list, tuple], list]


def fold_loop(n: int, folds: np.ndarray, fit_predict: FitPredict) -> dict[str, np.ndarray]:
    """Out-of-fold predictions: {model: [repeats, n, ...]}, row i predicted by the fit without its fold.

    The one cross-validation loop: the whole pipeline's refits (:func:`out_of_fold`) and the
    bundle's fixed equation terms re-estimated on the confirmation rows (:mod:`pocketforest.own_loss`)."""
    out: dict[str, np.ndarray] = {}
    for r in range(folds.shape[0]):
        for k in np.unique(folds[r]):
            held = np.flatnonzero(folds[r] == k)
            for m, p in fit_predict(np.flatnonzero(folds[r] != k), [held], (r, int(k)))[0].items():
                p = np.asarray(p, dtype=float)
                if m not in out:
                    out[m] = np.zeros((folds.shape[0], n) + p.shape[1:])
                out[m][r, held] = p
    return out


def pair_loop(n: int, folds: np.ndarray, fit_predict: FitPredict) -> dict[str, np.ndarray]:
    """The fits nested cross-validation needs: {model: [repeats, K, n, ...]}.

    Entry [r, k, i] is the prediction for row i from the fit without row i's fold and fold k of
    repeat r (NaN for the rows of fold k). For a fixed k this is the ordinary (K-1)-fold
    cross-validation of the rows outside fold k, which is what nested cross-validation's inner loop
    needs; K (K - 1) / 2 fits per repeat serve every k (each fit without folds j and k predicts
    both). Read by :func:`evaluate.nested_cv_interval`.
    """
    repeats = folds.shape[0]
    out: dict[str, np.ndarray] = {}
    for r in range(repeats):
        ks = np.unique(folds[r])
        for a_i, j in enumerate(ks):
            for k in ks[a_i + 1:]:
                train = np.flatnonzero((folds[r] != j) & (folds[r] != k))
                helds = [np.flatnonzero(folds[r] == j), np.flatnonzero(folds[r] == k)]
                for (held, left_out), preds in zip(zip(helds, (k, j)), fit_predict(train, helds, (r, int(j), int(k)))):
                    for m, p in preds.items():
                        p = np.asarray(p, dtype=float)
                        if m not in out:
                            out[m] = np.full((repeats, len(ks), n) + p.shape[1:], np.nan)
                        out[m][r, int(left_out), held] = p
    return out


def _pipeline_fit_predict(table, settings, fit_models, models: tuple[str, ...], seed_of,
                          tree_curves: list | None = None) -> FitPredict:
    """:data:`FitPredict` for the whole pipeline refitted on a subset of the table's rows."""
    from .design import model_frame
    from .surrogate import depth_fidelity, frontier_fidelity
    inner = dataclasses.replace(settings, quiet=True)

    def fit_predict(train: np.ndarray, helds: list, key: tuple) -> list:
        fit = _refit(table, inner, train, seed_of(key), fit_models)
        out = []
        for held in helds:
            rows = table.data.iloc[held].reset_index(drop=True)
            if tree_curves is not None:
                X = model_frame(rows, table.features)
                tree_curves.append((frontier_fidelity(fit.tree, fit.forest, X), depth_fidelity(fit.tree, fit.forest, X)))
            out.append({m: fit.predict(rows, m) for m in models})
        return out
    return fit_predict


def out_of_fold(table, settings, folds: np.ndarray, fit_models, tree_curves: list | None = None,
                models: tuple[str, ...] = ("forest", "tree", "equation")) -> dict[str, np.ndarray]:
    """Every model's prediction for every row from the pipeline refitted without that row's fold.

    ``fit_models(table, settings)`` is the pipeline's fitting step; returns {model: [repeats, n, ...]}.
    ``tree_curves``, when given, receives each fold's (frontier, depth curve) fidelity on its
    held-out rows, for the tree's size/fidelity frontier. ``models``: those the bundle holds (no
    equation figures when the rows could not support one; every fold then fits none either).
    """
    def seed_of(key: tuple) -> int:
        r, k = key
        return settings.seed + 7 * (r * 100 + k + 1)
    return fold_loop(len(table.data), folds, _pipeline_fit_predict(table, settings, fit_models, models, seed_of,
                                                                   tree_curves))


def pair_predictions(table, settings, folds: np.ndarray, fit_models,
                     models: tuple[str, ...] = ("forest", "tree", "equation")) -> dict[str, np.ndarray]:
    """:func:`pair_loop` over the whole pipeline: every pair of folds left out of a refit."""
    def seed_of(key: tuple) -> int:
        r, j, k = key
        return settings.seed + 7 * (50_000 + r * 100 + j * 10 + k)
    return pair_loop(len(table.data), folds, _pipeline_fit_predict(table, settings, fit_models, models, seed_of))
