"""Nested cross-validation's loss interval (Bates, Hastie & Tibshirani 2024, J Am Stat Assoc
119:1434-1445), on cases whose truth the test constructs: its arithmetic, not its coverage (the
coverage is the benchmark's: ``bench --small``)."""
from __future__ import annotations

import numpy as np
import pytest

from pocketforest.evaluate import nested_cv_interval


def _fixed_models(n: int, repeats: int, folds: int, seed: int):
    """Two fixed predictors (they learn nothing from the rows), laid out as pair fits would be."""
    rng = np.random.default_rng(seed)
    x = rng.standard_normal(n)
    y = x + rng.standard_normal(n)
    forest, other = x, 0.5 * x                      # fixed functions of x: no training at all
    assign = np.stack([rng.permutation(np.arange(n) % folds) for _ in range(repeats)])
    pairs_f = np.broadcast_to(forest, (repeats, folds, n)).copy()
    pairs_o = np.broadcast_to(other, (repeats, folds, n)).copy()
    for r in range(repeats):
        for k in range(folds):
            pairs_f[r, k, assign[r] == k] = np.nan   # a fold never predicts itself
            pairs_o[r, k, assign[r] == k] = np.nan
    return y, pairs_f, pairs_o, assign, np.tile(forest, 2), np.tile(other, 2)


def test_with_models_that_learn_nothing_the_interval_is_the_independent_rows_one():
    """Fixed models leave the folds uncorrelated: the inner estimate's mean squared error scaled to
    all rows is then the variance of a mean of independent rows, sd / sqrt(n) (the paper's MSE
    identity, E[(ē_in − ē_out)²] = MSE + var(ē_out)). 1,000 repeats of 5 folds give 5,000 terms,
    which estimate that standard error to about 4% (its mean squared error to about 8%): 15% is
    four of those."""
    n, folds = 200, 5
    y, pf, po, assign, cf, co = _fixed_models(n, 1000, folds, seed=1)
    iv = nested_cv_interval(y, pf, po, assign, cf, co, "regression", None, seed=2)
    nv = iv["nested"]
    assert nv["unclipped_standard_error"] == pytest.approx(nv["naive_standard_error"], rel=0.15)
    per_row = ((y - co[:n]) ** 2 - (y - cf[:n]) ** 2) / np.var(y)
    mid = (iv["ci_low"] + iv["ci_high"]) / 2.0
    assert mid == pytest.approx(per_row.mean(), rel=1e-9)   # centred on the R² difference of the two fixed models
    # nothing learns, so the inner loops estimate the same loss as the ordinary folds
    assert nv["inner_estimate"] == pytest.approx(per_row.mean(), rel=1e-9)
    assert iv["ci_low"] < per_row.mean() < iv["ci_high"]


def test_identical_models_have_no_loss_and_no_width():
    y, pf, _, assign, cf, _ = _fixed_models(100, 3, 5, seed=3)
    iv = nested_cv_interval(y, pf, pf, assign, cf, cf, "regression", None)
    assert iv["ci_low"] == iv["ci_high"] == 0.0


def test_a_surrogate_that_is_worse_on_smaller_training_sets_shows_it_in_the_inner_estimate():
    """The inner loops fit on (K − 2) / K of the rows: a surrogate wrong on 30% of the rows there and
    on 20% in the ordinary folds has inner estimate 0.30, and the interval stays about the ordinary
    estimate, 0.20 (the paper's correction of the centre is measured and not applied)."""
    n, folds, repeats = 100, 5, 2
    classes = ["a", "b"]
    y = np.array(["a", "b"] * (n // 2), dtype=object)
    right = np.where(y == "a", 0.0, 1.0)
    proba = lambda p1: np.column_stack([1 - p1, p1])            # noqa: E731
    assign = np.stack([np.arange(n) % folds] * repeats)
    forest = np.broadcast_to(proba(right), (repeats, folds, n, 2)).copy()
    wrong_inner, wrong_cv = (np.arange(n) % 10) < 3, (np.arange(n) % 10) < 2
    other = np.broadcast_to(proba(np.where(wrong_inner, 1 - right, right)), (repeats, folds, n, 2)).copy()
    for r in range(repeats):
        for k in range(folds):
            forest[r, k, assign[r] == k] = np.nan
            other[r, k, assign[r] == k] = np.nan
    cv_f = np.tile(proba(right), (2, 1))
    cv_o = np.tile(proba(np.where(wrong_cv, 1 - right, right)), (2, 1))
    iv = nested_cv_interval(y, forest, other, assign, cv_f, cv_o, "classification", classes)
    assert iv["nested"]["inner_estimate"] == pytest.approx(0.30)
    assert (iv["ci_low"] + iv["ci_high"]) / 2.0 == pytest.approx(0.20)
    assert iv["nested"]["standard_error"] >= iv["nested"]["naive_standard_error"] > 0
