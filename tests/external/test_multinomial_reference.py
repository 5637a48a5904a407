"""The multinomial equation against two reference libraries on a published data set.

Data: the wine recognition data (Forina et al.; UCI), shipped with scikit-learn as `load_wine`;
three cultivars. Three of its columns (alcohol, malic acid, ash) leave the classes overlapping,
so the unpenalised maximum-likelihood estimates exist (checked here, Albert & Anderson 1984).
References: statsmodels `MNLogit`, and scikit-learn's unpenalised `LogisticRegression`
(`C=np.inf`; scikit-learn >= 1.8 spells penalty=None this way). scikit-learn's softmax is
symmetric, so its coefficients are compared as differences to the reference (first) class.
"""
from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from sklearn.datasets import load_wine
from sklearn.linear_model import LogisticRegression

from pocketforest.equation import fit_equation
from pocketforest.separation import is_separated
from pocketforest.terms import Term

pytestmark = pytest.mark.external

XS = ["alcohol", "malic_acid", "ash"]


@pytest.fixture(scope="module")
def wine():
    d = load_wine(as_frame=True).frame
    classes = ["class_0", "class_1", "class_2"]
    y = np.array(classes, dtype=object)[d["target"].to_numpy()]
    eq = fit_equation([Term("linear", [x]) for x in XS], d, y, task="classification", target="cultivar",
                      fills={x: 0.0 for x in XS}, kinds={x: "numeric" for x in XS}, classes=classes,
                      baseline=[Term("linear", ["alcohol"])])
    return d, y, classes, eq


def test_wine_columns_do_not_separate_the_classes(wine):
    d, _, _, eq = wine
    X = np.column_stack([np.ones(len(d)), d[XS]])
    assert not is_separated(X, d["target"].to_numpy(), 3)
    assert eq.method == "maximum likelihood"


def test_wine_multinomial_equals_statsmodels_mnlogit(wine):
    d, _, classes, eq = wine
    X = np.column_stack([np.ones(len(d)), d[XS]])
    ref = sm.MNLogit(d["target"].to_numpy(), X).fit(disp=0, maxiter=500)
    assert eq.family == "multinomial" and eq.coef.shape == (4, 2)
    # both are statsmodels' Newton iterations (formula vs array interface), stopped once every step
    # is below 1e-8; convergence is quadratic there, so each sits within ~1e-8 of the optimum
    np.testing.assert_allclose(eq.coef, ref.params, rtol=1e-5)
    se = {(r["class"], r["term"]): r["std_error"] for r in eq.table}
    for k, cls in enumerate(classes[1:]):
        for j, term in enumerate(["Intercept"] + XS):
            assert se[(cls, term)] == pytest.approx(np.asarray(ref.bse)[j, k], rel=1e-4)
    # coefficient gap <= 2e-8 (above) times |x|_1 <= 25 on these rows gives a linear-predictor gap
    # <= 5e-7, and the softmax moves a probability by at most a quarter of that range: 1e-6
    np.testing.assert_allclose(eq.predict(d), ref.predict(X), atol=1e-6)
    # the block test of malic acid and ash beyond alcohol: 2 columns x (3 - 1) equations
    reduced = sm.MNLogit(d["target"].to_numpy(), X[:, :2]).fit(disp=0, maxiter=500)
    assert eq.block_test["df"] == 4
    # log-likelihoods are stationary at the optimum (coefficient error enters squared, ~1e-16) and
    # summed over 178 rows (rounding ~ n * eps * |llf| ~ 1e-11): rel 1e-6 is far from both
    assert eq.block_test["statistic"] == pytest.approx(2 * (ref.llf - reduced.llf), rel=1e-6)


def test_wine_multinomial_equals_scikit_learn_unpenalised_softmax(wine):
    d, y, classes, eq = wine
    lr = LogisticRegression(C=np.inf, max_iter=100_000, tol=1e-12).fit(d[XS], d["target"])
    ref = np.vstack([lr.intercept_[1:] - lr.intercept_[0], (lr.coef_[1:] - lr.coef_[0]).T])
    # scikit-learn's lbfgs stops on its own rule (gtol = tol, ftol = 64 * machine epsilon on the
    # relative decrease of the mean loss, sklearn/linear_model/_logistic.py), not at the exact
    # optimum; on this data its coefficients sit up to ~3e-5 relative from the Newton fit, and where
    # it stops depends on the BLAS kernel. rtol 1e-4 bounds that stopping error; a wrong term or
    # class order moves coefficients by far more.
    np.testing.assert_allclose(eq.coef, ref, rtol=1e-4, atol=1e-5)
    # The probabilities can differ only by what that coefficient gap implies: the softmax Jacobian
    # diag(p) - p p' moves p_k by at most p_k (1 - p_k) * range(d eta) <= range(d eta) / 4 (mean value
    # theorem), where d eta is the gap in linear predictors (0 for the reference class). A wrong
    # probability formula exceeds this bound; 1e-12 covers float64 rounding of the softmax itself.
    X = np.column_stack([np.ones(len(d)), d[XS]])
    gap = np.column_stack([np.zeros(len(d)), X @ (eq.coef - ref)])
    bound = 0.25 * np.ptp(gap, axis=1).max() + 1e-12
    np.testing.assert_allclose(eq.predict(d), lr.predict_proba(d[XS]), rtol=0, atol=bound)
