"""The surrogate tree: synthetic rows around the data (Breiman & Shang 1996, "Born again trees"),
the size/fidelity frontier and the size rule, fidelity on class probabilities. Invented data
with known truth; scikit-learn is the reference for the trees and the metrics."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import r2_score

from conftest import synthetic_table
from pocketforest.design import make_preprocessor, model_frame
from pocketforest.forest import fit_forest
from pocketforest.intake import prepare
from pocketforest.evaluate import fidelity
from pocketforest.surrogate import (DEPTHS, _prefix_outputs, depth_fidelity, distill_tree, fit_tree, frontier_fidelity,
                                    mean_frontier, synthetic_rows)


def _frame():
    df = synthetic_table(n=300, seed=5)
    table = prepare(df, "y", source="s.csv")
    return table, model_frame(df, table.features)


def _forest(task: str, k: int = 2, n: int = 400, seed: int = 6):
    df = synthetic_table(n=n, seed=seed, task=task, n_classes=k)
    table = prepare(df, "y", source="s.csv")
    X = model_frame(df, table.features)
    prep, cols = make_preprocessor(table.features, df)
    y = df["y"].to_numpy() if task == "classification" else df["y"].to_numpy(float)
    forest = fit_forest(X.iloc[:200], y[:200], prep, cols, task, trees=30, seed=0, quiet=True, n_jobs=1)
    return forest, X


def test_synthetic_rows_stay_in_the_data_envelope_and_observed_levels():
    table, X = _frame()
    S = synthetic_rows(X, 2000, seed=1)
    assert list(S.columns) == list(X.columns) and len(S) == 2000
    for f in table.features:
        col = f.onnx_input
        if f.kind == "numeric":
            v = S[col].dropna()
            assert v.min() >= X[col].min() and v.max() <= X[col].max()
            assert S[col].isna().mean() == pytest.approx(X[col].isna().mean(), abs=0.03)
        else:
            assert set(S[col]) <= set(X[col])
    pd.testing.assert_frame_equal(S, synthetic_rows(X, 2000, seed=1))   # seeded
    assert not S.equals(synthetic_rows(X, 2000, seed=2))


@pytest.mark.parametrize("task,k", [("regression", 2), ("classification", 3)])
def test_frontier_trees_are_the_best_first_tree_stopped_early(task, k):
    """The frontier reads every size off one best-first tree; each must be exactly the tree
    scikit-learn grows with max_leaf_nodes = k (same splits, same outputs, bit for bit)."""
    forest, X = _forest(task, k)
    prep = forest.pipeline.named_steps["prep"]
    Xf = np.asarray(prep.transform(X.iloc[:200]), dtype=np.float32)
    Xo = np.asarray(prep.transform(X.iloc[200:]), dtype=np.float32)
    yf = forest.predict_design(Xf)
    labels = getattr(forest.model, "classes_", None)
    big = fit_tree(Xf, yf, task, seed=0, min_leaf=5, labels=labels, max_leaf_nodes=24)
    sizes = [2, 3, 7, 12, int(big.get_n_leaves())]
    outs = _prefix_outputs(big, Xo, sizes, task)
    for size in sizes:
        small = fit_tree(Xf, yf, task, seed=0, min_leaf=5, labels=labels, max_leaf_nodes=size)
        ref = small.predict(Xo) if task == "regression" else small.predict_proba(Xo)
        assert small.get_n_leaves() == size
        np.testing.assert_array_equal(outs[size], ref)


@pytest.mark.parametrize("task,k", [("regression", 2), ("classification", 3)])
def test_default_size_is_the_smallest_within_the_margin_of_the_best_under_the_cap(task, k):
    forest, X = _forest(task, k)
    fit = distill_tree(forest, X.iloc[:200], X.iloc[200:300], X.iloc[300:], seed=0)
    key = "r2" if task == "regression" else "probability_r2"
    rule = fit.chosen_by
    assert rule["rule"] == "frontier" and rule["measure"] == key and rule["cap"] == 12 and rule["margin"] == 0.02
    conf = {row["leaves"]: row["confirmation"][key] for row in fit.frontier}
    best = max(v for s, v in conf.items() if s <= 12)
    expected = min(s for s, v in conf.items() if s <= 12 and v >= best - 0.02)
    assert fit.leaves == expected == rule["chosen"]["leaves"] and fit.leaves <= 12
    assert rule["best"]["value"] == best and "within 0.02" in rule["text"]
    assert [row["leaves"] for row in fit.frontier] == list(range(2, len(fit.frontier) + 2))
    assert fit.held_out_on == "test" and all(row["held_out"] is not None for row in fit.frontier)
    # the chosen tree's own held-out fidelity is the frontier's entry for its size
    Xt = np.asarray(forest.pipeline.named_steps["prep"].transform(X.iloc[300:]), dtype=np.float32)
    own = fit.pipeline.predict(X.iloc[300:]) if task == "regression" else fit.pipeline.predict_proba(X.iloc[300:])
    entry = next(row for row in fit.frontier if row["leaves"] == fit.leaves)
    assert entry["held_out"] == fidelity(forest.predict_design(Xt), own, task)
    assert [row["depth"] for row in fit.fidelity_by_depth] == list(DEPTHS)


@pytest.mark.parametrize("task,k", [("regression", 2), ("classification", 2)])
def test_depth_curve_is_the_deepest_tree_cut_at_each_depth(task, k):
    """One depth-first fit gives the whole curve; each depth must match scikit-learn's own tree
    grown to that depth (same leaves; node values agree to the rounding of their sums, so the
    fidelity figures agree to about 1e-12)."""
    forest, X = _forest(task, k)
    fit = distill_tree(forest, X.iloc[:200], X.iloc[200:300], X.iloc[300:], seed=0)
    prep = forest.pipeline.named_steps["prep"]
    Xf = np.asarray(prep.transform(X.iloc[:200]), dtype=np.float32)
    Xo = np.asarray(prep.transform(X.iloc[300:]), dtype=np.float32)
    labels = getattr(forest.model, "classes_", None)
    for row in fit.fidelity_by_depth[:6:2]:
        ref = fit_tree(Xf, forest.predict_design(Xf), task, seed=0, min_leaf=5, labels=labels, max_depth=row["depth"])
        out = ref.predict(Xo) if task == "regression" else ref.predict_proba(Xo)
        assert row["leaves"] == ref.get_n_leaves()
        for key, value in fidelity(forest.predict_design(Xo), out, task).items():
            assert row["held_out"][key] == pytest.approx(value, abs=1e-12)
    assert depth_fidelity(fit, forest, X.iloc[300:])[3] == {"depth": 4, "leaves": fit.fidelity_by_depth[3]["leaves"],
                                                            **fit.fidelity_by_depth[3]["held_out"]}


def test_a_bigger_tree_and_a_fixed_depth_are_one_option_away():
    forest, X = _forest("regression")
    small = distill_tree(forest, X.iloc[:200], X.iloc[200:300], X.iloc[300:], seed=0)
    best = distill_tree(forest, X.iloc[:200], X.iloc[200:300], X.iloc[300:], seed=0, leaves=30, margin=0.0)
    conf = {row["leaves"]: row["confirmation"]["r2"] for row in best.frontier if row["leaves"] <= 30}
    assert best.leaves == max(conf, key=lambda s: (conf[s], -s)) and best.leaves >= small.leaves
    fixed = distill_tree(forest, X.iloc[:200], X.iloc[200:300], X.iloc[300:], seed=0, depth=3)
    assert fixed.depth <= 3 and fixed.chosen_by["rule"] == "depth" and fixed.chosen_by["max_depth"] == 3
    both = distill_tree(forest, X.iloc[:200], X.iloc[200:300], X.iloc[300:], seed=0, depth=2, leaves=12)
    assert both.depth <= 2 and both.leaves <= 4 and all(row["depth"] <= 2 for row in both.frontier)


def test_without_test_rows_the_frontier_is_measured_later_on_held_out_rows():
    """The small-data plan has no test split: the stage must run without one, and the frontier
    on any held-out rows must come out of frontier_fidelity exactly as distill would compute it."""
    forest, X = _forest("regression")
    with_test = distill_tree(forest, X.iloc[:200], X.iloc[200:300], X.iloc[300:], seed=0)
    bare = distill_tree(forest, X.iloc[:200], X.iloc[200:300], None, seed=0)
    assert bare.held_out_on is None and all(row["held_out"] is None for row in bare.frontier)
    assert bare.leaves == with_test.leaves and bare.fidelity_by_depth[0]["held_out"] is None
    later = frontier_fidelity(bare, forest, X.iloc[300:])
    assert [row["leaves"] for row in later] == [row["leaves"] for row in with_test.frontier]
    assert [row["r2"] for row in later] == [row["held_out"]["r2"] for row in with_test.frontier]
    halves = [frontier_fidelity(bare, forest, X.iloc[300:350]), frontier_fidelity(bare, forest, X.iloc[350:])]
    mean = mean_frontier(halves)
    assert mean[3]["r2"] == pytest.approx((halves[0][3]["r2"] + halves[1][3]["r2"]) / 2, abs=1e-15)
    bare.record_held_out(mean, depth_fidelity(bare, forest, X.iloc[300:]), "cross-validation")
    assert bare.to_dict()["frontier_held_out"] == "cross-validation"
    assert bare.frontier[3]["held_out"] == {"r2": mean[3]["r2"]}
    assert bare.fidelity_by_depth[2]["held_out"] == with_test.fidelity_by_depth[2]["held_out"]


def test_class_fidelity_is_the_pooled_r2_of_the_probabilities():
    """probability_r2 = scikit-learn's variance-weighted R² over the class columns; for two classes
    it equals the R² of either class's probability; a constant at the class shares scores 0."""
    rng = np.random.default_rng(0)
    p = rng.beta(0.5, 3.0, 400)
    forest = np.column_stack([1 - p, p])
    tree = np.clip(forest + rng.normal(0, 0.05, forest.shape), 0, 1)
    tree /= tree.sum(1, keepdims=True)
    got = fidelity(forest, tree, "classification")
    assert got["probability_r2"] == pytest.approx(r2_score(p, tree[:, 1]), abs=1e-12)   # summation order
    constant = np.tile(forest.mean(0), (400, 1))
    flat = fidelity(forest, constant, "classification")
    assert flat["probability_r2"] == pytest.approx(0.0, abs=1e-12)
    assert flat["agreement"] == pytest.approx(np.mean(forest.argmax(1) == constant.argmax(1)))


def test_an_imbalanced_outcome_does_not_get_a_constant_or_one_split_tree():
    """Constructed: 90/10 classes where the rare class lives in a corner of (x1, x2) with a
    graded edge. A one-split tree already agrees with the forest on ~90% of the labels, so
    agreement cannot tell the sizes apart; the probabilities can, and the rule must pick the
    bigger, much more faithful tree."""
    rng = np.random.default_rng(11)
    n = 1200
    df = pd.DataFrame({"x1": rng.uniform(size=n), "x2": rng.uniform(size=n), "x3": rng.uniform(size=n)})
    score = 6 * df.x1 + 6 * df.x2 + 2 * df.x3
    prob = 1 / (1 + np.exp(-1.5 * (score - np.quantile(score, 0.9))))
    df["y"] = np.where(rng.uniform(size=n) < prob, "rare", "common")
    assert 0.07 < (df.y == "rare").mean() < 0.13
    table = prepare(df, "y", source="imbalanced.csv")
    X = model_frame(df, table.features)
    prep, cols = make_preprocessor(table.features, df)
    forest = fit_forest(X.iloc[:600], df.y.to_numpy()[:600], prep, cols, "classification", trees=40, seed=0,
                        quiet=True, n_jobs=1)
    fit = distill_tree(forest, X.iloc[:600], X.iloc[600:900], X.iloc[900:], seed=0)
    by = {row["leaves"]: row["confirmation"] for row in fit.frontier}
    assert fit.leaves > 2
    assert by[fit.leaves]["probability_r2"] > by[2]["probability_r2"] + 0.2
    # what the old label rule would have seen: every size within a few points of agreement
    agreements = [by[s]["agreement"] for s in by if s <= 12]
    assert max(agreements) - by[2]["agreement"] < 0.05 and by[2]["agreement"] > 0.85


def test_synthetic_rows_are_recorded_in_the_rule():
    forest, X = _forest("regression")
    born = distill_tree(forest, X.iloc[:200], X.iloc[200:300], X.iloc[300:], seed=0, n_synthetic=600)
    assert born.synthetic_rows == 600 and "synthetic rows" in born.chosen_by["text"]
    assert born.to_dict()["synthetic_rows"] == 600 and born.leaves <= 12


def test_negative_synthetic_rows_is_a_one_line_error(tmp_path, capsys):
    from pocketforest.cli import main
    data = tmp_path / "d.csv"
    synthetic_table(n=120).to_csv(data, index=False)
    rc = main(["distill", str(data), "--target", "y", "--synthetic-rows", "-5", "--out", str(tmp_path / "b")])
    err = capsys.readouterr().err
    assert rc == 2 and err.startswith("error:") and "--synthetic-rows" in err
    assert len(err.strip().splitlines()) == 1 and not (tmp_path / "b").exists()
