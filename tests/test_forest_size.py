"""The forest size defaults: a leaf budget per forest, a per-tree cap users can lift.

The budget arithmetic is checked against its own definition; the fitted forests are checked to
obey the cap they record (scikit-learn's ``max_leaf_nodes``, scikit-learn docs: "Grow trees with
max_leaf_nodes in best-first fashion").
"""
from __future__ import annotations

import numpy as np

from conftest import synthetic_table
from pocketforest.defaults import LEAF_BUDGET, TREES, leaf_cap
from pocketforest.design import make_preprocessor, model_frame
from pocketforest.forest import fit_forest
from pocketforest.intake import prepare


def test_leaf_cap_shares_the_budget_between_trees_and_classes():
    assert leaf_cap(TREES) == LEAF_BUDGET // TREES
    assert leaf_cap(100) * 100 <= LEAF_BUDGET < (leaf_cap(100) + 1) * 100
    assert leaf_cap(100, 2) == leaf_cap(100)  # two classes store one weight per leaf, as regression
    assert leaf_cap(100, 4) == LEAF_BUDGET // (100 * 3)
    assert leaf_cap(10**9) == 2  # never below a single split


def _fit(max_leaves, task="regression", k=2, n=1200):
    df = synthetic_table(n, seed=4, task=task, n_classes=k)
    t = prepare(df, "y", source="x.csv")
    prep, cols = make_preprocessor(t.features, t.data)
    y = t.data["y"].to_numpy()
    y = y.astype(float) if t.task == "regression" else y.astype(str).astype(object)
    return fit_forest(model_frame(t.data, t.features), y, prep, cols, t.task, trees=10, min_samples_leaf=1,
                      max_leaves=max_leaves, quiet=True)


def test_forest_obeys_the_cap_it_records():
    fit = _fit(12)
    assert fit.settings["max_leaf_nodes"] == 12
    assert max(e.get_n_leaves() for e in fit.model.estimators_) <= 12


def test_zero_lifts_the_cap_and_default_uses_the_budget():
    free = _fit(0)
    assert free.settings["max_leaf_nodes"] is None
    assert max(e.get_n_leaves() for e in free.model.estimators_) > 12
    default = _fit(None, task="classification", k=3)
    assert default.settings["max_leaf_nodes"] == leaf_cap(10, 3)


def test_max_leaves_option_reaches_the_manifest(tmp_path):
    import json

    from pocketforest.cli import main

    csv = tmp_path / "d.csv"
    synthetic_table(300, seed=2).to_csv(csv, index=False)
    code = main(["distill", str(csv), "--target", "y", "--trees", "5", "--max-leaves", "7", "--out", str(tmp_path / "b"), "-q"])
    assert code == 0
    forest = json.loads((tmp_path / "b" / "manifest.json").read_text())["forest"]
    assert forest["max_leaf_nodes"] == 7 and forest["trees"] == 5


def test_parallel_forest_prediction_is_bit_identical_to_scikit_learn():
    """predict_design sums trees in order; scikit-learn's one-thread predict is the reference."""
    for task, k in (("regression", 2), ("classification", 3)):
        df = synthetic_table(800, seed=6, task=task, n_classes=k)
        t = prepare(df, "y", source="x.csv")
        prep, cols = make_preprocessor(t.features, t.data)
        y = t.data["y"].to_numpy()
        y = y.astype(float) if t.task == "regression" else y.astype(str).astype(object)
        fit = fit_forest(model_frame(t.data, t.features), y, prep, cols, t.task, trees=40, quiet=True)
        Xt = prep.transform(model_frame(t.data, t.features))
        want = fit.model.predict(Xt) if task == "regression" else fit.model.predict_proba(Xt)
        np.testing.assert_array_equal(fit.predict_design(Xt), want)
