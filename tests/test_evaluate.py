"""Metrics equal scikit-learn's (reference library); the loss interval behaves."""
from __future__ import annotations

import numpy as np
from sklearn import metrics as skm

from pocketforest.evaluate import loss_with_interval, metrics


def test_regression_metrics_equal_scikit_learn():
    rng = np.random.default_rng(0)
    y = rng.normal(size=200)
    p = y + rng.normal(scale=0.5, size=200)
    m = metrics(y, p, "regression")
    assert m["r2"] == skm.r2_score(y, p)
    assert np.isclose(m["rmse"], np.sqrt(skm.mean_squared_error(y, p)))  # same calls: exact
    assert m["mae"] == skm.mean_absolute_error(y, p)


def test_classification_metrics_equal_scikit_learn():
    rng = np.random.default_rng(1)
    classes = ["a", "b", "c"]
    y = rng.choice(classes, 300)
    p = rng.dirichlet([1, 1, 1], 300)
    m = metrics(y, p, "classification", classes)
    codes = np.searchsorted(classes, y)
    assert m["accuracy"] == skm.accuracy_score(codes, p.argmax(1))
    # metrics() renormalises p / p.sum() first: a change of ~eps, far inside isclose's 1e-5
    assert np.isclose(m["log_loss"], skm.log_loss(codes, p))
    assert np.isclose(m["auc"], skm.roc_auc_score(codes, p, multi_class="ovr", average="macro"))
    yb = rng.choice(["no", "yes"], 300)
    pb = rng.uniform(size=300)
    mb = metrics(yb, np.column_stack([1 - pb, pb]), "classification", ["no", "yes"])
    assert np.isclose(mb["brier"], skm.brier_score_loss(yb == "yes", pb))
    assert np.isclose(mb["auc"], skm.roc_auc_score(yb == "yes", pb))


def test_loss_interval_contains_estimate_and_is_seeded():
    rng = np.random.default_rng(2)
    y = rng.normal(size=300)
    a = y + rng.normal(scale=0.3, size=300)
    b = y + rng.normal(scale=0.6, size=300)
    one = loss_with_interval(y, a, b, "regression", None, resamples=300, seed=5)
    two = loss_with_interval(y, a, b, "regression", None, resamples=300, seed=5)
    assert one == two
    assert one["ci_low"] < one["value"] < one["ci_high"]
    assert one["value"] == skm.r2_score(y, a) - skm.r2_score(y, b)


def test_loss_interval_on_outcomes_that_resample_to_constants_is_quiet():
    """Five test rows, four alike: some resamples have one outcome value and no r2 (inf - inf).
    They are skipped without a RuntimeWarning (which a command-line user would see)."""
    import warnings
    y = np.array([1.0, 1.0, 1.0, 1.0, 2.0])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        out = loss_with_interval(y, y + 0.1, y - 0.2, "regression", None, resamples=200, seed=1)
    assert np.isfinite(out["ci_low"]) and np.isfinite(out["ci_high"])
