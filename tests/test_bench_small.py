"""The small-data section: its generators have the truth they claim, the whole-model test agrees
with statsmodels, the threshold rule reads its table as documented, and the quick run is well
formed."""
from __future__ import annotations

import argparse

import numpy as np
import pytest

from pocketforest.bench import small

N = 200_000   # generators only (numpy, well under a second)


def test_planted_truth_has_the_documented_r2():
    df = small.planted_small(N, np.random.default_rng(3), "regression")
    eta = (0.6 * df.x1 + 0.5 * (df.x2 ** 2 - 1) + 0.5 * df.x3 * df.x4 + df.grp.map(small.GROUP_EFFECT))
    # by construction Var(eta) = 0.36 + 0.5 + 0.25 + 0.125 = 1.235 and the noise has variance 1, so
    # the truth's R² is 1.235 / 2.235; the sample R² at 200,000 rows has standard error about
    # 2 sqrt(R²) (1 - R²) / sqrt(n) = 0.0015, and 0.01 is more than 6 of them
    r2 = 1 - np.var(df.y - eta) / np.var(df.y)
    assert r2 == pytest.approx(1.235 / 2.235, abs=0.01)
    assert abs(np.corrcoef(df.x5, df.y)[0, 1]) < 0.015          # x5 is noise: SE of r is 1/sqrt(n)
    b = small.planted_small(N, np.random.default_rng(3), "classification")
    assert set(b.y) == {"yes", "no"} and 0.3 < (b.y == "yes").mean() < 0.7


@pytest.mark.parametrize("task", ["regression", "classification"])
def test_null_outcome_is_independent_of_the_inputs(task):
    df = small.null_table(N, np.random.default_rng(4), task)
    y = df.y.astype(float) if task == "regression" else (df.y == "yes").astype(float)
    for c in ("x1", "x2", "x3", "x4", "x5"):
        assert abs(np.corrcoef(df[c], y)[0, 1]) < 0.015                      # SE of r is 0.0022
    # group means of the outcome: SE about 0.0045 (sd 1, 50,000 rows per group) or 0.0022 (coin)
    assert y.groupby(df.grp).mean().sub(y.mean()).abs().max() < 0.03


def test_whole_model_test_is_the_overall_f_test_of_statsmodels():
    import statsmodels.api as sm
    from pocketforest import pipeline
    from pocketforest.bench.common import settings
    from pocketforest.equation import _impute

    table = small._table(small.null_table(150, np.random.default_rng(5), "regression"), "regression", "t")
    fit = pipeline._fit_models(table, settings(trees=20, seed=1, quiet=True, bootstrap=10), (0.5, 0.5, 0.0))
    got = small.whole_model_test(fit)
    eq = fit.equation.inference or fit.equation
    conf = table.data.iloc[fit.splits.confirmation].reset_index(drop=True)
    kinds = {f.name: f.kind for f in table.features}
    X = eq.design(_impute(conf[list(kinds)], fit.fills, kinds))
    ref = sm.OLS(conf.y.to_numpy(float), X).fit()          # statsmodels' overall F test
    # both solve the same least-squares problems (lstsq vs statsmodels' pinv): equal to rounding
    assert got["df"] == X.shape[1] - 1 and got["df_resid"] == ref.df_resid
    assert got["p_value"] == pytest.approx(ref.f_pvalue, rel=1e-8)


def _row(n, gain, err):
    return {"task": "regression", "n": n, "split_loses": bool(gain > small.TOLERANCE or err > small.TOLERANCE)}


def test_threshold_is_the_size_from_which_the_split_plan_keeps_holding():
    rows = [_row(200, 0.05, 0.0), _row(300, 0.0, 0.005), _row(500, 0.0, 0.02), _row(800, 0.0, 0.0), _row(1200, 0.0, 0.0)]
    assert small.chosen_threshold(rows, "regression") == 800        # 300 holds but 500 loses again
    assert small.chosen_threshold(rows[:3], "regression") is None    # still losing at the largest size


def test_null_goal_is_judged_only_from_200_block_tests():
    row = {"rate_given_test": 0.04, "tested": small.MIN_TESTS}
    assert small._null_mark(row) is True
    assert small._null_mark({**row, "rate_given_test": 0.08}) is False
    assert small._null_mark({**row, "tested": small.MIN_TESTS - 1}) is None     # too few tests to judge
    assert small._null_mark({"rate_given_test": None, "tested": 0}) is None


def test_quick_run_is_well_formed(tmp_path):
    section = small.run(True, tmp_path, lambda text: None)   # as `bench --only small --quick` runs it
    raw = section.raw["small"]
    names = [f.name for f in section.figures]
    assert names == ["small: null rejection | block test, regression 150 rows",
                     "small: null rejection | block test, regression 300 rows",
                     "small: loss coverage, fitted models' loss, interval on the confirmation rows, regression 150 rows",
                     "small: loss coverage, expected loss, cross-validated interval, regression 150 rows",
                     "small: loss coverage, fitted models' loss, cross-validated interval, regression 150 rows",
                     "small: rows from which the split plan holds, regression"]
    assert len(raw["null"]) == 2 * small.QUICK["null"]
    for r in raw["null"]:
        assert r["plan"] == "cross-validation" and r["confirmation_rows"] == r["n"] // 2
        for p in (r["block_p"], r["whole_p"]):
            assert p is None or 0.0 <= p <= 1.0
    for f in section.figures[:2]:
        d = f.detail
        assert 0.0 <= d["with_block_test"] <= 1.0 and 0.0 <= d["rate_all"] <= 1.0
        assert d["rate_given_test"] is None or d["rate_all"] <= d["rate_given_test"]
    for r in raw["coverage"]:
        assert r["plan"] == "cross-validation" and r["ci_low"] <= r["reported"] <= r["ci_high"]
        assert r["standard_error"] >= r["naive_standard_error"] > 0
        assert r["covered"] == (r["ci_low"] <= r["true_loss"] <= r["ci_high"]) and -1 < r["true_loss"] < 1
        assert r["covered_own"] == (r["own_low"] <= r["true_loss"] <= r["own_high"])
        assert r["own_low"] <= r["own_value"] <= r["own_high"]
    cov = section.figures[2].detail
    assert cov["runs"] == small.QUICK["coverage"]["regression"] and 0 <= cov["coverage_fitted"] <= 1
    assert 0 <= cov["coverage_own"] <= 1 and cov["own_width"] > 0
    assert section.figures[4].passed is None    # the procedure's interval is not judged against the fitted loss
    assert [(r["n"], r["split"]["plan"], r["cv"]["plan"]) for r in raw["threshold"]] == [
        (n, "test", "cross-validation") for n in small.QUICK_THRESHOLD_SIZES]
    for r in raw["threshold"]:
        for p in ("split", "cv"):
            assert r[p]["abs_error"] == pytest.approx(abs(r[p]["reported"] - r[p]["true"]))
            assert -1 < r[p]["true"] < 1 and r[p]["seconds"] > 0
    assert all(f.passed is None or isinstance(f.passed, bool) for f in section.figures)
    text = "\n".join(section.lines)
    assert "Threshold" in text and "SHORT" not in text and "pass" not in text   # quick: nothing judged
    only_null = small.render(small.summarise_null(raw["null"]), [], [])        # --small-parts null
    assert only_null.startswith("Small data") and "Loss interval" not in only_null and "Threshold" not in only_null


def test_counts_and_tasks_come_from_the_command_line():
    from pocketforest.errors import InputError
    parser = argparse.ArgumentParser()
    small.add_arguments(parser)
    args = parser.parse_args(["--small-null", "250", "--small-tasks", "classification"])
    assert small.options(args) == {"null": 250, "coverage": None, "nested": None, "seeds": None,
                                   "tasks": ("classification",),
                                   "parts": None, "sizes": None}
    args = parser.parse_args(["--small-parts", "null,threshold", "--small-sizes", "300,800"])
    assert small.options(args)["parts"] == ("null", "threshold") and small.options(args)["sizes"] == (300, 800)
    with pytest.raises(InputError, match="--small-parts"):
        small.options(parser.parse_args(["--small-parts", "power"]))
    with pytest.raises(InputError, match="--small-seeds"):
        small.options(parser.parse_args(["--small-seeds", "1"]))
    with pytest.raises(InputError, match="--small-nested"):
        small.options(parser.parse_args(["--small-nested", "-1"]))
    assert small.options(parser.parse_args(["--small-nested", "0"]))["nested"] == 0   # the bootstrap, for comparison
    with pytest.raises(InputError, match="--small-tasks"):
        small.options(parser.parse_args(["--small-tasks", "survival"]))
