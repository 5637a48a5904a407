"""The loss interval: a paired percentile bootstrap (Efron & Tibshirani 1993, An Introduction to
the Bootstrap, ch. 13), vectorised. Reference library for every metric: scikit-learn."""
from __future__ import annotations

import numpy as np
import pytest
from sklearn import metrics as skm

from pocketforest.evaluate import loss_with_interval


def _loop_reference(y, a, b, score, resamples, seed, block=100):
    """The textbook loop: draw rows with replacement, score both models on the same draw.
    Draws in the same blocks as the vectorised code so the two see identical resamples."""
    rng = np.random.default_rng(seed)
    diffs = []
    for start in range(0, resamples, block):
        for idx in rng.integers(0, len(y), (min(block, resamples - start), len(y))):
            diffs.append(score(y[idx], a[idx]) - score(y[idx], b[idx]))
    return np.quantile(diffs, [0.025, 0.975])


def test_regression_interval_equals_the_plain_loop_with_scikit_learn_r2():
    rng = np.random.default_rng(0)
    y = rng.normal(size=150)
    a, b = y + rng.normal(scale=0.4, size=150), y + rng.normal(scale=0.8, size=150)
    got = loss_with_interval(y, a, b, "regression", None, resamples=300, seed=9)
    lo, hi = _loop_reference(y, a, b, skm.r2_score, 300, 9)
    # R^2 from weighted row sums (one matrix product) vs scikit-learn's per-resample sums: the same
    # terms summed in another order, ~n * eps * sum|terms| ~ 1e-13 on R^2; quantiles interpolate
    # continuously, so abs 1e-10
    assert got["ci_low"] == pytest.approx(lo, abs=1e-10) and got["ci_high"] == pytest.approx(hi, abs=1e-10)
    assert got["value"] == skm.r2_score(y, a) - skm.r2_score(y, b)
    rmse = lambda t, p: np.sqrt(skm.mean_squared_error(t, p))  # noqa: E731
    # point values come from the same scikit-learn calls: exact by construction
    assert got["also"]["rmse"]["value"] == pytest.approx(rmse(y, b) - rmse(y, a), rel=1e-12)
    lo, hi = _loop_reference(y, b, a, rmse, 300, 9)   # surrogate minus forest: positive = worse
    assert got["also"]["rmse"]["ci_low"] == pytest.approx(lo, abs=1e-10)
    assert got["also"]["mae"]["value"] == pytest.approx(skm.mean_absolute_error(y, b) - skm.mean_absolute_error(y, a))


@pytest.mark.parametrize("k", [2, 3])
def test_classification_interval_equals_the_plain_loop_with_scikit_learn_metrics(k):
    rng = np.random.default_rng(k)
    classes = [f"c{i}" for i in range(k)]
    codes = rng.integers(0, k, 200)
    y = np.array(classes, dtype=object)[codes]
    a = rng.dirichlet(np.ones(k), 200)
    a[np.arange(200), codes] += 0.6
    a /= a.sum(1, keepdims=True)
    b = rng.dirichlet(np.ones(k), 200)
    got = loss_with_interval(y, a, b, "classification", classes, resamples=120, seed=4)
    acc = lambda t, p: skm.accuracy_score(t, p.argmax(1))  # noqa: E731
    lo, hi = _loop_reference(codes, a, b, acc, 120, 4)
    # accuracies are counts / n: integer sums are exact in float64, so exact by construction
    assert (got["ci_low"], got["ci_high"]) == pytest.approx((lo, hi), abs=1e-12)
    ll = lambda t, p: skm.log_loss(t, p, labels=list(range(k)))  # noqa: E731
    lo, hi = _loop_reference(codes, b, a, ll, 120, 4)
    # the same clipped logs summed in another order over 200 rows: ~n * eps * 5 ~ 2e-13
    assert got["also"]["log_loss"]["ci_low"] == pytest.approx(lo, abs=1e-9)
    assert got["also"]["log_loss"]["ci_high"] == pytest.approx(hi, abs=1e-9)
    br = (lambda t, p: skm.brier_score_loss(t, p[:, 1])) if k == 2 else \
        (lambda t, p: skm.brier_score_loss(t, p, labels=list(range(k))))
    lo, hi = _loop_reference(codes, b, a, br, 120, 4)
    assert got["also"]["brier"]["ci_high"] == pytest.approx(hi, abs=1e-9)
    assert got["value"] == pytest.approx(acc(codes, a) - acc(codes, b))


def test_fast_point_values_agree_with_scikit_learn_to_rounding():
    rng = np.random.default_rng(7)
    y = rng.choice(["a", "b", "c"], 300).astype(object)
    a, b = rng.dirichlet([1, 1, 1], 300), rng.dirichlet([2, 1, 1], 300)
    slow = loss_with_interval(y, a, b, "classification", ["a", "b", "c"], resamples=50, seed=1)
    fast = loss_with_interval(y, a, b, "classification", ["a", "b", "c"], resamples=50, seed=1,
                              reference_values=False)
    # sums over 300 rows by matrix product vs scikit-learn: values <= ~5, rounding
    # <= n * eps * 5 ~ 3e-13 (accuracy: integer counts, exact)
    assert fast["value"] == pytest.approx(slow["value"], abs=1e-12)
    for m in ("log_loss", "brier"):
        assert fast["also"][m]["value"] == pytest.approx(slow["also"][m]["value"], abs=1e-12)
    assert (fast["ci_low"], fast["ci_high"]) == (slow["ci_low"], slow["ci_high"])
