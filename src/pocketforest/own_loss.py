"""Small-data plan: the loss of the bundle's *own* models, judged on the confirmation rows.

Why: cross-validation of the whole pipeline estimates what the modelling procedure gives up on
tables of this size, not what these fitted models give up (Bates, Hastie & Tibshirani 2024, J Am
Stat Assoc 119:1434-1445). At 150 rows the difference is large: whether the few discovery rows
revealed a bend decides the equation's loss, and the folds' own choices of terms are unrelated to
the bundle's, so no interval about the cross-validated loss covers the bundle's models reliably
(`bench --small`, docs/performance.md).

The confirmation rows took no part in choosing anything, so they can judge the bundle's choices:

* the forest was fitted on the discovery rows only, and the tree was grown from it on the
  discovery rows and sized on the confirmation rows' inputs (never their outcomes): both are
  judged as exported, with a paired bootstrap over the confirmation rows;
* the equation's terms were chosen on the discovery rows, but its exported coefficients were
  estimated on every row, so the same terms are re-estimated without each fold of the
  confirmation rows (:func:`resample.fold_loop`; nothing else is refitted, so this is cheap),
  and the interval is nested cross-validation over those refits (:func:`evaluate.nested_cv_interval`,
  :func:`resample.pair_loop`), which also counts how a refit's error moves with the rows it left out.

Only the rows' count limits these figures: half the table judges them.
"""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from .equation import design_of, refit_coefficients
from .evaluate import ESTIMAND_TEST, loss_with_interval, nested_cv_interval, outcome_values
from .resample import Plan, fold_assignments, fold_loop, pair_loop
from .sizing import anticipated_r2

#: Folds and repeats over the confirmation rows. Only the fixed terms are re-estimated (no forest,
#: no discovery), so the 40 + 90 refits cost little beside the pipeline's own. Chosen at 150 rows
#: (docs/performance.md, "Small data", run 5): with five folds the refits' pessimism and the
#: naive standard error's floor left the Gaussian coverage at 0.920; with ten, 0.953 (binary 0.970).
FOLDS = 10
REPEATS = 4
NESTED_REPEATS = 2
METHOD_FIXED = "paired percentile bootstrap over the confirmation rows (the models as exported)"
METHOD_REFITS = "the bundle's equation terms re-estimated without each confirmation fold"
METHOD_EQUATION = METHOD_REFITS + "; interval by nested cross-validation over those refits (Bates, Hastie & Tibshirani 2024)"
#: When the confirmation rows give fewer than four folds (a rare class): no pairs of folds to nest.
METHOD_EQUATION_BOOTSTRAP = METHOD_REFITS + "; paired percentile bootstrap over the confirmation rows"


def own_loss(r, *, level: float, resamples: int, seed: int) -> dict[str, dict]:
    """{surrogate: loss entry} on the confirmation rows of a small-data bundle ``r`` (a
    ``pipeline.Distillation`` without test rows)."""
    table, task, classes = r.table, r.table.task, r.classes
    disc, conf = np.asarray(r.splits.discovery), np.asarray(r.splits.confirmation)
    data = table.data
    y = outcome_values(data[table.target].to_numpy(), task)
    rows = data.iloc[conf].reset_index(drop=True)
    y_c = y[conf]
    forest = np.asarray(r.predict(rows, "forest"), dtype=float)
    out = {}
    for m in r.models[1:]:
        if m == "tree":
            entry = loss_with_interval(y_c, forest, r.predict(rows, "tree"), task, classes, resamples=resamples,
                                       seed=seed, level=level)
            entry.update(method=METHOD_FIXED, refits=0)
        else:
            entry = _equation_loss(r, data, y, disc, conf, rows, forest, level=level, resamples=resamples, seed=seed)
        entry.update(rows=int(len(conf)), estimand=ESTIMAND_TEST, on="confirmation rows")
        out[m] = entry
    return out


def _equation_loss(r, data: pd.DataFrame, y: np.ndarray, disc: np.ndarray, conf: np.ndarray, rows: pd.DataFrame,
                   forest: np.ndarray, *, level: float, resamples: int, seed: int) -> dict:
    task, classes, eq = r.table.task, r.classes, r.equation
    # the exported coefficients' rows: discovery + confirmation after the refit for scoring, else
    # the confirmation fit itself
    refitted = eq.inference is not None
    base = eq.inference if refitted else eq
    hint = anticipated_r2(task, y[disc], r.forest.oob_prediction, r.forest.classes)
    kinds = r.kinds

    # the design once: fitted as refit_for_scoring fits (missing inputs filled), predicted as the
    # exported equation predicts
    X_fit = design_of(base, data, r.fills, kinds)
    X_rows = base.design(rows)
    failed = []

    def fit_predict(train: np.ndarray, helds: list, key: tuple) -> list:   # positions among the confirmation rows
        fit_rows = np.concatenate([disc, conf[train]]) if refitted else conf[train]
        coef, _, _ = refit_coefficients(base, X_fit[fit_rows], y[fit_rows], hint)
        if not np.all(np.isfinite(coef)):   # as the export would: keep the confirmation estimates, and count it
            coef = base.coef
            failed.append(key)
        return [{"equation": base.predict_design(X_rows[h], coef)} for h in helds]

    n = len(conf)
    with warnings.catch_warnings():   # a class with fewer confirmation rows than folds: fewer folds, no warning
        warnings.simplefilter("ignore")
        folds = fold_assignments(y[conf], task, Plan("cross-validation", (), FOLDS, REPEATS), seed + 300)
        nested = fold_assignments(y[conf], task, Plan("cross-validation", (), FOLDS, NESTED_REPEATS), seed + 400)
    cv = fold_loop(n, folds, fit_predict)["equation"]
    stacked = cv.reshape((-1,) + cv.shape[2:])
    f_stacked = np.concatenate([forest] * REPEATS)
    entry = loss_with_interval(np.concatenate([y[conf]] * REPEATS), f_stacked, stacked, task, classes,
                               resamples=resamples, seed=seed, level=level, groups=np.tile(np.arange(n), REPEATS))
    refits = REPEATS * int(folds.max() + 1)
    k = int(nested.max()) + 1
    if k >= 4:   # as for the whole pipeline: pairs of folds out of at least four
        pairs = pair_loop(n, nested, fit_predict)["equation"]
        f_pairs = np.broadcast_to(forest, pairs.shape).copy()
        f_pairs[np.isnan(pairs)] = np.nan
        iv = nested_cv_interval(y[conf], f_pairs, pairs, nested, f_stacked, stacked, task, classes, level=level,
                                seed=seed)
        refits += NESTED_REPEATS * k * (k - 1) // 2
        if iv is not None:
            entry.update(iv, also_method=entry["method"])
    entry.update(method=METHOD_EQUATION if "nested" in entry else METHOD_EQUATION_BOOTSTRAP,
                 refits=int(refits), folds=int(folds.max() + 1),
                 repeats=REPEATS, refits_failed=len(failed))
    return entry
