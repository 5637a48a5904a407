"""Intake, scoring coercion: new rows typed exactly like the training rows."""
from __future__ import annotations

import numpy as np
import pandas as pd

from pocketforest.features import Feature
from pocketforest.intake import coerce_for_scoring

from intake_data import raises

# --------------------------------------------------------------------------- coerce_for_scoring


def _features() -> list[Feature]:
    return [
        Feature("x", "numeric", "x", 0.0, -1.0, 1.0),
        Feature("size cm", "numeric", "size_cm", 0.0, 0.0, 9.0),
        Feature("color", "categorical", "color", 0.0, categories=["blue", "red"]),
    ]


def test_coerce_types_and_extra_columns():
    raw = pd.DataFrame(
        {"id": ["a", "b", "c"], "color": ["red", " purple ", None], "x": ["1.5", "NA", " 2 "], "size cm": [1, 2, 3]},
        index=[10, 11, 12],
    )
    out = coerce_for_scoring(raw, _features(), source="new.csv")
    assert list(out.columns) == ["x", "size cm", "color"]
    assert list(out.index) == [10, 11, 12]
    assert out["x"].dtype == np.float64 and np.isnan(out["x"].iloc[1]) and out["x"].iloc[2] == 2.0
    assert out["size cm"].dtype == np.float64
    assert out["color"].tolist() == ["red", "purple", ""]  # unseen category passes


def test_coerce_missing_columns_named():
    raw = pd.DataFrame({"x": ["1"]})
    raises(r"new\.csv: missing column\(s\) 'size cm', 'color'", coerce_for_scoring, raw, _features(), source="new.csv")


def test_coerce_text_in_numeric_reports_lines():
    raw = pd.DataFrame({"x": ["1", "bad", "2", "worse"], "size cm": ["1"] * 4, "color": ["red"] * 4})
    msg = raises(r"column 'x' must be numeric but has 2 text values", coerce_for_scoring, raw, _features(),
                  source="new.csv", first_row=1000)
    assert "'bad' at line 1003" in msg and "'worse' at line 1005" in msg


def test_coerce_value_beyond_float32_is_refused():
    """A number beyond float32's range would reach the ONNX models as an infinity while the code
    forms compute with it: score refuses it (IEEE 754 binary32 largest value 3.4028235e38)."""
    raw = pd.DataFrame({"x": ["1", "1e39"], "size cm": ["1", "2"], "color": ["red", "red"]})
    raises(r"column 'x' has values beyond ±3\.4e38 \(line 3\)", coerce_for_scoring, raw, _features(), source="new.csv")
    raw.loc[1, "x"] = "1e30"
    assert coerce_for_scoring(raw, _features(), source="new.csv")["x"].iloc[1] == 1e30


def test_coerce_names_the_decimal_comma_option():
    """New rows saved with decimal commas, or a semicolon file read as comma-separated: the error
    says which option reads them."""
    raw = pd.DataFrame({"x": ["0,5", "1"], "size cm": ["2", "3"], "color": ["red", "blue"]})
    raises(r"column 'x' holds numbers written with a decimal comma \('0,5' at line 2\).*--decimal-comma",
           coerce_for_scoring, raw, _features(), source="new.csv")
    # thousands separators and percentages in new rows: saved plain, not read as something else
    raises(r"column 'x' holds numbers with commas between their thousands \('1,234,500' at line 2\)",
           coerce_for_scoring, raw.assign(x=["1,234,500", "7"]), _features(), source="new.csv")
    raises(r"column 'x' holds percentages \('12%' at line 2\): save them as plain numbers",
           coerce_for_scoring, raw.assign(x=["12%", "7"]), _features(), source="new.csv")
    raises(r"column 'x' must be numeric but has 1 text value .*if they mean missing",
           coerce_for_scoring, raw.assign(x=["-", "7"]), _features(), source="new.csv")
    glued = pd.DataFrame({"x;size cm;color": ["0,5;2;red"]})
    raises(r"missing column\(s\).*the header holds semicolons.*--decimal-comma",
           coerce_for_scoring, glued, _features(), source="new.csv")
