"""equation.sps: SPSS syntax run in GNU PSPP (a free program that runs SPSS syntax).

What SPSS calls missing is decided by SPSS: a value declared user-missing (MISSING VALUES) must
take the training fill exactly like an empty cell (system-missing); the IBM SPSS Statistics
Command Syntax Reference describes MISSING() as true for both. Variable names follow SPSS's rules
(same reference, "Variable names": at most 64 bytes, a letter first, no reserved keyword,
case-insensitive).
"""
from __future__ import annotations

import shutil

import numpy as np
import pandas as pd
import pytest

from pocketforest.scoring import engines
from pocketforest.export.spss import equation_sps, sps_str, spss_names

from test_rcode import _fit

needs_pspp = pytest.mark.skipif(shutil.which("pspp") is None, reason="GNU PSPP is not installed")


@needs_pspp
def test_user_missing_values_take_the_fill_like_empty_cells(tmp_path):
    eq, table = _fit("regression")
    (tmp_path / "equation.sps").write_text(equation_sps(eq, {"target": "y", "task": "regression",
                                                             "classes": None, "tool_version": "t"}, table.features))
    feats = [f.to_dict() for f in table.features]
    names = spss_names([f.name for f in table.features])
    rows = pd.DataFrame({"x1": [-99.0, np.nan, 0.3], "x2": [0.1, -99.0, 0.5], "x3": [0.2, 0.2, -99.0],
                         "noise": 0.0, "colour": ["red", "  blue ", "NA"], "site": "north"})
    res = engines.run_sps(tmp_path / "equation.sps", rows, feats, names, ["pred_equation"], tmp_path,
                          setup=("MISSING VALUES x1 x2 x3 (-99).",))
    want = eq.predict(rows.replace(-99.0, np.nan).assign(colour=["red", "blue", np.nan]))
    # double precision in PSPP and numpy; only the order of the additions differs
    np.testing.assert_allclose(res["pred_equation"].astype(float), want, rtol=1e-12)


def test_names_follow_spss_rules_and_stay_unique():
    names = ["temp", "1st value", "select", "AND", "Größe (m²)", "a b", "a_b", "A_B", "L" * 300, "x.", "", "@at"]
    out = spss_names(names)
    assert out["temp"] == "temp" and out["select"] == "select" and out["@at"] == "@at"
    assert out["1st value"] == "v_1st_value" and out["AND"] == "AND_v" and out["x."] == "x"
    assert len({v.upper() for v in out.values()}) == len(names)          # unique, ignoring case
    assert all(len(v.encode()) <= 64 and v[0].isalpha() or v[0] == "@" for v in out.values())
    assert spss_names(["pred_equation"], {"PRED_EQUATION"}) == {"pred_equation": "pred_equation_2"}


def test_strings_are_quoted_or_hexadecimal():
    assert sps_str("it's") == "'it''s'"
    assert sps_str("a\nb") == "X'610A62'"
    assert sps_str("Ünï") == "X'" + "Ünï".encode().hex().upper() + "'"


def test_syntax_is_ascii_and_never_holds_a_newline_from_the_data():
    eq, table = _fit("classification")
    text = equation_sps(eq, {"target": "out\n'; EXECUTE.", "task": "classification", "classes": eq.classes,
                             "tool_version": "t"}, table.features)
    assert text.isascii()
    assert "EXECUTE.\n" in text and text.count("EXECUTE.") == 1   # the target's own "EXECUTE." is hex
