"""Separation is detected and fitted by Firth's penalised likelihood instead of crashing.

Sources: Albert & Anderson (1984, Biometrika 71:1-10) for when logistic estimates do not exist;
Konis (2007) for the linear-programme check; Firth (1993, Biometrika 80:27-38) and Heinze &
Schemper (2002, Stat Med 21:2409-2419) for the penalised fit.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.special import expit

from pocketforest.equation import fit_equation
from pocketforest.separation import _objective, firth_fit, is_separated
from pocketforest.terms import Term


def test_firth_in_a_two_by_two_table_adds_one_half_to_each_cell():
    """With one binary covariate, Firth's estimate of the log odds ratio is the empirical one
    after adding 1/2 to every cell (Firth 1993, from memory; the modified score equations of
    a saturated 2x2 model are solved by the corrected counts). Here one cell is empty, so the
    ordinary estimate is infinite."""
    a, b, c, d = 10, 0, 4, 6    # x = 1: 10 events, 0 non-events; x = 0: 4 events, 6 non-events
    x = np.r_[np.ones(a + b), np.zeros(c + d)]
    y = np.r_[np.ones(a), np.zeros(b), np.ones(c), np.zeros(d)].astype(int)
    X = np.column_stack([np.ones_like(x), x])
    assert is_separated(X, y, 2)
    fit = firth_fit(X, y, 2)
    assert fit.converged
    # firth_fit polishes with Newton steps until a step < 1e-12: log odds of size ~1-3 to ~1e-12
    assert fit.params[1] == pytest.approx(np.log((a + .5) * (d + .5) / ((b + .5) * (c + .5))), rel=1e-8)
    assert fit.params[0] == pytest.approx(np.log((c + .5) / (d + .5)), rel=1e-8)


def test_firth_solves_the_modified_score_equations():
    """Heinze & Schemper (2002) eq. (2): sum_i (y_i - p_i + h_i (1/2 - p_i)) x_i = 0, h the
    diagonal of the weighted hat matrix."""
    rng = np.random.default_rng(0)
    X = np.column_stack([np.ones(80), rng.normal(size=(80, 2))])
    y = (X[:, 1] + 0.3 * rng.normal(size=80) > 0).astype(int)
    fit = firth_fit(X, y, 2)
    p = expit(X @ fit.params)
    w = p * (1 - p)
    XtWX = X.T @ (X * w[:, None])
    h = w * np.einsum("ij,jk,ik->i", X, np.linalg.inv(XtWX), X)
    U = X.T @ (y - p + h * (0.5 - p))
    # at a Newton step < 1e-12 the score is about information (~80 * 0.25 * |x|^2 ~ 1e2) times
    # the step, ~1e-10, plus summation rounding ~ n * eps; 1e-7 is a wide margin over both
    assert np.max(np.abs(U)) < 1e-7


def test_multinomial_penalty_gradient_matches_finite_differences():
    rng = np.random.default_rng(1)
    X = np.column_stack([np.ones(60), rng.normal(size=(60, 2))])
    Y = np.eye(3)[rng.integers(0, 3, 60)]
    beta = rng.normal(scale=0.4, size=6)
    value, grad = _objective(beta, X, Y)
    num = np.array([(_objective(beta + e, X, Y)[0] - _objective(beta - e, X, Y)[0]) / 2e-6
                    for e in np.eye(6) * 1e-6])
    # central differences with h = 1e-6: truncation ~h^2 * f''' ~ 1e-12, rounding ~eps * |f| / h
    # ~ 1e-8 (|f| ~ 60); atol 1e-6 covers both, a wrong derivative term is O(0.1)
    np.testing.assert_allclose(grad, num, rtol=1e-5, atol=1e-6)


def test_overlapping_classes_are_not_flagged():
    rng = np.random.default_rng(2)
    X = np.column_stack([np.ones(200), rng.normal(size=(200, 2))])
    assert not is_separated(X, rng.integers(0, 2, 200), 2)
    assert not is_separated(X, rng.integers(0, 3, 200), 3)


def test_quasi_separation_by_a_category_level_is_flagged():
    rng = np.random.default_rng(3)
    y = rng.integers(0, 2, 120)
    level = np.arange(120) < 12
    y[level] = 1                     # every row at this level is an event
    X = np.column_stack([np.ones(120), rng.normal(size=120), level])
    assert is_separated(X, y, 2)


@pytest.mark.parametrize("k", [2, 3])
def test_perfectly_separated_data_give_finite_coefficients_and_a_warning(k):
    """A constructed data set in which x alone sorts the classes."""
    rng = np.random.default_rng(4)
    n = 90
    df = pd.DataFrame({"x": rng.normal(size=n), "z": rng.normal(size=n)})
    cut = np.quantile(df.x, np.linspace(0, 1, k + 1)[1:-1])
    classes = [f"k{i}" for i in range(k)]
    y = np.array(classes, dtype=object)[np.searchsorted(cut, df.x)]
    terms = [Term("linear", ["x"]), Term("linear", ["z"])]
    eq = fit_equation(terms, df, y, task="classification", target="y", fills={"x": 0.0, "z": 0.0},
                      kinds={"x": "numeric", "z": "numeric"}, classes=classes,
                      baseline=[Term("linear", ["x"])])
    assert eq.method == "Firth penalised likelihood"
    assert np.all(np.isfinite(eq.coef)) and np.all(np.isfinite([r["std_error"] for r in eq.table]))
    assert any("separated" in w and "Firth" in w for w in eq.warnings)
    assert eq.block_test["test"] == "penalised likelihood ratio" and eq.block_test["df"] == k - 1
    proba = eq.predict(df)
    assert np.mean(np.array(classes)[proba.argmax(1)] == y) > 0.95


@pytest.mark.parametrize("k", [2, 3])
def test_large_data_path_finds_separation_after_the_ordinary_fit_runs_away(k, monkeypatch):
    """Above the row limit the linear programme runs only when the ordinary fit diverges."""
    import pocketforest.equation as equation
    monkeypatch.setattr(equation, "LP_MAX_ROWS", 0)
    rng = np.random.default_rng(5)
    df = pd.DataFrame({"x": rng.normal(size=90), "z": rng.normal(size=90)})
    classes = [f"k{i}" for i in range(k)]
    y = np.array(classes, dtype=object)[np.searchsorted(np.quantile(df.x, np.linspace(0, 1, k + 1)[1:-1]), df.x)]
    eq = fit_equation([Term("linear", ["x"]), Term("linear", ["z"])], df, y, task="classification", target="y",
                      fills={"x": 0.0, "z": 0.0}, kinds={"x": "numeric", "z": "numeric"}, classes=classes)
    assert eq.method == "Firth penalised likelihood" and np.all(np.isfinite(eq.coef))
    ok = pd.DataFrame({"x": rng.normal(size=300), "z": rng.normal(size=300)})
    y_ok = np.array(classes, dtype=object)[rng.integers(0, k, 300)]
    eq = fit_equation([Term("linear", ["x"])], ok, y_ok, task="classification", target="y",
                      fills={"x": 0.0, "z": 0.0}, kinds={"x": "numeric", "z": "numeric"}, classes=classes)
    assert eq.method == "maximum likelihood"


def test_penalised_likelihood_ratio_keeps_its_size_on_pure_noise():
    """The penalised LR test compares both maxima under the full design's penalty, the reduced
    one with the extra coefficients held at zero (Heinze & Schemper 2002). Fitting the reduced
    design with its own smaller penalty instead added about log(n p(1-p)) per dropped
    coefficient: this seeded case of 150 fair coins on 75 rows with five noise columns was then
    rejected every time (mean statistic 19 on 5 df). Seeded, so the count is fixed; at the nominal
    5% a count above 15 of 150 has binomial probability 0.002."""
    from pocketforest.equation import block_test
    rng = np.random.default_rng(1)
    stats_, hits = [], 0
    for _ in range(150):
        X = np.column_stack([np.ones(75), rng.standard_normal((75, 5))])
        y = (rng.uniform(size=75) < 0.5).astype(float)
        t = block_test(X, X[:, :1], y, "binomial", penalised=True)
        stats_.append(t["statistic"])
        hits += t["p_value"] < 0.05
    assert hits <= 15
    # the mean of a chi-square on 5 df is 5; its standard error over 150 draws is sqrt(10/150) = 0.26
    assert np.mean(stats_) == pytest.approx(5.0, abs=1.0)


def test_penalised_and_ordinary_likelihood_ratios_agree_on_large_data():
    """On 2,000 rows without separation the penalty is a small share of the likelihood and both
    maxima carry the same penalty, so the penalised statistic is the ordinary one (statsmodels'
    GLM, the reference library) up to a difference that shrinks with the rows (0.016 measured
    here); 0.1 is well below the 6 per coefficient the reduced design's own penalty used to add."""
    import statsmodels.api as sm
    from pocketforest.equation import block_test
    rng = np.random.default_rng(0)
    X = np.column_stack([np.ones(2000), rng.standard_normal((2000, 3))])
    y = (rng.uniform(size=2000) < expit(0.5 * X[:, 1])).astype(float)
    got = block_test(X, X[:, :2], y, "binomial", penalised=True)
    ref = 2 * (sm.GLM(y, X, family=sm.families.Binomial()).fit().llf
               - sm.GLM(y, X[:, :2], family=sm.families.Binomial()).fit().llf)
    assert got["df"] == 2 and got["statistic"] == pytest.approx(ref, abs=0.1)
