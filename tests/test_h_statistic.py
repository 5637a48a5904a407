"""H² (Friedman & Popescu 2008), partial dependence and accumulated local effects on known functions."""
from __future__ import annotations

import numpy as np
import pytest
from sklearn.ensemble import RandomForestRegressor
from sklearn.inspection import partial_dependence

from pocketforest.discovery.effects import (ale_numeric, forest_predictor, partial_dependence_brute,
                                            partial_dependence_recursion)
from pocketforest.discovery.interactions import h_squared


def _uniform_pair(n: int = 1000, seed: int = 0) -> np.ndarray:
    return np.random.default_rng(seed).uniform(-1, 1, size=(n, 2))


# Analytic values derived from the definition in Friedman & Popescu (2008), Annals of Applied
# Statistics 2:916–954, eq. (44), for x1, x2 independent Uniform(−1, 1): with f = x1 + x2 the
# joint partial dependence is exactly the sum of the one-way ones (H² = 0); with f = x1·x2 both
# one-way partial dependences are constant (H² = 1); with f = x1 + x2 + x1·x2 the numerator is
# E[(x1 x2)²] = 1/9 and the denominator E[(x1 + x2 + x1 x2)²] = 1/3 + 1/3 + 1/9 = 7/9, so H² = 1/7.
# Tolerances: for the additive f the numerator is a sum of squared rounding errors of means over
# n = 1000 rows, ~(n * eps)^2 ~ 1e-26, so 1e-12 is exact-by-construction with room; the other two
# are sampling error of the n-row estimate, not rounding.
@pytest.mark.parametrize("f, expected, tol", [
    (lambda X: X[:, 0] + X[:, 1], 0.0, 1e-12),
    (lambda X: X[:, 0] * X[:, 1], 1.0, 0.01),
    (lambda X: X[:, 0] + X[:, 1] + X[:, 0] * X[:, 1], 1.0 / 7.0, 0.02),
])
def test_h_squared_analytic(f, expected, tol):
    X = _uniform_pair()
    assert h_squared(f, X, [0], [1]) == pytest.approx(expected, abs=tol)


def test_h_squared_ignores_a_third_additive_input():
    X = np.column_stack([_uniform_pair(600, 3), np.random.default_rng(4).uniform(-1, 1, 600)])
    f = lambda Z: Z[:, 0] * Z[:, 1] + np.sin(3 * Z[:, 2])  # noqa: E731
    # additive in (x0, x2): the numerator is squared rounding of 600-row means, ~(n * eps)^2
    assert h_squared(f, X, [0], [2]) == pytest.approx(0.0, abs=1e-12)
    assert h_squared(f, X, [0], [1]) > 0.9


@pytest.fixture(scope="module")
def small_forest():
    rng = np.random.default_rng(5)
    X = rng.uniform(0, 1, size=(400, 3))
    y = 3 * X[:, 0] ** 2 + X[:, 1] * X[:, 2] + rng.normal(0, 0.1, 400)
    return RandomForestRegressor(40, min_samples_leaf=5, random_state=0).fit(X, y), X


def test_brute_partial_dependence_equals_scikit_learn(small_forest):
    """Reference library: scikit-learn's ``partial_dependence`` (method="brute") on the same grid."""
    model, X = small_forest
    grid = np.linspace(0.1, 0.9, 9)
    ref = partial_dependence(model, X, [0], method="brute", custom_values={0: grid}, kind="average")
    ours = partial_dependence_brute(model.predict, X, [0], grid[:, None])
    # the same per-row forest predictions (scikit-learn sums trees in one order whatever the batch),
    # averaged over 400 rows in possibly another order: ~n * eps ~ 1e-13 relative
    np.testing.assert_allclose(ours, ref["average"][0], rtol=1e-10, atol=1e-10)
    # Two-way, on the cartesian grid scikit-learn builds.
    ref2 = partial_dependence(model, X, [(1, 2)], method="brute", grid_resolution=4, kind="average")
    g1, g2 = ref2["grid_values"]
    pts = np.array([(a, b) for a in g1 for b in g2])
    ours2 = partial_dependence_brute(model.predict, X, [1, 2], pts).reshape(len(g1), len(g2))
    np.testing.assert_allclose(ours2, ref2["average"][0], rtol=1e-10, atol=1e-10)


def test_recursion_partial_dependence_equals_scikit_learn(small_forest):
    """Reference library: scikit-learn's exact tree recursion for forests."""
    model, X = small_forest
    grid = np.quantile(X[:, 0], np.linspace(0.05, 0.95, 7))
    ref = partial_dependence(model, X, [0], method="recursion", custom_values={0: grid}, kind="average")
    # two implementations of the same weighted leaf sums: summation order only, ~leaves * eps
    np.testing.assert_allclose(partial_dependence_recursion(model, X, 0, grid), ref["average"][0], rtol=1e-6)


def test_forest_predictor_matches_scikit_learn(small_forest):
    model, X = small_forest
    # the same 40 tree outputs in float64, possibly summed in another order: ~40 * eps relative
    np.testing.assert_allclose(forest_predictor(model, "regression")(X), model.predict(X), rtol=1e-6)
    a = forest_predictor(model, "regression")(X)
    b = forest_predictor(model, "regression")(X)
    assert np.array_equal(a, b)  # threaded but deterministic


def test_ale_of_additive_function_is_the_function():
    """Apley & Zhu (2020), JRSS-B 82:1059–1086: for an additive f the first-order ALE of x1 is f1
    up to a constant; at the grid edges the accumulated differences telescope exactly."""
    rng = np.random.default_rng(6)
    X = rng.uniform(-1, 1, size=(2000, 2))
    f = lambda Z: Z[:, 0] ** 2 + 5 * Z[:, 1]  # noqa: E731
    edges = np.quantile(X[:, 0], np.linspace(0, 1, 11))
    ale = ale_numeric(f, X, 0, edges)
    # (a + 5 x2) - (b + 5 x2) leaves rounding ~eps * |5 x2| per row; 10 intervals accumulate
    # ~10 * eps * 6 ~ 1e-14, so atol 1e-12
    np.testing.assert_allclose(ale - ale[0], edges ** 2 - edges[0] ** 2, atol=1e-12)
    # Centred: the row-weighted mean of the interval midpoints is zero.
    idx = np.clip(np.searchsorted(edges, X[:, 0]) - 1, 0, 9)
    mids = 0.5 * (ale[1:] + ale[:-1])
    # a mean of 2000 values of size <= 1 after centring: rounding <= n * eps ~ 2e-13
    assert abs(np.mean(mids[idx])) < 1e-12
