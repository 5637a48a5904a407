"""equation.R and tree.R: base R, vectorised over a data.frame, and a formula glm() refits.

The reference for the refit is R's own ``stats::glm`` (R Core Team, *R: A Language and
Environment for Statistical Computing*) on the same rows, imputed the same way: it must return
the coefficients statsmodels estimated, which proves FORMULA, FAMILY and refit_data describe the
fitted model and not merely something that predicts alike.
"""
from __future__ import annotations

import shutil
import subprocess

import numpy as np
import pandas as pd
import pytest

from pocketforest.equation import fit_equation
from pocketforest.export.rcode import equation_r, r_exact, r_str
from pocketforest.intake import prepare
from pocketforest.terms import Term

from conftest import synthetic_table

RSCRIPT = shutil.which("Rscript")
needs_r = pytest.mark.skipif(RSCRIPT is None, reason="R (Rscript) is not installed")

TERMS = [Term("linear", ["x1"]), Term("quadratic", ["x1"], {"centre": 0.1}),
         Term("hinge", ["x2"], {"knot": 0.2, "direction": "above"}), Term("categorical", ["colour"]),
         Term("interaction", ["x2", "x3"], {"centres": {"x2": 0.0, "x3": 0.0}})]

_REFIT = r'''
args <- commandArgs(trailingOnly = TRUE)
rows <- read.csv(args[1], colClasses = readLines(args[2]), check.names = FALSE, na.strings = "",
                 encoding = "UTF-8", fileEncoding = "UTF-8")
source(args[3])
m <- pocketforest_equation
fit <- glm(m$FORMULA, family = m$FAMILY, data = m$refit_data(rows),
           control = glm.control(epsilon = 1e-12, maxit = 100))
writeLines(sprintf("%a", coef(fit)), args[4])
'''


def _fit(task: str):
    df = synthetic_table(n=400, seed=8, task=task)
    table = prepare(df, "y", source="r.csv")
    kinds = {f.name: f.kind for f in table.features}
    fills = {f.name: (float(np.nanmedian(table.data[f.name].astype(float))) if f.kind == "numeric" else "")
             for f in table.features}
    y = table.data["y"].to_numpy()
    y = y.astype(float) if task == "regression" else y.astype(str).astype(object)
    eq = fit_equation(TERMS, table.data, y, task=task, target="y", fills=fills, kinds=kinds,
                      classes=table.classes, fit_on="all")
    return eq, table


@needs_r
@pytest.mark.parametrize("task", ["regression", "classification"])
def test_glm_refits_the_exported_coefficients(task, tmp_path):
    eq, table = _fit(task)
    meta = {"target": "y", "task": task, "classes": eq.classes, "tool_version": "test"}
    (tmp_path / "equation.R").write_text(equation_r(eq, meta), encoding="utf-8")
    (tmp_path / "refit.R").write_text(_REFIT, encoding="utf-8")
    data = table.data.copy()
    data.to_csv(tmp_path / "rows.csv", index=False)
    types = ["numeric" if f.kind == "numeric" else "character" for f in table.features]
    cols = [f.name for f in table.features]
    types = [types[cols.index(c)] if c in cols else ("numeric" if task == "regression" else "character")
             for c in data.columns]
    (tmp_path / "types.txt").write_text("\n".join(types) + "\n")
    subprocess.run([RSCRIPT, "--vanilla", "refit.R", "rows.csv", "types.txt", "equation.R", "coef.txt"],
                   cwd=tmp_path, check=True, capture_output=True, timeout=120)
    refit = np.array([float.fromhex(v) for v in (tmp_path / "coef.txt").read_text().split()])
    ours = np.asarray(eq.coef, dtype=float)
    assert refit.shape == ours.shape
    if task == "regression":
        # the same least-squares problem solved twice in double precision (QR in R, pinv/QR in
        # statsmodels): agreement to rounding times the design's condition number, far below 1e-8
        np.testing.assert_allclose(refit, ours, rtol=1e-8, atol=1e-10)
    else:
        # IRLS (Newton) in both, R run to a relative deviance change of 1e-12 and statsmodels to
        # its 1e-8: Newton converges quadratically, so the iterate after a deviance change below
        # 1e-8 is already accurate far beyond 1e-6 (measured here: 4e-15); 1e-6 allows one
        # iteration less on either side (common practice)
        np.testing.assert_allclose(refit, ours, rtol=1e-6, atol=1e-8)


@needs_r
def test_missing_column_and_text_in_a_number_are_errors_that_name_the_column(tmp_path):
    eq, table = _fit("regression")
    (tmp_path / "equation.R").write_text(equation_r(eq, {"target": "y", "task": "regression", "classes": None,
                                                         "tool_version": "t"}), encoding="utf-8")
    script = ('source("equation.R"); m <- pocketforest_equation\n'
              'r1 <- tryCatch(m$predict(data.frame(x1 = 1)), error = function(e) conditionMessage(e))\n'
              'r2 <- tryCatch(m$predict(data.frame(x1 = "abc", x2 = 0, x3 = 0, colour = "red")),'
              ' error = function(e) conditionMessage(e))\n'
              'p <- m$predict(data.frame(x1 = c(NA, "NA", " 0.5 "), x2 = NA, x3 = c(0, NA, 1), colour = c(NA, "", "red")))\n'
              'writeLines(c(r1, r2, sprintf("%a", p)))\n')
    r = subprocess.run([RSCRIPT, "--vanilla", "-e", script], cwd=tmp_path, capture_output=True, text=True, timeout=60)
    lines = r.stdout.splitlines()
    assert "is missing from the data" in lines[0] and '"x2"' in lines[0]
    assert '"x1" must be a number, not "abc"' in lines[1]
    want = eq.predict(pd.DataFrame({"x1": [np.nan, np.nan, 0.5], "x2": np.nan, "x3": [0, np.nan, 1],
                                    "colour": [np.nan, np.nan, "red"]}))
    # double precision; R's decimal reader may be one unit in the last place off (see r_exact)
    np.testing.assert_allclose([float.fromhex(v) for v in lines[2:]], want, rtol=1e-12)


def test_literals_escape_everything_outside_printable_ascii():
    assert r_str('a"b\\c\nd') == '"a\\"b\\\\c\\nd"'
    assert r_str("Gr\u00f6\u00dfe \U0001f331") == '"Gr\\u{00f6}\\u{00df}e \\U{0001f331}"'
    assert r_str("tab\there\x01") == '"tab\\there\\u{0001}"'
    assert r_exact(0.1875) == "0x1.8000000000000p-3" and r_exact(-2.0) == "(-0x1.0000000000000p+1)"
    with pytest.raises(ValueError):
        r_str("nul\x00")
