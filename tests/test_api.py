"""The notebook path: fit on a DataFrame, write, load and predict."""
from __future__ import annotations

import numpy as np

import pocketforest as pf

from conftest import synthetic_table


def test_fit_write_load_predict(tmp_path):
    df = synthetic_table(n=300, seed=5)
    result = pf.fit(df, "y", n_trees=20, random_state=2)
    assert result.evaluation["forest"]["r2"] > 0.3
    path = result.write(tmp_path / "b")
    bundle = pf.load_bundle(path)
    rows = df.drop(columns="y").head(40)
    for model in ("forest", "tree", "equation"):
        got = bundle.predict(rows, model)
        want = result.predict(rows, model)
        assert np.max(np.abs(got - want)) < 1e-4 * max(1.0, np.abs(want).max())


def test_classification_probabilities(tmp_path):
    df = synthetic_table(n=300, seed=6, task="classification")
    result = pf.fit(df, "y", n_trees=20)
    bundle = pf.load_bundle(result.write(tmp_path / "b"))
    proba = bundle.predict_proba(df.drop(columns="y").head(10), "equation")
    # a double softmax rounded to float32 per class: the sum is off by <= k * 2^-24 * p ~ 6e-8
    np.testing.assert_allclose(proba.sum(axis=1), 1.0, atol=1e-6)
    assert set(bundle.predict(df.head(10), "tree")) <= set(bundle.classes)
