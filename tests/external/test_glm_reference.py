"""The GLM wrapper against certified and published estimates.

Data sets ship with statsmodels. Certified values are written down from memory of the sources
(marked as such) and were reproduced by a direct statsmodels fit before being relied on here.
"""
from __future__ import annotations

import numpy as np
import pytest
from statsmodels.datasets import longley, spector

from pocketforest.equation import fit_equation
from pocketforest.terms import Term

pytestmark = pytest.mark.external


def _linear_terms(names):
    return [Term("linear", [n]) for n in names]


def test_longley_matches_nist_strd_certified_values():
    """NIST StRD Longley (1967) certified OLS values (from memory; statsmodels OLS reproduced
    them to 10 significant digits). Gaussian/identity GLM estimates equal OLS."""
    df = longley.load_pandas().data
    xs = ["GNPDEFL", "GNP", "UNEMP", "ARMED", "POP", "YEAR"]
    eq = fit_equation(_linear_terms(xs), df, df["TOTEMP"].to_numpy(float), task="regression",
                      target="TOTEMP", fills={x: 0.0 for x in xs}, kinds={x: "numeric" for x in xs},
                      classes=None)
    certified = {"Intercept": -3482258.63459582, "GNPDEFL": 15.0618722713733, "GNP": -0.0358191792925910,
                 "UNEMP": -2.02022980381683, "ARMED": -1.03322686717359, "POP": -0.0511041056535807,
                 "YEAR": 1829.15146461355}
    got = {row["term"]: row["estimate"] for row in eq.table}
    # Longley's design has cond(X) ~ 4.9e9, so a backward-stable least-squares solver guarantees
    # only about cond * eps ~ 1e-6 relative on the coefficients (statsmodels' pinv reaches ~1e-11
    # on this machine, but that is the solver's luck, not a guarantee). A normal-equations solve
    # (cond^2 * eps) or a wrong term misses by far more.
    for name, value in certified.items():
        assert got[name] == pytest.approx(value, rel=1e-6), name
    # The residual sum of squares is stationary at the optimum, so coefficient error enters it only
    # squared (~eps * |X| |beta| ~ 3e-6 on X beta, squared ~1e-11 against SSE ~ 8e5); what is left
    # is summation rounding, ~1e-13 relative: rel 1e-8 and 1e-9 stand.
    resid = df["TOTEMP"].to_numpy() - eq.predict(df)
    resid_sd = np.sqrt(np.sum(resid ** 2) / (len(df) - 7))
    assert resid_sd == pytest.approx(304.854073561965, rel=1e-8)
    r2 = 1 - np.sum(resid ** 2) / np.sum((df["TOTEMP"] - df["TOTEMP"].mean()) ** 2)
    assert r2 == pytest.approx(0.995479004577296, rel=1e-9)


def test_spector_mazzeo_logit_matches_greene():
    """Spector & Mazzeo (1980) grade data; logit estimates as printed in Greene, Econometric
    Analysis (from memory; statsmodels' Logit reproduced them)."""
    df = spector.load_pandas().data
    xs = ["GPA", "TUCE", "PSI"]
    y = np.where(df["GRADE"] > 0, "1", "0").astype(object)
    eq = fit_equation(_linear_terms(xs), df, y, task="classification", target="GRADE",
                      fills={x: 0.0 for x in xs}, kinds={x: "numeric" for x in xs}, classes=["0", "1"])
    got = {row["term"]: row["estimate"] for row in eq.table}
    assert eq.family == "binomial" and eq.link == "logit"
    for name, value in {"Intercept": -13.0213, "GPA": 2.8261, "TUCE": 0.0952, "PSI": 2.3787}.items():
        assert got[name] == pytest.approx(value, abs=6e-5), name
