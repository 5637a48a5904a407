"""The surrogate tree: synthetic rows around the data (Breiman & Shang 1996, "Born again trees"),
the fidelity-by-depth curve on test rows, the depth rule. Invented data with known truth."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from conftest import synthetic_table
from pocketforest.design import make_preprocessor, model_frame
from pocketforest.forest import fit_forest
from pocketforest.intake import prepare
from pocketforest.surrogate import DEPTHS, distill_tree, synthetic_rows


def _frame():
    df = synthetic_table(n=300, seed=5)
    table = prepare(df, "y", source="s.csv")
    return table, model_frame(df, table.features)


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
def test_distill_with_synthetic_rows_reports_curve_and_depth(task, k):
    df = synthetic_table(n=400, seed=6, task=task, n_classes=k)
    table = prepare(df, "y", source="s.csv")
    X = model_frame(df, table.features)
    prep, cols = make_preprocessor(table.features, df)
    y = df["y"].to_numpy() if task == "classification" else df["y"].to_numpy(float)
    forest = fit_forest(X.iloc[:200], y[:200], prep, cols, task, trees=30, seed=0, quiet=True, n_jobs=1)
    plain = distill_tree(forest, X.iloc[:200], X.iloc[200:300], X.iloc[300:], seed=0)
    born = distill_tree(forest, X.iloc[:200], X.iloc[200:300], X.iloc[300:], seed=0, n_synthetic=1500)
    key = "r2" if task == "regression" else "agreement"
    for fit in (plain, born):
        assert [row["depth"] for row in fit.fidelity_by_depth] == list(DEPTHS)
        assert all(key in row for row in fit.fidelity_by_depth)
    assert born.synthetic_rows == 1500 and "synthetic rows" in born.chosen_by
    # more forest-labelled rows let the deepest tree follow the forest at least about as well
    assert born.fidelity_by_depth[-1][key] >= plain.fidelity_by_depth[-1][key] - 0.03
    fixed = distill_tree(forest, X.iloc[:200], X.iloc[200:300], X.iloc[300:], seed=0, depth=3)
    assert fixed.depth <= 3 and fixed.chosen_by == "set by --tree-depth"


def test_negative_synthetic_rows_is_a_one_line_error(tmp_path, capsys):
    from pocketforest.cli import main
    data = tmp_path / "d.csv"
    synthetic_table(n=120).to_csv(data, index=False)
    rc = main(["distill", str(data), "--target", "y", "--synthetic-rows", "-5", "--out", str(tmp_path / "b")])
    err = capsys.readouterr().err
    assert rc == 2 and err.startswith("error:") and "--synthetic-rows" in err
    assert len(err.strip().splitlines()) == 1 and not (tmp_path / "b").exists()
