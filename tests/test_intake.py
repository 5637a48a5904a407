"""Intake: reading files, typing columns, choosing the task and every bad-input message."""
from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest

from pocketforest.errors import InputError
from pocketforest.intake import (
    Feature,
    category_text,
    coerce_for_scoring,
    iter_table,
    load,
    prepare,
    read_table,
)

N = 60


def _frame(n: int = N, seed: int = 0) -> pd.DataFrame:
    """A small mixed table as text, like read_table returns for a CSV."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n).round(3)
    return pd.DataFrame(
        {
            "x": [str(v) for v in x],
            "color": [["red", "green", "blue"][i % 3] for i in range(n)],
            "y": [str(round(2 * v + rng.normal(), 3)) for v in x],
        }
    )


def _write(tmp_path, name: str, text: str | bytes):
    path = tmp_path / name
    if isinstance(text, bytes):
        path.write_bytes(text)
    else:
        path.write_text(text, encoding="utf-8")
    return path


def _csv_text(df: pd.DataFrame, sep: str = ",") -> str:
    return df.to_csv(index=False, sep=sep, lineterminator="\n")


def _raises(match: str, func, *args, **kwargs) -> str:
    with pytest.raises(InputError) as info:
        func(*args, **kwargs)
    msg = str(info.value)
    assert "\n" not in msg, msg
    assert re.search(match, msg), msg
    return msg


# --------------------------------------------------------------------------- read_table


def test_csv_missing_tokens_and_whitespace(tmp_path):
    text = "a , b,c\n 1 ,NA, x \n2,N/A,null\n3, ,None\n4,nan,NULL\n5,NaN,\n"
    df = read_table(_write(tmp_path, "d.csv", text))
    assert list(df.columns) == ["a", "b", "c"]
    assert df["a"].tolist() == ["1", "2", "3", "4", "5"]
    assert df["b"].isna().all()
    assert df["c"].iloc[0] == "x" and df["c"].iloc[1:].isna().all()


def test_bom_csv_tsv_and_parquet_agree(tmp_path):
    base = _frame(45)
    bom = _write(tmp_path, "bom.CSV", b"\xef\xbb\xbf" + _csv_text(base).encode())
    tsv = _write(tmp_path, "d.tsv", _csv_text(base, "\t"))
    pq = tmp_path / "d.parquet"
    native = base.assign(x=base["x"].astype(float), y=base["y"].astype(float))
    native.to_parquet(pq)
    from_bom = read_table(bom)
    assert list(from_bom.columns) == ["x", "color", "y"]  # no BOM glued to the first name
    tables = [load(p, "y") for p in (bom, tsv, pq)]
    for t in tables[1:]:
        pd.testing.assert_frame_equal(t.data, tables[0].data)
        assert [f.to_dict() for f in t.features] == [f.to_dict() for f in tables[0].features]


@pytest.mark.parametrize(
    "name, content, match",
    [
        ("d.xlsx", "a,b\n1,2\n", r"'\.xlsx'.*\.csv, \.tsv or \.parquet"),
        ("d.csv", b"", r"d\.csv: is empty"),
        ("d.csv", "a,b\n", r"d\.csv: has a header but no data rows"),
        ("d.csv", b"a,b\n1,caf\xe9\n", r"d\.csv: is not UTF-8.*re-save it with UTF-8"),
        ("d.parquet", b"PAR1 this is not really parquet", r"d\.parquet: cannot be read as Parquet"),
        ("d.csv", "a,b,a\n1,2,3\n", r"duplicate column names 'a'"),
        ("d.csv", "a, ,b,\n1,2,3,4\n", r"column positions 2, 4 .*no name"),
        ("d.csv", "a,b\n1,2\n3,4\n5,6,7\n", r"line 4 has 3 fields but the header has 2"),
        ("d.csv", "a,b\n1,2,3\n4,5\n", r"line 2 has 3 fields but the header has 2"),
        ("d.csv", "a;b;c\n1;2;3\n", r"semicolon-separated.*comma-separated"),
        ("d.csv", "a\tb\n1\t2\n", r"tab-separated.*rename it to \.tsv"),
        ("d.tsv", "a,b\n1,2\n", r"comma-separated.*rename it to \.csv"),
    ],
)
def test_read_errors(tmp_path, name, content, match):
    path = _write(tmp_path, name, content)
    msg = _raises(match, read_table, path)
    assert name in msg


def test_truncated_parquet(tmp_path):
    good = tmp_path / "good.parquet"
    _frame().to_parquet(good)
    bad = _write(tmp_path, "cut.parquet", good.read_bytes()[: good.stat().st_size // 2])
    _raises(r"cut\.parquet: cannot be read as Parquet.*truncated or corrupt", read_table, bad)


def test_missing_file_and_directory(tmp_path):
    _raises(r"nope\.csv: file not found", read_table, tmp_path / "nope.csv")
    folder = tmp_path / "dir.csv"
    folder.mkdir()
    _raises(r"dir\.csv: is a directory", read_table, folder)


def test_iter_table_chunks(tmp_path):
    base = _frame(25)
    path = _write(tmp_path, "d.csv", _csv_text(base))
    chunks = list(iter_table(path, chunksize=10))
    assert [first for first, _ in chunks] == [0, 10, 20]
    assert all(list(c.index) == list(range(len(c))) for _, c in chunks)
    assert pd.concat([c for _, c in chunks], ignore_index=True)["x"].tolist() == base["x"].tolist()
    pq = tmp_path / "d.parquet"
    base.to_parquet(pq)
    assert sum(len(c) for _, c in iter_table(pq, chunksize=7)) == 25


# --------------------------------------------------------------------------- task and target


def test_regression_and_feature_typing():
    t = prepare(_frame(), "y", source="d.csv")
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
    df = _frame(50)
    df.loc[[3, 7, 9], "y"] = np.nan
    df.loc[0, "x"] = np.nan
    t = prepare(df, "y")
    assert t.rows_dropped_missing_target == 3
    assert len(t.data) == 47 and list(t.data.index) == list(range(47))
    assert any("3 row" in n for n in t.notes)
    assert t.features[0].missing == pytest.approx(1 / 47)  # 1 - mean of booleans: one rounding


def test_auto_task_detection():
    df = _frame()
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
    df = _frame()
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
    df = _frame()
    df["y"] = y
    msg = _raises(match, prepare, df, "y", source="d.csv", **kwargs)
    assert msg.startswith("d.csv: ")


def test_unknown_task():
    _raises(r"unknown task 'cluster'", prepare, _frame(), "y", task="cluster")


def test_target_absent_suggests_close_names():
    df = _frame().rename(columns={"y": "Price"})
    _raises(r"no target column 'price'; did you mean 'Price'", prepare, df, "price")
    _raises(r"no target column 'prise'.*'Price'", prepare, df, "prise")


def test_flag_names_checked():
    df = _frame()
    _raises(r"--ignore names column 'colour'.*did you mean 'color'", prepare, df, "y", ignore=["colour"])
    _raises(r"--categorical names column 'X'.*'x'", prepare, df, "y", categorical=["X"])
    _raises(r"'y' is the target.*--ignore", prepare, df, "y", ignore=["y"])
    _raises(r"'y' is the target.*--categorical", prepare, df, "y", categorical=["y"])


def test_too_few_rows():
    _raises(r"too few rows \(30\) for the discovery/confirmation/test splits: need at least 40", prepare, _frame(30), "y")
    assert len(prepare(_frame(30), "y", min_rows=20).data) == 30


# --------------------------------------------------------------------------- feature columns


def test_mostly_numeric_column_with_text_is_an_error():
    df = _frame()
    df.loc[10, "x"] = "abc"
    df.loc[20, "x"] = "n.a."
    msg = _raises(r"column 'x' is numeric but has 2 text values", prepare, df, "y", source="d.csv")
    assert "'abc' at line 12" in msg and "'n.a.' at line 22" in msg
    assert "--categorical x" in msg
    t = prepare(df, "y", categorical=["x"])
    assert t.features[0].kind == "categorical"


def test_infinite_feature_value():
    df = _frame()
    df.loc[4, "x"] = "-Infinity"
    _raises(r"column 'x' has infinite values \(line 6\)", prepare, df, "y")


def test_drops_ignored_constant_missing_and_id_like():
    df = _frame()
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
    df = _frame()[["x", "y"]]
    _raises(r"no feature columns left.*'x' ignored", prepare, df, "y", ignore=["x"])


def test_too_many_categories():
    n = 600
    df = pd.DataFrame({"x": [f"v{i % 300}" for i in range(n)], "y": [str(i % 7 + 0.5) for i in range(n)]})
    _raises(r"column 'x' has 300 distinct values.*--ignore x", prepare, df, "y")


def test_categorical_numbers_as_text():
    df = _frame()
    df["grade"] = [[1.0, 2.0, np.nan][i % 3] for i in range(N)]
    df["zip"] = [["01234", "1.50", "7"][i % 3] for i in range(N)]
    t = prepare(df, "y", categorical=["grade", "zip"])
    grade = next(f for f in t.features if f.name == "grade")
    assert grade.categories == ["1", "2"] and grade.missing == pytest.approx(1 / 3)  # count ratio: one rounding
    assert set(t.data["grade"]) == {"1", "2", ""}
    assert next(f for f in t.features if f.name == "zip").categories == ["01234", "1.5", "7"]
    assert [category_text(v) for v in (3, 3.0, 2.5, "4.0", "1e3", True, None, "0042")] == [
        "3", "3", "2.5", "4", "1000", "True", "", "0042"
    ]


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
    _raises(r"new\.csv: missing column\(s\) 'size cm', 'color'", coerce_for_scoring, raw, _features(), source="new.csv")


def test_coerce_text_in_numeric_reports_lines():
    raw = pd.DataFrame({"x": ["1", "bad", "2", "worse"], "size cm": ["1"] * 4, "color": ["red"] * 4})
    msg = _raises(r"column 'x' must be numeric but has 2 text values", coerce_for_scoring, raw, _features(),
                  source="new.csv", first_row=1000)
    assert "'bad' at line 1003" in msg and "'worse' at line 1005" in msg


def test_read_selected_columns(tmp_path):
    base = _frame(25)
    csv_path = _write(tmp_path, "d.csv", _csv_text(base))
    pq = tmp_path / "d.parquet"
    base.to_parquet(pq)
    for path in (csv_path, pq):
        df = read_table(path, columns=["y", "x", "absent"])
        assert list(df.columns) == ["x", "y"] and len(df) == 25  # file order, absent skipped
        assert read_table(path, columns=["absent"]).shape == (25, 0)
        assert [c.shape for _, c in iter_table(path, chunksize=20, columns=["color"])] == [(20, 1), (5, 1)]


def test_unclosed_quote_is_an_input_error(tmp_path):
    path = _write(tmp_path, "q.csv", 'a,b\n1,"open\n2,3\n')
    with pytest.raises(InputError, match=r"q\.csv: cannot be parsed.*check quoting"):
        read_table(path)
