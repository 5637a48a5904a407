"""The confirmatory equation: families, the multinomial layout, the block test, the size cap.

Reference library: statsmodels (GLM, MNLogit, OLS F test), fitted directly on the same design.
Data are invented with a known structure (synthetic cases whose truth the test constructs).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from pocketforest.equation import block_test, cap_terms, fit_equation
from pocketforest.errors import InputError
from pocketforest.terms import Term


def _frame(n=300, seed=0):
    rng = np.random.default_rng(seed)
    df = pd.DataFrame({"a": rng.normal(size=n), "b": rng.normal(size=n),
                       "g": rng.choice(["p", "q", "r"], n)})
    return df, rng


KINDS = {"a": "numeric", "b": "numeric", "g": "categorical"}
FILLS = {"a": 0.0, "b": 0.0, "g": ""}
MAIN = [Term("linear", ["a"]), Term("linear", ["b"]), Term("categorical", ["g"])]
EXTRA = [Term("interaction", ["a", "b"], {"centres": {"a": 0.0, "b": 0.0}, "power": 1}),
         Term("quadratic", ["a"], {"centre": 0.0})]


def _design(df):
    """Treatment coding with the most common level as reference (pocketforest's documented choice)."""
    counts = df.g.value_counts()
    ref = sorted(counts.index, key=lambda lv: (-counts[lv], lv))[0]
    levels = [df.g == lv for lv in sorted(set(df.g) - {ref})]
    return np.column_stack([np.ones(len(df)), df.a, df.b, *levels, df.a * df.b, df.a ** 2]).astype(float)


def _three_class(n=400, seed=0):
    df, rng = _frame(n, seed)
    eta = np.column_stack([np.zeros(n), 0.3 + df.a + 1.0 * df.a * df.b, -0.2 + df.b - 0.6 * (df.g == "r")])
    p = np.exp(eta) / np.exp(eta).sum(1, keepdims=True)
    y = np.array(["c0", "c1", "c2"], dtype=object)[(rng.uniform(size=n)[:, None] > p.cumsum(1)).sum(1)]
    return df, y


def test_multinomial_coefficients_intervals_and_predictions_match_statsmodels():
    df, y = _three_class()
    classes = ["c0", "c1", "c2"]
    eq = fit_equation(MAIN + EXTRA, df, y, task="classification", target="y", fills=FILLS, kinds=KINDS,
                      classes=classes)
    assert eq.family == "multinomial" and eq.link == "logit"
    X = _design(df)
    ref = sm.MNLogit(np.searchsorted(classes, y), X).fit(disp=0)
    assert eq.coef.shape == (7, 2)
    # same Newton method (statsmodels), stopped when every step < 1e-8: coefficients within ~2e-8
    np.testing.assert_allclose(eq.coef, np.asarray(ref.params), rtol=1e-5, atol=1e-7)
    ci = np.asarray(ref.conf_int()).reshape(2, 7, 2)
    rows = {(r["class"], r["term"]): r for r in eq.table}
    labels = ["Intercept"] + [c.label for c in eq.columns]
    for k, cls in enumerate(classes[1:]):
        for j, lab in enumerate(labels):
            r = rows[(cls, lab)]
            assert r["ci_low"] == pytest.approx(ci[k, j, 0], rel=1e-4, abs=1e-6)
            assert r["ci_high"] == pytest.approx(ci[k, j, 1], rel=1e-4, abs=1e-6)
            assert r["std_error"] == pytest.approx(np.asarray(ref.bse)[j, k], rel=1e-4)
            assert r["p_value"] == pytest.approx(np.asarray(ref.pvalues)[j, k], rel=1e-3, abs=1e-10)
    # coefficient gap ~2e-8 times |x|_1 (squares and products of N(0,1) columns, <= ~35 here) gives
    # a linear-predictor gap <= 7e-7; a probability moves by at most a quarter of its range: 1e-6
    np.testing.assert_allclose(eq.predict(df), ref.predict(X), atol=1e-6)


def test_block_test_multinomial_df_and_statistic_match_statsmodels():
    df, y = _three_class(seed=1)
    classes = ["c0", "c1", "c2"]
    eq = fit_equation(MAIN + EXTRA, df, y, task="classification", target="y", fills=FILLS, kinds=KINDS,
                      classes=classes, baseline=MAIN)
    codes = np.searchsorted(classes, y)
    X = _design(df)
    full, red = sm.MNLogit(codes, X).fit(disp=0), sm.MNLogit(codes, X[:, :5]).fit(disp=0)
    bt = eq.block_test
    assert bt["test"] == "likelihood ratio"
    assert bt["df"] == 2 * (3 - 1)  # two extra columns, K - 1 = 2 equations
    # llf is stationary at the optimum: coefficient error enters squared; summation ~ n * eps
    assert bt["statistic"] == pytest.approx(2 * (full.llf - red.llf), rel=1e-6)
    assert bt["p_value"] < 0.01  # the interaction is real in this construction


def test_gaussian_block_test_is_the_f_test_of_nested_models():
    df, rng = _frame(seed=2)
    y = 1 + df.a + 0.4 * df.a * df.b + rng.normal(size=len(df))
    eq = fit_equation(MAIN + EXTRA, df, y.to_numpy(), task="regression", target="y", fills=FILLS, kinds=KINDS,
                      classes=None, baseline=MAIN)
    X = _design(df)
    full, red = sm.OLS(y, X).fit(), sm.OLS(y, X[:, :5]).fit()
    f, p, dfd = full.compare_f_test(red)
    assert eq.block_test["test"] == "F" and eq.block_test["df"] == 2
    # the same least-squares fits by statsmodels' pinv (one IRLS step is exact for the identity
    # link): residual sums of squares agree to rounding, ~cond(X) * eps ~ 1e-14 relative
    assert eq.block_test["statistic"] == pytest.approx(f, rel=1e-9)
    assert eq.block_test["p_value"] == pytest.approx(p, rel=1e-6)


def test_binomial_block_test_is_the_likelihood_ratio_test():
    df, rng = _frame(seed=3)
    eta = -0.2 + df.a + 0.8 * df.a * df.b
    y = np.where(rng.uniform(size=len(df)) < 1 / (1 + np.exp(-eta)), "yes", "no").astype(object)
    eq = fit_equation(MAIN + EXTRA, df, y, task="classification", target="y", fills=FILLS, kinds=KINDS,
                      classes=["no", "yes"], baseline=MAIN)
    X = _design(df)
    full = sm.GLM((y == "yes").astype(float), X, family=sm.families.Binomial()).fit()
    red = sm.GLM((y == "yes").astype(float), X[:, :5], family=sm.families.Binomial()).fit()
    assert eq.block_test["df"] == 2
    # llf is stationary at the optimum (IRLS error enters squared); summation ~ n * eps
    assert eq.block_test["statistic"] == pytest.approx(2 * (full.llf - red.llf), rel=1e-6)


def test_poisson_for_counts_matches_statsmodels_and_rejects_non_counts():
    df, rng = _frame(seed=4)
    y = rng.poisson(np.exp(0.5 + 0.4 * df.a - 0.3 * df.b)).astype(float)
    eq = fit_equation(MAIN, df, y, task="regression", target="n", fills=FILLS, kinds=KINDS, classes=None,
                      family="poisson")
    ref = sm.GLM(y, _design(df)[:, :5], family=sm.families.Poisson()).fit()
    assert eq.link == "log"
    # both statsmodels IRLS from the same start, stopped on a relative deviance change < 1e-8; IRLS
    # is Newton for the canonical log link, so both are within ~1e-8 of the optimum (coefficients
    # ~0.3-0.5, so rtol 1e-6 is >10x that) and mu = exp(eta) moves by the same relative amount
    np.testing.assert_allclose(eq.coef, ref.params, rtol=1e-6)
    np.testing.assert_allclose(eq.predict(df), ref.predict(), rtol=1e-6)
    for bad in (y - 1.0, y + 0.5):
        with pytest.raises(InputError, match="poisson needs counts"):
            fit_equation(MAIN, df, bad, task="regression", target="n", fills=FILLS, kinds=KINDS, classes=None,
                         family="poisson")


def test_family_must_suit_the_outcome():
    df, y = _three_class(n=120)
    with pytest.raises(InputError, match="binomial needs two classes"):
        fit_equation(MAIN, df, y, task="classification", target="y", fills=FILLS, kinds=KINDS,
                     classes=["c0", "c1", "c2"], family="binomial")
    with pytest.raises(InputError, match="needs classes"):
        fit_equation(MAIN, df, df.a.to_numpy(), task="regression", target="y", fills=FILLS, kinds=KINDS,
                     classes=None, family="multinomial")


def test_robust_standard_errors_are_statsmodels_hc3():
    df, rng = _frame(seed=5)
    y = (1 + df.a + rng.normal(size=len(df)) * (1 + np.abs(df.a))).to_numpy()
    eq = fit_equation(MAIN, df, y, task="regression", target="y", fills=FILLS, kinds=KINDS, classes=None,
                      robust=True)
    ref = sm.GLM(y, _design(df)[:, :5], family=sm.families.Gaussian()).fit(cov_type="HC3", use_t=True)
    # least squares (exact in one IRLS step) and HC3 from the same residuals: rounding only, ~1e-14
    np.testing.assert_allclose([r["std_error"] for r in eq.table], ref.bse, rtol=1e-6)
    assert any("robust" in n for n in eq.notes)


def test_notes_say_why_the_p_values_are_valid():
    """Cox (1975) data splitting; Berk et al. (2013) on post-selection p-values."""
    df, rng = _frame(seed=6)
    y = (df.a + rng.normal(size=len(df))).to_numpy()
    eq = fit_equation(MAIN + EXTRA, df, y, task="regression", target="y", fills=FILLS, kinds=KINDS,
                      classes=None, baseline=MAIN)
    assert "Cox 1975" in eq.note and "Berk et al. 2013" in eq.note and "confirmation rows" in eq.note


def test_size_cap_drops_the_weakest_terms_and_keeps_hierarchy():
    """At least three rows per coefficient (pocketforest.sizing: below that even a penalised fit
    cannot estimate the terms); 12 rows give a budget of 4 columns."""
    df, rng = _frame(n=12, seed=7)
    y = (df.a + rng.normal(size=12)).to_numpy()
    # strongest first: the interaction, then a, b, g, the square
    terms = [EXTRA[0], Term("linear", ["a"]), Term("linear", ["b"]), Term("categorical", ["g"]), EXTRA[1]]
    eq = fit_equation(terms, df, y, task="regression", target="y", fills=FILLS, kinds=KINDS, classes=None,
                      baseline=MAIN, cap=True)
    kept = [(t.kind, tuple(t.variables)) for t in eq.terms]
    # budget 12 // 3 = 4 columns: interaction + its main effects (3); g needs 2 and is dropped;
    # the weaker square still fits
    assert len(eq.columns) <= 4
    assert kept == [("interaction", ("a", "b")), ("linear", ("a",)), ("linear", ("b",)), ("quadratic", ("a",))]
    assert [t.kind for t in eq.dropped_terms] == ["categorical"]
    assert any("can estimate at most about 4" in w for w in eq.warnings) and "can estimate at most" in eq.note
    assert eq.block_test["df"] == 2  # interaction and square beyond the kept main effects


def test_cap_uses_evidence_rank_when_given():
    terms = [Term("linear", ["a"], evidence={"rank": 2}), Term("linear", ["b"], evidence={"rank": 1})]
    kept, dropped = cap_terms(terms, 1, FILLS, KINDS)
    assert [t.variables for t in kept] == [["b"]] and [t.variables for t in dropped] == [["a"]]


def test_block_test_with_nothing_beyond_the_baseline_is_none():
    X = np.column_stack([np.ones(20), np.arange(20.0)])
    assert block_test(X, X, np.arange(20.0) % 3, "gaussian") is None


def test_robust_multinomial_standard_errors_are_statsmodels_hc0():
    df, y = _three_class(seed=8)
    classes = ["c0", "c1", "c2"]
    eq = fit_equation(MAIN, df, y, task="classification", target="y", fills=FILLS, kinds=KINDS,
                      classes=classes, robust=True)
    ref = sm.MNLogit(np.searchsorted(classes, y), _design(df)[:, :5]).fit(disp=0, cov_type="HC0")
    se = np.array([[r["std_error"] for r in eq.table if r["class"] == c] for c in classes[1:]]).T
    np.testing.assert_allclose(se, np.asarray(ref.bse), rtol=1e-4)


def test_two_classes_may_be_fitted_as_multinomial_and_agree_with_binomial():
    df, rng = _frame(seed=9)
    y = np.where(rng.uniform(size=len(df)) < 1 / (1 + np.exp(-df.a)), "yes", "no").astype(object)
    kw = dict(task="classification", target="y", fills=FILLS, kinds=KINDS, classes=["no", "yes"])
    multi = fit_equation(MAIN, df, y, family="multinomial", **kw)
    binom = fit_equation(MAIN, df, y, **kw)
    # Newton (steps < 1e-8) and IRLS (deviance change < 1e-8) both stop within ~1e-8 of the same
    # optimum; times |x|_1 <= ~9 that is < 2e-7 on the linear predictor, a quarter of it on p
    np.testing.assert_allclose(multi.predict(df), binom.predict(df), atol=1e-6)
