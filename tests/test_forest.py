"""The forest and its out-of-bag bookkeeping."""
from __future__ import annotations

import numpy as np

from pocketforest.design import make_preprocessor, model_frame
from pocketforest.forest import fit_forest
from pocketforest.importance import oob_permutation_importance, oob_rows
from pocketforest.intake import prepare

from conftest import synthetic_table


def _fit(n=800, trees=80, seed=0):
    table = prepare(synthetic_table(n=n, seed=seed), "y")
    prep, cols = make_preprocessor(table.features, table.data)
    X = model_frame(table.data, table.features)
    y = table.data["y"].to_numpy(float)
    return table, fit_forest(X, y, prep, cols, "regression", trees=trees, seed=seed, quiet=True), X, y


def test_oob_share_per_tree_is_about_e_to_minus_one():
    """Each bootstrap leaves out (1 - 1/n)^n ≈ e^-1 ≈ 0.368 of the rows
    (Efron & Tibshirani 1997, JASA 92:548-560)."""
    _, fit, _, y = _fit()
    shares = np.array([len(r) / len(y) for r in oob_rows(fit.model, len(y))])
    expected = (1 - 1 / len(y)) ** len(y)
    assert abs(shares.mean() - expected) < 0.01
    assert abs(expected - np.exp(-1)) < 0.001


def test_oob_rows_reproduce_scikit_learn_oob_prediction():
    """Our OOB rows are the ones scikit-learn used: averaging each tree over its OOB rows gives
    the forest's own oob_prediction_."""
    _, fit, X, y = _fit(n=300, trees=40)
    Xt = fit.pipeline.named_steps["prep"].transform(X).astype(np.float32)
    total, count = np.zeros(len(y)), np.zeros(len(y))
    for est, rows in zip(fit.model.estimators_, oob_rows(fit.model, len(y))):
        total[rows] += est.predict(Xt[rows])
        count[rows] += 1
    ok = count > 0
    # scikit-learn adds the per-tree OOB predictions in the same tree order and divides by the
    # same counts: same float64 operations in the same order, exact by construction
    np.testing.assert_allclose(total[ok] / count[ok], fit.oob_prediction[ok], rtol=1e-10)


def test_permutation_importance_ranks_signal_over_noise():
    table, fit, X, y = _fit()
    Xt = fit.pipeline.named_steps["prep"].transform(X)
    imp = {i.feature: i for i in oob_permutation_importance(fit, Xt, y, [f.name for f in table.features], 0)}
    assert imp["x1"].mean > 5 * imp["x1"].se
    assert imp["x1"].mean > imp["noise"].mean + 3 * imp["noise"].se
    assert abs(imp["noise"].mean) < 3 * imp["noise"].se + 0.01


def test_same_seed_same_forest():
    _, a, X, _ = _fit(n=300, trees=20, seed=4)
    _, b, _, _ = _fit(n=300, trees=20, seed=4)
    np.testing.assert_array_equal(a.pipeline.predict(X), b.pipeline.predict(X))
