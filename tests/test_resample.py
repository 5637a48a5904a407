"""The small-data plan: cross-validation of the whole pipeline, on tables whose truth the test
constructs, and a guarded log term fed a zero through every form."""
from __future__ import annotations

import dataclasses
import json

import numpy as np
import pandas as pd
import pytest

from conftest import synthetic_table
from pocketforest.evaluate import metrics
from pocketforest.intake import prepare
from pocketforest.pipeline import Settings, _fit_models, distill
from pocketforest.resample import SMALL_DATA_ROWS, SMALL_SPLIT


def test_a_60_row_table_distils_with_the_cross_validation_plan(tmp_path):
    df = synthetic_table(n=60, seed=3)
    r = distill(prepare(df, "y", source="tiny.csv"), Settings(trees=20, seed=1, quiet=True, bootstrap=100))
    assert r.plan.kind == "cross-validation" and len(r.splits.test) == 0
    ev = r.evaluation
    assert ev["on"] == "cross-validation" and ev["folds"] == 5 and ev["repeats"] == 2 and ev["n"] == 60
    assert np.isfinite(ev["equation"]["r2"]) and "apparent" in ev
    path = r.write(tmp_path / "tiny")
    m = json.loads((tmp_path / "tiny" / "manifest.json").read_text())
    assert m["plan"]["kind"] == "cross-validation" and m["splits"]["test"] == 0
    # each loss interval says what it is about and how: the cross-validated one (nested
    # cross-validation) about the procedure, the confirmation rows' one about these models
    from pocketforest.evaluate import ESTIMAND_CV, ESTIMAND_TEST, NESTED_METHOD
    for mdl in ("equation", "tree"):
        lo = m["loss"][mdl]
        assert lo["estimand"] == ESTIMAND_CV and lo["method"] == NESTED_METHOD
        assert lo["nested"]["fits"] == lo["nested"]["repeats"] * 10
        assert lo["ci_high"] - lo["value"] == pytest.approx(lo["value"] - lo["ci_low"], abs=1e-9)   # about the CV loss
        own = lo["bundle_models"]
        assert own["estimand"] == ESTIMAND_TEST and own["rows"] == m["splits"]["confirmation"]
        assert own["ci_low"] <= own["value"] <= own["ci_high"]
    assert m["loss"]["tree"]["bundle_models"]["refits"] == 0 and m["loss"]["equation"]["bundle_models"]["refits"] > 0
    report = (tmp_path / "tiny" / "report.html").read_text(encoding="utf-8")
    assert "nested cross-validation" in report and "these models (30 confirmation rows)" in report
    assert "loss intervals: nested cross-validation, 4 x 5 folds (40 refits), about the procedure" in r.summary()
    assert "these models' loss, on the 30 confirmation rows: tree" in r.summary()
    from pocketforest.scoring.verify import verify_bundle
    assert all(c.ok for c in verify_bundle(path))


def test_cross_validated_figures_equal_a_hand_written_refit_loop():
    """The pipeline's out-of-fold predictions, pooled over repeats, against a loop written here
    that refits the whole pipeline on each fold's other rows and predicts the fold."""
    df = synthetic_table(n=120, seed=4)
    table = prepare(df, "y", source="small.csv")
    s = Settings(trees=15, seed=2, quiet=True, bootstrap=50, nested_repeats=0)   # the interval is not checked here
    r = distill(table, s)
    assert r.plan.kind == "cross-validation"
    y = df["y"].to_numpy(dtype=float)
    preds = {m: [] for m in ("forest", "tree", "equation")}
    inner = dataclasses.replace(s, split=SMALL_SPLIT)
    a = r.fold_assignment
    for rep in range(a.shape[0]):
        out = {m: np.zeros(len(df)) for m in preds}
        for k in np.unique(a[rep]):
            held, train = np.flatnonzero(a[rep] == k), np.flatnonzero(a[rep] != k)
            sub = dataclasses.replace(table, data=table.data.iloc[train].reset_index(drop=True))
            fit = _fit_models(sub, dataclasses.replace(inner, seed=s.seed + 7 * (rep * 100 + int(k) + 1)), SMALL_SPLIT)
            for m in preds:
                out[m][held] = fit.predict(table.data.iloc[held].reset_index(drop=True), m)
        for m in preds:
            preds[m].append(out[m])
    for m in preds:
        mine = metrics(np.tile(y, a.shape[0]), np.concatenate(preds[m]), "regression")
        assert mine == pytest.approx(r.evaluation[m], rel=1e-12), m   # same fits, same arithmetic


def test_from_the_threshold_the_three_way_split_applies():
    df = synthetic_table(n=SMALL_DATA_ROWS, seed=5)
    r = distill(prepare(df, "y", source="t.csv"), Settings(trees=15, seed=1, quiet=True, bootstrap=50))
    assert r.plan.kind == "test" and r.evaluation["on"] == "test" and len(r.splits.test) > 0


@pytest.mark.external
@pytest.mark.parametrize("name", ["iris", "wine"])
def test_iris_and_wine_equation_within_five_points_of_the_forest(name):
    """Fisher's iris (1936) and the wine recognition data (Forina et al.), both shipped with
    scikit-learn: the equation's cross-validated accuracy is within 0.05 of the forest's."""
    from sklearn.datasets import load_iris, load_wine
    d = (load_iris if name == "iris" else load_wine)(as_frame=True)
    df = d.frame.copy()
    df["target"] = np.asarray(d.target_names, dtype=object)[d.target]
    s = Settings(trees=60, seed=0, quiet=True, bootstrap=100, nested_repeats=0)   # accuracy only: no interval needed
    r = distill(prepare(df, "target", source=f"{name}.csv"), s)
    ev = r.evaluation
    assert ev["on"] == "cross-validation"
    assert ev["equation"]["accuracy"] >= ev["forest"]["accuracy"] - 0.05, (ev, r.equation.formula)


def test_a_zero_reaching_a_log_term_is_handled_in_every_form(tmp_path):
    """Constructed: y grows with log(x) for a positive, skewed x on the discovery rows; rows the
    discovery step never saw hold x = 0 and x < 0. The guarded log max(x, floor) keeps the fit,
    the separation-free Gaussian refit and every export finite, and all forms agree."""
    from pocketforest.split import make_splits
    rng = np.random.default_rng(7)
    n = 1200
    x = rng.lognormal(0.0, 1.0, n)
    z = rng.normal(size=n)
    y = 2.0 * np.log(x) + z + rng.normal(0, 0.3, n)
    df = pd.DataFrame({"x": x, "z": z, "y": y})
    splits = make_splits(n, (0.5, 0.25, 0.25), 0)
    later = np.r_[splits.confirmation[:15], splits.test[:15]]
    df.loc[later[:20], "x"] = 0.0
    df.loc[later[20:], "x"] = -1.0
    r = distill(prepare(df, "y", source="logs.csv"),
                Settings(trees=40, seed=0, quiet=True, bootstrap=50, split=(0.5, 0.25, 0.25)))
    logs = [t for t in r.equation.terms if t.kind == "log"]
    assert logs and logs[0].params["floor"] > 0, r.equation.formula
    rows = pd.DataFrame({"x": [0.0, -1.0, 0.5, 3.0], "z": [0.1, 0.2, 0.3, 0.4]})
    want = r.predict(rows, "equation")
    assert np.all(np.isfinite(want))
    path = r.write(tmp_path / "logs")
    from pocketforest.api import load_bundle
    from pocketforest.scoring import runners
    bundle = load_bundle(path)
    np.testing.assert_allclose(bundle.predict(rows, model="equation"), want, rtol=1e-5)   # float32 graph
    m = json.loads((tmp_path / "logs" / "manifest.json").read_text())
    feats = m["features"]
    # below the log's floor an input counts as outside the training envelope, as beyond its range
    from pocketforest.scoring.runtime import envelope_count
    assert next(f for f in feats if f["name"] == "x")["term_domain_min"] == logs[0].params["floor"]
    assert list(envelope_count(rows, feats)) == [1, 1, 0, 0]
    json_rows = runners.json_rows(rows, feats)
    py = runners.run_python_export(tmp_path / "logs" / "equation.py", json_rows)
    np.testing.assert_allclose(py, want, rtol=1e-12)       # double precision, same operations
    sql = runners.sql_predictions(runners.run_sql("sqlite", (tmp_path / "logs" / "equation.sql").read_text(),
                                                  rows, feats), "regression", None)
    np.testing.assert_allclose(sql["prediction"], want, rtol=1e-12)
    import shutil
    if shutil.which("node") is not None:
        js = runners.run_js_export(tmp_path / "logs" / "equation.js", json_rows)
        np.testing.assert_allclose(js, want, rtol=1e-12)


def test_without_nested_repeats_the_interval_is_the_bootstrap_about_the_procedure(tmp_path):
    df = synthetic_table(n=60, seed=3)
    r = distill(prepare(df, "y", source="tiny.csv"), Settings(trees=10, seed=1, quiet=True, bootstrap=100,
                                                              nested_repeats=0))
    from pocketforest.evaluate import ESTIMAND_CV
    assert all(lo["estimand"] == ESTIMAND_CV and "nested" not in lo for lo in r.loss.values())
    r.write(tmp_path / "b")
    assert "expected loss of this modelling procedure" in (tmp_path / "b" / "report.html").read_text(encoding="utf-8")


def test_pair_predictions_equal_a_hand_written_loop_over_pairs_of_folds():
    """Entry [r, k, i]: row i predicted by the pipeline fitted without row i's fold and fold k."""
    from pocketforest.resample import pair_predictions
    df = synthetic_table(n=80, seed=6)
    table = prepare(df, "y", source="pairs.csv")
    s = dataclasses.replace(Settings(trees=8, seed=3, quiet=True, bootstrap=20), split=SMALL_SPLIT)
    folds = np.tile(np.arange(4), 20)[None, :]               # one repeat, 4 folds of 20 rows
    fit = lambda t, st: _fit_models(t, st, SMALL_SPLIT)      # noqa: E731
    got = pair_predictions(table, s, folds, fit, ("forest", "equation"))
    assert got["forest"].shape == (1, 4, 80)
    j, k = 1, 3
    train = np.flatnonzero((folds[0] != j) & (folds[0] != k))
    sub = dataclasses.replace(table, data=table.data.iloc[train].reset_index(drop=True))
    ref = _fit_models(sub, dataclasses.replace(s, seed=s.seed + 7 * (50_000 + j * 10 + k)), SMALL_SPLIT)
    for held_fold, left_out in ((j, k), (k, j)):
        held = np.flatnonzero(folds[0] == held_fold)
        for m in ("forest", "equation"):
            want = ref.predict(table.data.iloc[held].reset_index(drop=True), m)
            np.testing.assert_array_equal(got[m][0, left_out, held], want)   # same fit, same arithmetic
        assert np.isnan(got["forest"][0, held_fold, held]).all()              # a fold never predicts itself
