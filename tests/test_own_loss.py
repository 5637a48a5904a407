"""The loss of the bundle's own models on the confirmation rows (pocketforest.own_loss): the
shared fold loops against loops written here, and every figure against scikit-learn's metrics or
a hand-written refit of the bundle's equation terms. Tables are synthetic (conftest), their truth
constructed by the test."""
from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import accuracy_score, r2_score

from conftest import synthetic_table
from pocketforest.equation import refit_for_scoring
from pocketforest.intake import prepare
from pocketforest.pipeline import Settings, distill
from pocketforest.resample import fold_loop, pair_loop
from pocketforest.sizing import anticipated_r2


def _mean_model(y: np.ndarray):
    """fit_predict for the loops: the mean of the training outcomes, for every held row."""
    def fit_predict(train, helds, key):
        return [{"mean": np.full(len(h), y[train].mean())} for h in helds]
    return fit_predict


def test_fold_loop_predicts_each_row_from_the_fit_without_its_fold():
    y = np.arange(12, dtype=float) ** 2
    folds = np.array([np.arange(12) % 3, (np.arange(12) // 4)])
    got = fold_loop(12, folds, _mean_model(y))["mean"]
    for r in range(2):
        for i in range(12):
            assert got[r, i] == pytest.approx(y[folds[r] != folds[r, i]].mean())


def test_pair_loop_leaves_out_the_rows_fold_and_one_more():
    y = np.arange(16, dtype=float) ** 1.5
    folds = (np.arange(16) % 4)[None, :]
    got = pair_loop(16, folds, _mean_model(y))["mean"]
    assert got.shape == (1, 4, 16)
    for k in range(4):
        for i in range(16):
            if folds[0, i] == k:
                assert np.isnan(got[0, k, i])
            else:
                keep = (folds[0] != k) & (folds[0] != folds[0, i])
                assert got[0, k, i] == pytest.approx(y[keep].mean())


@pytest.fixture(scope="module")
def small_regression():
    df = synthetic_table(n=160, seed=8)
    return df, distill(prepare(df, "y", source="own.csv"), Settings(trees=20, seed=4, quiet=True, bootstrap=200,
                                                                     nested_repeats=0))


def test_the_tree_is_judged_as_exported_on_the_confirmation_rows(small_regression):
    """Forest (fitted on the discovery rows) and tree (never shown an outcome) on the rows that
    chose nothing: the loss is their R² difference there (scikit-learn's r2_score)."""
    df, r = small_regression
    conf = df.iloc[r.splits.confirmation].reset_index(drop=True)
    y = conf["y"].to_numpy(dtype=float)
    want = r2_score(y, r.predict(conf, "forest")) - r2_score(y, r.predict(conf, "tree"))
    own = r.loss["tree"]["bundle_models"]
    assert own["value"] == pytest.approx(want, abs=1e-12) and own["refits"] == 0
    assert own["rows"] == len(conf) and own["ci_low"] < own["value"] < own["ci_high"]


def test_the_equation_figure_equals_a_hand_written_refit_of_its_terms(small_regression):
    """The equation's terms stay the bundle's; only their coefficients are re-estimated without each
    confirmation fold, on the discovery rows and the other folds, exactly as the export was."""
    from pocketforest import own_loss
    from pocketforest.resample import Plan, fold_assignments
    df, r = small_regression
    disc, conf = r.splits.discovery, r.splits.confirmation
    y = df["y"].to_numpy(dtype=float)
    folds = fold_assignments(y[conf], "regression", Plan("cross-validation", (), own_loss.FOLDS, own_loss.REPEATS),
                             r.settings.seed + 300)
    hint = anticipated_r2("regression", y[disc], r.forest.oob_prediction)
    kinds = {f.name: f.kind for f in r.table.features}
    forest = r.predict(df.iloc[conf].reset_index(drop=True), "forest")
    losses = []
    for rep in range(folds.shape[0]):
        pred = np.zeros(len(conf))
        for k in np.unique(folds[rep]):
            held, keep = conf[folds[rep] == k], conf[folds[rep] != k]
            rows = np.concatenate([disc, keep])
            fit = refit_for_scoring(r.equation.inference, df.iloc[rows].reset_index(drop=True), y[rows],
                                    fills=r.fills, kinds=kinds, fit_on="x", anticipated_r2=hint)
            assert [c.label for c in fit.columns] == [c.label for c in r.equation.columns]   # the same terms
            pred[folds[rep] == k] = fit.predict(df.iloc[held].reset_index(drop=True))
        losses.append(pred)
    yc = np.tile(y[conf], folds.shape[0])
    want = r2_score(yc, np.tile(forest, folds.shape[0])) - r2_score(yc, np.concatenate(losses))
    own = r.loss["equation"]["bundle_models"]
    assert own["value"] == pytest.approx(want, abs=1e-10)
    assert own["refits"] == own_loss.REPEATS * own_loss.FOLDS + own_loss.NESTED_REPEATS * own_loss.FOLDS * (own_loss.FOLDS - 1) // 2
    assert "nested" in own and own["ci_low"] < own["value"] < own["ci_high"]


def test_a_classification_bundle_carries_accuracy_losses_for_both_surrogates():
    df = synthetic_table(n=150, seed=5, task="classification")
    r = distill(prepare(df, "y", source="own-cls.csv"), Settings(trees=20, seed=2, quiet=True, bootstrap=200,
                                                                   nested_repeats=0))
    conf = df.iloc[r.splits.confirmation].reset_index(drop=True)
    y = conf["y"].astype(str).to_numpy()
    classes = np.asarray(r.classes, dtype=object)
    acc = {m: accuracy_score(y, classes[np.argmax(r.predict(conf, m), axis=1)]) for m in ("forest", "tree")}
    own = r.loss["tree"]["bundle_models"]
    assert own["metric"] == "accuracy" and own["value"] == pytest.approx(acc["forest"] - acc["tree"], abs=1e-12)
    eq = r.loss["equation"]["bundle_models"]
    assert eq["metric"] == "accuracy" and -1.0 <= eq["ci_low"] <= eq["value"] <= eq["ci_high"] <= 1.0


def test_a_bundle_judged_on_test_rows_has_no_confirmation_figure():
    df = synthetic_table(n=200, seed=9)
    r = distill(prepare(df, "y", source="split.csv"), Settings(trees=10, seed=1, quiet=True, bootstrap=50,
                                                                split=(0.5, 0.25, 0.25)))
    assert all("bundle_models" not in lo for lo in r.loss.values())
