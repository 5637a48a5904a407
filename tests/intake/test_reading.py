"""Intake, reading: CSV/TSV/Parquet whole or in chunks, column selection, and every file error."""
from __future__ import annotations

import pandas as pd
import pytest

from pocketforest.errors import InputError
from pocketforest.intake import iter_table, load, read_table

from intake_data import csv_text, frame, raises, write

def test_csv_missing_tokens_and_whitespace(tmp_path):
    text = "a , b,c\n 1 ,NA, x \n2,N/A,null\n3, ,None\n4,nan,NULL\n5,NaN,\n"
    df = read_table(write(tmp_path, "d.csv", text))
    assert list(df.columns) == ["a", "b", "c"]
    assert df["a"].tolist() == ["1", "2", "3", "4", "5"]
    assert df["b"].isna().all()
    assert df["c"].iloc[0] == "x" and df["c"].iloc[1:].isna().all()


def test_bom_csv_tsv_and_parquet_agree(tmp_path):
    base = frame(45)
    bom = write(tmp_path, "bom.CSV", b"\xef\xbb\xbf" + csv_text(base).encode())
    tsv = write(tmp_path, "d.tsv", csv_text(base, "\t"))
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
        ("d.xls", "a,b\n1,2\n", r"'\.xls'.*\.csv, \.tsv, \.parquet or \.xlsx"),
        ("d.xlsx", "a,b\n1,2\n", r"d\.xlsx: cannot be read as an Excel workbook.*save it again"),
        ("d.csv", b"", r"d\.csv: is empty"),
        ("d.csv", "a,b\n", r"d\.csv: has a header but no data rows"),
        ("d.csv", b"a,b\n1,caf\xe9\n", r"d\.csv: is not UTF-8.*re-save it with UTF-8"),
        ("d.parquet", b"PAR1 this is not really parquet", r"d\.parquet: cannot be read as Parquet"),
        ("d.csv", "a,b,a\n1,2,3\n", r"duplicate column names 'a'"),
        ("d.csv", "a, ,b,\n1,2,3,4\n", r"column positions 2, 4 .*no name"),
        ("d.csv", "a,b\n1,2\n3,4\n5,6,7\n", r"line 4 has 3 fields but the header has 2"),
        ("d.csv", "a,b\n1,2,3\n4,5\n", r"line 2 has 3 fields but the header has 2"),
        ("d.csv", "a;b;c\n1;2;3\n", r"semicolon-separated.*--decimal-comma.*comma-separated"),
        ("d.csv", "a;b, c;d\n1,5;2,0;3\n", r"line 2 has 3 fields but the header has 2.*--decimal-comma"),
        ("d.csv", "a\tb\n1\t2\n", r"tab-separated.*rename it to \.tsv"),
        ("d.tsv", "a,b\n1,2\n", r"comma-separated.*rename it to \.csv"),
    ],
)
def test_read_errors(tmp_path, name, content, match):
    path = write(tmp_path, name, content)
    msg = raises(match, read_table, path)
    assert name in msg


@pytest.mark.parametrize("header, value", [(";", "1.5"), ("dose; mg", "2.5"), ("a,", "x"), ("x|y", "3")])
def test_one_column_named_with_another_delimiter_is_read(tmp_path, header, value):
    """A single column may be called ';' or 'dose; mg': only a header that another delimiter
    splits into names over data it splits too is refused (found by tests/test_fuzz.py)."""
    import csv as _csv
    path = tmp_path / ("d.tsv" if header == "a," else "d.csv")
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = _csv.writer(fh, delimiter="\t" if header == "a," else ",")
        w.writerows([[header], [value], [value]])
    df = read_table(path)
    assert list(df.columns) == [header.strip()] and list(df.iloc[:, 0]) == [value, value]


def test_truncated_parquet(tmp_path):
    good = tmp_path / "good.parquet"
    frame().to_parquet(good)
    bad = write(tmp_path, "cut.parquet", good.read_bytes()[: good.stat().st_size // 2])
    raises(r"cut\.parquet: cannot be read as Parquet.*truncated or corrupt", read_table, bad)


def test_missing_file_and_directory(tmp_path):
    raises(r"nope\.csv: file not found", read_table, tmp_path / "nope.csv")
    folder = tmp_path / "dir.csv"
    folder.mkdir()
    raises(r"dir\.csv: is a directory", read_table, folder)


def test_iter_table_chunks(tmp_path):
    base = frame(25)
    path = write(tmp_path, "d.csv", csv_text(base))
    chunks = list(iter_table(path, chunksize=10))
    assert [first for first, _ in chunks] == [0, 10, 20]
    assert all(list(c.index) == list(range(len(c))) for _, c in chunks)
    assert pd.concat([c for _, c in chunks], ignore_index=True)["x"].tolist() == base["x"].tolist()
    pq = tmp_path / "d.parquet"
    base.to_parquet(pq)
    assert sum(len(c) for _, c in iter_table(pq, chunksize=7)) == 25


def test_read_selected_columns(tmp_path):
    base = frame(25)
    csv_path = write(tmp_path, "d.csv", csv_text(base))
    pq = tmp_path / "d.parquet"
    base.to_parquet(pq)
    for path in (csv_path, pq):
        df = read_table(path, columns=["y", "x", "absent"])
        assert list(df.columns) == ["x", "y"] and len(df) == 25  # file order, absent skipped
        assert read_table(path, columns=["absent"]).shape == (25, 0)
        assert [c.shape for _, c in iter_table(path, chunksize=20, columns=["color"])] == [(20, 1), (5, 1)]


def test_unclosed_quote_is_an_input_error(tmp_path):
    path = write(tmp_path, "q.csv", 'a,b\n1,"open\n2,3\n')
    with pytest.raises(InputError, match=r"q\.csv: cannot be parsed.*check quoting"):
        read_table(path)


def test_decimal_comma_file_reads_like_the_decimal_point_file(tmp_path):
    """A table saved where the comma is the decimal mark: semicolon-separated .csv (or .tsv) with
    numbers written 6,8 (the convention R's read.csv2 reads, from memory; common practice for
    spreadsheets in such locales). Read with decimal_comma it gives the same typed table as the plain file."""
    base = frame(45).assign(x=lambda d: d["x"].astype(float) / 8 - 2, y=lambda d: d["y"].astype(float))
    plain = write(tmp_path, "plain.csv", csv_text(base))
    semi = tmp_path / "semi.csv"
    base.to_csv(semi, sep=";", decimal=",", index=False)
    tsv = tmp_path / "semi.tsv"
    base.to_csv(tsv, sep="\t", decimal=",", index=False)
    assert "," in semi.read_text().splitlines()[1]     # the numbers really carry decimal commas
    want = load(plain, "y")
    for path in (semi, tsv):
        got = load(path, "y", decimal_comma=True)
        pd.testing.assert_frame_equal(got.data, want.data)
        assert [f.to_dict() for f in got.features] == [f.to_dict() for f in want.features]
    raises(r"looks comma-separated.*drop --decimal-comma", read_table, plain, decimal_comma=True)
    chunks = [c for _, c in iter_table(semi, chunksize=10, decimal_comma=True)]
    pd.testing.assert_frame_equal(pd.concat(chunks, ignore_index=True), read_table(semi, decimal_comma=True))


def test_decimal_numbers_as_text_read_without_the_option_are_an_error(tmp_path):
    """Read as text, 6,8 would silently make a numeric column a category: one error naming the option."""
    base = frame(45).assign(x=[0.5, 1.5, 2.5] * 15)   # y stays text with points
    tsv = tmp_path / "semi.tsv"
    base.to_csv(tsv, sep="\t", decimal=",", index=False)
    msg = raises(r"column 'x' holds numbers written with a decimal comma .*--decimal-comma.*--categorical x", load, tsv, "y")
    assert "line 2" in msg
    # asked to be categories, they stay categories
    kept = load(tsv, "y", categorical=["x"])
    assert next(f for f in kept.features if f.name == "x").kind == "categorical"
    assert sorted(kept.data["x"].unique()) == ["0,5", "1,5", "2,5"]


def test_decimal_points_rewrites_only_whole_numbers():
    from pocketforest.intake.values import decimal_points
    s = pd.Series(["6,8", "-0,25", ",5", "1,5E-3", "12", "1.234,5", "3,5 mg", "a,b", "1,2,3", None], dtype=object)
    got = decimal_points(s).tolist()
    assert got[:5] == ["6.8", "-0.25", ".5", "1.5E-3", "12"]
    assert got[5:9] == ["1.234,5", "3,5 mg", "a,b", "1,2,3"] and got[9] is None


def test_commas_in_numbers_are_named_by_how_they_read():
    """Which of the three readings :func:`numbers_as_text` gives (constructed values)."""
    from pocketforest.intake.values import numbers_as_text, parse_numbers

    def kind(values):
        s = pd.Series(values, dtype=object)
        return numbers_as_text(s, parse_numbers(s)[1])
    assert kind(["6,8", "12,25", "3"]) == "decimal"
    assert kind(["23,453", "1,234,567", "-1,234.5", "12"]) == "thousands"
    assert kind(["23,453", "9,876", "120"]) == "either"          # one comma before three digits
    assert kind(["6,8", "23,453"]) == "decimal"                  # 6,8 cannot be a thousands group
    assert kind(["6,8", "1,234,567"]) is None and kind(["a,b", "1,5"]) is None and kind(["1", "2"]) is None


def test_thousands_separators_are_one_error_saying_to_drop_them(tmp_path):
    # Spreadsheets write large amounts as "23,453" (quoted in a comma-separated file; common practice).
    # Before this, the message named only --decimal-comma, which would read 23,453 as 23.453.
    lines = csv_text(frame(45)).splitlines()

    def with_income(cells: list[str], name: str):
        rows = [lines[0] + ",income"] + [f'{r},"{c}"' for r, c in zip(lines[1:], cells)]
        return write(tmp_path, name, "\n".join(rows) + "\n")
    msg = raises(r"column 'income' holds numbers with a comma before three digits .*save them without it "
                 r"\(23453, not 23,453\).*--decimal-comma.*--categorical income",
                 load, with_income([f"{20 + i},{i:03d}" for i in range(45)], "amounts.csv"), "y")
    assert "line 2" in msg
    msg = raises(r"column 'income' holds numbers with commas between their thousands",
                 load, with_income([f"1,{i:03d},500" for i in range(45)], "big.csv"), "y")
    assert "--decimal-comma" not in msg


def test_missing_written_another_way_gets_a_hint_naming_the_missing_texts(tmp_path):
    base = frame(45).assign(x=[str(v) for v in range(45)])
    base.loc[[3, 9], "x"] = "n/a"
    msg = raises(r"column 'x' is numeric but has 2 text values .*if they mean missing, leave those cells empty "
                 r"or write NA \(the texts read as missing: N/A, NA", load, write(tmp_path, "m.csv", csv_text(base)), "y")
    base.loc[[3, 9], "x"] = "seven"
    msg = raises(r"column 'x' is numeric but has 2 text values", load, write(tmp_path, "t.csv", csv_text(base)), "y")
    assert "mean missing" not in msg


def test_percentages_are_one_error_saying_to_save_plain_numbers(tmp_path):
    base = frame(45).assign(share=[f"{i % 9 * 5}%" for i in range(45)])
    msg = raises(r"column 'share' holds percentages \('0%' at line 2.*save them as plain numbers \(12 or 0\.12, "
                 r"not 12%\), or --categorical share", load, write(tmp_path, "p.csv", csv_text(base)), "y")
    assert "--decimal-comma" not in msg
    kept = load(write(tmp_path, "p.csv", csv_text(base)), "y", categorical=["share"])
    assert next(f for f in kept.features if f.name == "share").kind == "categorical"


@pytest.mark.parametrize("dates", [
    [f"2024-{1 + i % 9:02d}-{13 + i % 9:02d}" for i in range(45)],          # ISO 8601
    [f"{13 + i % 9:02d}/{1 + i % 9:02d}/2024" for i in range(45)],          # day first, as many spreadsheets save
])
def test_a_date_column_is_kept_as_categories_with_a_note_saying_so(tmp_path, dates):
    table = load(write(tmp_path, "d.csv", csv_text(frame(45).assign(joined=dates))), "y")
    assert next(f for f in table.features if f.name == "joined").kind == "categorical"
    assert any("column 'joined' holds dates" in n and "days since a start date" in n for n in table.notes)
    # asked to be categories: no note; ordinary words: no note
    asked = load(write(tmp_path, "d.csv", csv_text(frame(45).assign(joined=dates))), "y", categorical=["joined"])
    assert not any("holds dates" in n for n in asked.notes)
    plain = load(write(tmp_path, "w.csv", csv_text(frame(45))), "y")
    assert not any("holds dates" in n for n in plain.notes)


def test_labels_differing_only_in_case_or_spacing_are_kept_apart_with_a_note(tmp_path):
    # invented: 50 "Yes" / 40 "no" answers and 6 typed " yes"; a column with "part shade" also
    # typed "Part  shade" (capital, two spaces)
    df = frame(96)
    df["answer"] = ["Yes"] * 50 + ["no"] * 40 + [" yes"] * 6
    df["shade"] = ["part shade"] * 60 + ["full"] * 30 + ["Part  shade"] * 6
    table = load(write(tmp_path, "s.csv", csv_text(df.drop(columns="y"))), "answer")
    assert set(table.classes) == {"no", "Yes", "yes"}
    note = next(n for n in table.notes if n.startswith("target 'answer' has classes"))
    assert "'Yes' (50 rows) and 'yes' (6 rows)" in note and "kept as separate classes" in note
    note = next(n for n in table.notes if n.startswith("column 'shade' has levels"))
    assert "'part shade' (60 rows) and 'Part  shade' (6 rows)" in note
    assert sorted(next(f for f in table.features if f.name == "shade").categories) == ["Part  shade", "full",
                                                                                      "part shade"]
    # distinct words and one spelling each: no note
    plain = load(write(tmp_path, "w.csv", csv_text(frame(45))), "y")
    assert not any("letter case" in n for n in plain.notes)


def _workbook(path, sheets: dict[str, list[list]]):
    """An .xlsx file written cell by cell with openpyxl (rows as given; None is an empty cell)."""
    import openpyxl
    book = openpyxl.Workbook()
    book.remove(book.active)
    for name, rows in sheets.items():
        sheet = book.create_sheet(name)
        for row in rows:
            sheet.append(row)
    book.save(path)
    return path


def test_a_workbooks_first_sheet_reads_like_the_csv_saved_from_it(tmp_path):
    base = frame(45)
    typed = [[float(x), c, float(y)] for x, c, y in base.itertuples(index=False)]
    book = _workbook(tmp_path / "d.xlsx", {"trial": [["x", "color", "y"], *typed],
                                            "readme": [["notes written by hand"]]})
    from_csv = load(write(tmp_path, "d.csv", csv_text(base)), "y")
    from_book = load(book, "y")
    pd.testing.assert_frame_equal(from_book.data, from_csv.data)
    assert [f.to_dict() for f in from_book.features] == [f.to_dict() for f in from_csv.features]
    assert from_book.notes[0] == ("read sheet 'trial', the first of the workbook's 2 sheets: move the table's "
                                  "sheet to the front to read another")
    assert not any("sheet" in n for n in from_csv.notes)
    # chunks for scoring: the same rows, and only the asked columns
    chunks = list(iter_table(book, chunksize=20, columns=["color", "x"]))
    assert [first for first, _ in chunks] == [0, 20, 40]
    whole = pd.concat([c for _, c in chunks], ignore_index=True)
    pd.testing.assert_frame_equal(whole, read_table(book)[["x", "color"]])


def test_workbook_cells_become_the_text_a_csv_would_hold(tmp_path):
    import datetime as dt
    book = _workbook(tmp_path / "c.xlsx", {"s": [
        [None, None],                                     # an empty row above the header is skipped
        ["when", "value", "flag", "note", None],          # the used range runs one column past the table
        [dt.datetime(2024, 1, 13), 6.02, True, "n/a", None],
        [dt.datetime(2024, 1, 14, 10, 30), 7, False, "  fine ", None],
        [None, None, None, None, None],                   # an empty row inside: skipped, as in a CSV
        [dt.date(2024, 1, 15), 1e-7, None, "NA", None],
    ]})
    df = read_table(book)
    assert list(df.columns) == ["when", "value", "flag", "note"]
    assert df["when"].tolist() == ["2024-01-13", "2024-01-14 10:30:00", "2024-01-15"]
    assert df["value"].tolist() == ["6.02", "7", "1e-07"]
    assert df["flag"].tolist()[:2] == ["TRUE", "FALSE"] and pd.isna(df["flag"].iloc[2])
    # "n/a" is text, as in a CSV (the number check names it); "NA" is missing; spaces are stripped
    assert df["note"].tolist()[:2] == ["n/a", "fine"] and pd.isna(df["note"].iloc[2])


@pytest.mark.parametrize("sheet, match", [
    ([["a", None, "y"], [1, 5, 2]], r"column B of sheet 's' has values but no name"),
    ([["a", "a", "y"], [1, 5, 2]], r"duplicate column names 'a'"),
    ([["a", "y"]], r"sheet 's' has a header but no data rows"),
    ([[None]], r"sheet 's' is empty"),
])
def test_workbook_mistakes_are_one_line_each(tmp_path, sheet, match):
    book = _workbook(tmp_path / "m.xlsx", {"s": sheet})
    raises(match, read_table, book)


def test_a_workbook_refuses_the_options_that_split_files(tmp_path):
    from pocketforest.intake.pieces import plan_pieces
    from pocketforest.sample import draw
    book = _workbook(tmp_path / "w.xlsx", {"s": [["x", "y"], [1, 2], [2, 3]]})
    raises(r"an Excel workbook stores its numbers as numbers", read_table, book, decimal_comma=True)
    raises(r"--engine dask reads \.csv, \.tsv and \.parquet", plan_pieces, [book], ["x"], [])
    raises(r"--sample reads \.csv", draw, str(book), "y", 1, 0)
