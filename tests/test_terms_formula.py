"""The term model's formula is what statsmodels fits: every design column is matched by value."""
from __future__ import annotations

import numpy as np
import pandas as pd

from pocketforest.equation import fit_equation
from pocketforest.terms import Term, term_columns


def test_centred_number_by_category_interactions_fit_with_treatment_columns():
    """A centred x times a category once made the formula engine code every level; the columns
    are now spelled out per non-reference level and recover a constructed slope."""
    rng = np.random.default_rng(0)
    n = 600
    df = pd.DataFrame({"x a": rng.normal(size=n), "g": rng.choice(["p", "q", "r"], n), "h": rng.choice(["u", "v"], n)})
    y = 2.0 * (df["x a"] - 0.3) * (df.g == "q") + (df.h == "v") + rng.normal(scale=0.5, size=n)
    terms = [Term("linear", ["x a"]), Term("categorical", ["g"]), Term("categorical", ["h"]),
             Term("interaction", ["x a", "g"], {"centres": {"x a": 0.3}}), Term("interaction", ["g", "h"])]
    kinds = {"x a": "numeric", "g": "categorical", "h": "categorical"}
    eq = fit_equation(terms, df, y.to_numpy(), task="regression", target="y",
                      fills={"x a": 0.0, "g": "", "h": ""}, kinds=kinds, classes=None)
    est = {r["term"]: r for r in eq.table}
    row = est["(x a - 0.3) * [g = q]"]
    assert row["ci_low"] < 2.0 < row["ci_high"]
    # identity link: predict is this same product of the same design (same float64 operations)
    np.testing.assert_allclose(eq.predict(df), eq.design(df) @ eq.coef)


def test_labels_never_print_double_signs():
    kinds, fills = {"x": "numeric", "z": "numeric"}, {"x": 0.0, "z": 0.0}
    labels = [c.label for t in (Term("quadratic", ["x"], {"centre": -0.5}),
                                Term("hinge", ["x"], {"knot": -2.0, "direction": "above"}),
                                Term("interaction", ["x", "z"], {"centres": {"x": -1.0, "z": 2.0}, "power": 2}))
              for c in term_columns(0, t, fills, kinds)]
    assert labels == ["(x + 0.5)^2", "max(0, x + 2)", "((x + 1) * (z - 2))^2"]
    assert not any("- -" in lab for lab in labels)
