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


def test_fit_and_the_command_line_grow_the_same_forest_by_default():
    """One default tree count (defaults.TREES) for pocketforest.fit, Settings and `distill`."""
    import inspect

    from pocketforest.cli import build_parser
    from pocketforest.defaults import TREES
    from pocketforest.pipeline import Settings
    cli = build_parser().parse_args(["distill", "data.csv", "--target", "y"])
    assert inspect.signature(pf.fit).parameters["n_trees"].default == TREES
    assert Settings().trees == TREES and cli.trees == TREES
