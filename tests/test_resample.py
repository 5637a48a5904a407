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
    # the loss interval says what it is about: the procedure's expected loss, not these models'
    from pocketforest.pipeline import ESTIMAND_CV
    assert m["loss"]["equation"]["estimand"] == m["loss"]["tree"]["estimand"] == ESTIMAND_CV
    assert "expected loss of this modelling procedure" in (tmp_path / "tiny" / "report.html").read_text(encoding="utf-8")
    from pocketforest.scoring.verify import verify_bundle
    assert all(c.ok for c in verify_bundle(path))


def test_cross_validated_figures_equal_a_hand_written_refit_loop():
    """The pipeline's out-of-fold predictions, pooled over repeats, against a loop written here
    that refits the whole pipeline on each fold's other rows and predicts the fold."""
    df = synthetic_table(n=120, seed=4)
    table = prepare(df, "y", source="small.csv")
    s = Settings(trees=15, seed=2, quiet=True, bootstrap=50)
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
    r = distill(prepare(df, "target", source=f"{name}.csv"), Settings(trees=60, seed=0, quiet=True, bootstrap=100))
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
