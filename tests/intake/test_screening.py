"""Intake, preparing and screening: the target and task, feature typing and dropping, ONNX input names."""
from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest

from pocketforest.intake import load, prepare

from intake_data import N, frame, raises

# --------------------------------------------------------------------------- task and target


def test_regression_and_feature_typing():
    t = prepare(frame(), "y", source="d.csv")
    assert t.task == "regression" and t.classes is None
    assert t.data["y"].dtype == np.float64
    assert t.data["x"].dtype == np.float64
    assert t.data["color"].dtype == object and isinstance(t.data["color"].iloc[0], str)
    assert [f.name for f in t.features] == ["x", "color"]
    x, color = t.features
    assert x.kind == "numeric" and x.min == t.data["x"].min() and x.max == t.data["x"].max()
    assert color.kind == "categorical" and color.categories == ["blue", "green", "red"]
    assert x.to_dict().keys() == {"name", "kind", "onnx_input", "missing", "min", "max"}
    assert color.to_dict().keys() == {"name", "kind", "onnx_input", "missing", "categories"}
    assert list(t.data.columns) == ["x", "color", "y"]


def test_missing_target_rows_dropped_and_counted():
    df = frame(50)
    df.loc[[3, 7, 9], "y"] = np.nan
    df.loc[0, "x"] = np.nan
    t = prepare(df, "y")
    assert t.rows_dropped_missing_target == 3
    assert len(t.data) == 47 and list(t.data.index) == list(range(47))
    assert any("3 row" in n for n in t.notes)
    assert t.features[0].missing == pytest.approx(1 / 47)  # 1 - mean of booleans: one rounding


def test_auto_task_detection():
    df = frame()
    df["y"] = [["yes", "no"][i % 2] for i in range(N)]
    t = prepare(df, "y")
    assert t.task == "classification" and t.classes == ["no", "yes"]
    df["y"] = [str(i % 2) for i in range(N)]
    assert prepare(df, "y").task == "classification"
    df["y"] = [bool(i % 2) for i in range(N)]
    t = prepare(df, "y")
    assert t.task == "classification" and t.classes == ["False", "True"]
    df["y"] = [str(i % 5) for i in range(N)]
    t = prepare(df, "y")
    assert t.task == "regression"
    assert any("pass --task classification" in n for n in t.notes)


def test_forced_classification_on_numbers_sorts_numerically():
    df = frame()
    df["y"] = [[2.0, 10.0, 1.0][i % 3] for i in range(N)]
    t = prepare(df, "y", task="classification")
    assert t.classes == ["1", "2", "10"]
    assert set(t.data["y"]) == {"1", "2", "10"}


@pytest.mark.parametrize(
    "y, kwargs, match",
    [
        ([np.nan] * N, {}, r"target column 'y' is empty in every row"),
        (["3.5"] * N, {}, r"target 'y' has the same value in every row"),
        (["a"] * N, {}, r"target 'y' has only one class \('a'\)"),
        (["a"] * (N - 2) + ["b", "b"], {}, r"class 'b' \(2 rows\).*at least 3"),
        (["a", "b"] * (N // 2), {"task": "regression"}, r"--task regression needs a numeric target.*'y'"),
        ([str(i) for i in range(N - 1)] + ["oops"], {}, r"target 'y' is numeric but has 1 text value \('oops' at line 61\)"),
        ([str(i) for i in range(N - 1)] + ["inf"], {}, r"column 'y' has infinite values \(line 61\)"),
    ],
)
def test_target_errors(y, kwargs, match):
    df = frame()
    df["y"] = y
    msg = raises(match, prepare, df, "y", source="d.csv", **kwargs)
    assert msg.startswith("d.csv: ")


def test_unknown_task():
    raises(r"unknown task 'cluster'", prepare, frame(), "y", task="cluster")


def test_target_absent_suggests_close_names():
    df = frame().rename(columns={"y": "Price"})
    raises(r"no target column 'price'; did you mean 'Price'", prepare, df, "price")
    raises(r"no target column 'prise'.*'Price'", prepare, df, "prise")


def test_flag_names_checked():
    df = frame()
    raises(r"--ignore names column 'colour'.*did you mean 'color'", prepare, df, "y", ignore=["colour"])
    raises(r"--categorical names column 'X'.*'x'", prepare, df, "y", categorical=["X"])
    raises(r"'y' is the target.*--ignore", prepare, df, "y", ignore=["y"])
    raises(r"'y' is the target.*--categorical", prepare, df, "y", categorical=["y"])


def test_names_with_the_spaces_of_the_header_cell_are_found(tmp_path):
    """Header names are read without surrounding spaces, so a name given with the spaces the file
    shows still means that column (found by tests/test_fuzz.py)."""
    from intake_data import csv_text, write
    df = frame().rename(columns={"y": "y (kg) ", "x": " x", "color": "color "})
    path = write(tmp_path, "t.csv", csv_text(df))
    t = load(path, "y (kg) ", categorical=["color "], ignore=[" x"])
    assert t.target == "y (kg)" and [f.name for f in t.features] == ["color"]
    # a DataFrame keeps its names as they are, spaces included
    t = prepare(df, "y (kg) ", ignore=["color "])
    assert t.target == "y (kg) " and [f.name for f in t.features] == [" x"]


def test_too_few_rows():
    raises(r"too few rows \(30\) for the discovery/confirmation/test splits: need at least 40", prepare, frame(30), "y")
    assert len(prepare(frame(30), "y", min_rows=20).data) == 30


# --------------------------------------------------------------------------- feature columns


def test_mostly_numeric_column_with_text_is_an_error():
    df = frame()
    df.loc[10, "x"] = "abc"
    df.loc[20, "x"] = "n.a."
    msg = raises(r"column 'x' is numeric but has 2 text values", prepare, df, "y", source="d.csv")
    assert "'abc' at line 12" in msg and "'n.a.' at line 22" in msg
    assert "--categorical x" in msg
    t = prepare(df, "y", categorical=["x"])
    assert t.features[0].kind == "categorical"


def test_infinite_feature_value():
    df = frame()
    df.loc[4, "x"] = "-Infinity"
    raises(r"column 'x' has infinite values \(line 6\)", prepare, df, "y")


def test_feature_value_beyond_float32_is_refused():
    """The models take float32 inputs (largest 3.4028235e38, IEEE 754 binary32): 1e39 would reach
    them as an infinity, and scikit-learn refused it with a traceback (found by testing 1e39)."""
    df = frame()
    df.loc[7, "x"] = "-1e39"
    raises(r"column 'x' has values beyond ±3\.4e38 \(line 9\).*32-bit", prepare, df, "y")
    df.loc[7, "x"] = "3.4e38"        # just inside: accepted
    assert prepare(df, "y").features[0].name == "x"


def test_drops_ignored_constant_missing_and_id_like():
    df = frame()
    df.insert(0, "row", [str(i + 1) for i in range(N)])
    df["code"] = [f"C{i:04d}" for i in range(N)]
    df["same"] = "k"
    df["empty"] = np.nan
    df["skip"] = "1"
    t = prepare(df, "y", ignore=["skip"])
    assert t.dropped_columns == {
        "row": "id-like",
        "code": "id-like",
        "same": "constant",
        "empty": "all missing",
        "skip": "ignored",
    }
    assert [f.name for f in t.features] == ["x", "color"]
    assert sum("dropped column" in n for n in t.notes) == 5
    # a shuffled integer column is a real feature, not a row counter
    df["row"] = [str(v) for v in np.random.default_rng(1).permutation(N)]
    assert "row" in [f.name for f in prepare(df, "y").features]


def test_no_feature_left():
    df = frame()[["x", "y"]]
    raises(r"no feature columns left.*'x' ignored", prepare, df, "y", ignore=["x"])


def test_too_many_categories():
    n = 600
    df = pd.DataFrame({"x": [f"v{i % 300}" for i in range(n)], "y": [str(i % 7 + 0.5) for i in range(n)]})
    raises(r"column 'x' has 300 distinct values.*--ignore x", prepare, df, "y")


def test_categorical_numbers_as_text():
    df = frame()
    df["grade"] = [[1.0, 2.0, np.nan][i % 3] for i in range(N)]
    df["zip"] = [["01234", "1.50", "7"][i % 3] for i in range(N)]
    t = prepare(df, "y", categorical=["grade", "zip"])
    grade = next(f for f in t.features if f.name == "grade")
    assert grade.categories == ["1", "2"] and grade.missing == pytest.approx(1 / 3)  # count ratio: one rounding
    assert set(t.data["grade"]) == {"1", "2", ""}
    assert next(f for f in t.features if f.name == "zip").categories == ["01234", "1.5", "7"]


def test_onnx_input_sanitizing():
    names = ["ok_name", "two words", "it's", '"q"', "9lives", "größe", "a-b", "a_b", "a.b", "label", "%"]
    rng = np.random.default_rng(2)
    df = pd.DataFrame({n: rng.normal(size=N).round(3).astype(str) for n in names})
    df["y"] = rng.normal(size=N).round(3).astype(str)
    t = prepare(df, "y")
    got = {f.name: f.onnx_input for f in t.features}
    assert got["ok_name"] == "ok_name"
    assert got["two words"] == "two_words"
    assert got["it's"] == "it_s"
    assert got['"q"'] == "_q_"
    assert got["9lives"] == "c_9lives"
    assert got["größe"] == "gr__e"
    assert got["a_b"] == "a_b"  # a real name keeps itself ...
    assert got["a-b"] == "a_b_2" and got["a.b"] == "a_b_3"  # ... and sanitized ones step aside
    assert got["label"] == "label_2"  # would clash with the ONNX output 'label'
    inputs = list(got.values())
    assert len(set(inputs)) == len(inputs)
    assert all(re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", i) for i in inputs)


def test_parquet_native_types(tmp_path):
    rng = np.random.default_rng(3)
    df = pd.DataFrame(
        {
            "n": rng.integers(0, 50, N),
            "f": rng.normal(size=N),
            "flag": rng.integers(0, 2, N).astype(bool),
            "cat": pd.Categorical([["a", "b"][i % 2] for i in range(N)]),
            "y": rng.normal(size=N),
        }
    )
    df.loc[5, "f"] = np.nan
    path = tmp_path / "d.parquet"
    df.to_parquet(path)
    t = load(path, "y")
    kinds = {f.name: f.kind for f in t.features}
    assert kinds == {"n": "numeric", "f": "numeric", "flag": "categorical", "cat": "categorical"}
    assert t.features[1].missing == pytest.approx(1 / N)  # count ratio: one rounding
    assert set(t.data["flag"]) <= {"True", "False"}
