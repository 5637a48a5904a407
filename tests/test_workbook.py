"""equation.xlsx and the one-cell formulas, recalculated by LibreOffice Calc (headless).

The workbooks are written with openpyxl, recalculated and saved again by LibreOffice, and read
back with openpyxl: the computed predictions must equal ``EquationFit.predict``. Text from the
data must stay text (OWASP, "CSV Injection": a cell starting with =, +, - or @ is read as a
formula by spreadsheet programs): category values and names such as ``=HYPERLINK(...)`` are
stored as text cells and compared by cell reference, never placed inside a formula.
All workbooks of this module go through one LibreOffice start.
"""
from __future__ import annotations

import shutil

import numpy as np
import pandas as pd
import pytest
from openpyxl import load_workbook

from pocketforest.scoring import engines, sheets
from pocketforest.equation import fit_equation
from pocketforest.export.workbook import equation_workbook, xl_string
from pocketforest.export.text import spreadsheet_text
from pocketforest.intake import prepare
from pocketforest.terms import Term

from test_exports_terms import _fit, _fresh_rows

needs_lo = pytest.mark.skipif(shutil.which("soffice") is None, reason="LibreOffice (soffice) is not installed")

ALL_KINDS = [Term("linear", ["x1"]), Term("quadratic", ["x1"], {"centre": 0.0}),
             Term("linear", ["x2"]), Term("hinge", ["x2"], {"knot": 0.1, "direction": "above"}),
             Term("hinge", ["x2"], {"knot": -0.3, "direction": "below"}),
             Term("log", ["pos"], {"floor": 1.0}), Term("categorical", ["colour"]), Term("categorical", ["site"]),
             Term("interaction", ["x2", "colour"], {"centres": {"x2": 0.0}}),
             Term("interaction", ["x2", "x3"], {"centres": {"x2": 0.05, "x3": -0.1}, "power": 2})]
HOSTILE = ['=HYPERLINK("http://x","y")', "+cmd|' /C calc'!A0", "@SUM(1+1)", "-1+2", 'say "x"\nnext', "plain"]
CREATED = "2024-05-01T10:00:00+00:00"


def _hostile_fit():
    rng = np.random.default_rng(4)
    n = 300
    level = rng.choice(HOSTILE, n)
    df = pd.DataFrame({"=1+1": rng.uniform(-1, 1, n), "@name\nline": level})
    df["y"] = 2 * df["=1+1"] + np.where(level == HOSTILE[0], 1.5, 0.0) + np.where(level == HOSTILE[1], -1.0, 0.0) \
        + rng.normal(0, 0.2, n)
    table = prepare(df, "y", source="h.csv")
    kinds = {f.name: f.kind for f in table.features}
    fills = {"=1+1": 0.0, "@name\nline": ""}
    eq = fit_equation([Term("linear", ["=1+1"]), Term("categorical", ["@name\nline"])], table.data,
                      table.data["y"].to_numpy(dtype=float), task="regression", target="y", fills=fills,
                      kinds=kinds, classes=None, fit_on="all")
    rows = pd.DataFrame({"=1+1": [0.5, np.nan, -0.25, 0.1, 0.9, 0.0],
                         "@name\nline": HOSTILE[:5] + [np.nan]})
    return eq, table, rows


@pytest.fixture(scope="module")
def recalculated(tmp_path_factory):
    """(case, eq, features, rows, original workbook, recalculated workbook, recalculated paste workbook)."""
    if shutil.which("soffice") is None:
        pytest.skip("LibreOffice (soffice) is not installed")
    work = tmp_path_factory.mktemp("lo")
    cases = []
    for name, task, k in (("regression", "regression", 2), ("multiclass", "classification", 3)):
        eq, table = _fit(ALL_KINDS, task, k)
        rows = _fresh_rows()
        if task == "classification":
            rows.loc[:1, "x1"] = [1e4, -1e4]                     # scores far beyond EXP's range
        cases.append((name, eq, table.features, rows))
    eq, table, rows = _hostile_fit()
    cases.append(("hostile", eq, table.features, rows))
    books, pastes = [], []
    for name, eq, features, rows in cases:
        meta = {"target": "y", "task": eq.task, "classes": eq.classes, "tool_version": "test"}
        book = work / f"{name}.xlsx"
        book.write_bytes(equation_workbook(eq, meta, features, rows, CREATED))
        text = "\n".join(spreadsheet_text(eq, [f.name for f in features])) + "\n"
        manifest = {"task": eq.task, "classes": eq.classes, "features": [f.to_dict() for f in features]}
        books.append(book)
        pastes.append(sheets.paste_workbook(book, text, rows, manifest, work / f"{name}_paste.xlsx"))
    done = engines.recalculate(books + pastes, work)
    n = len(cases)
    return [(*c, b, d, p) for c, b, d, p in zip(cases, books, done[:n], done[n:])]


def _want(eq, rows):
    return np.asarray(eq.predict(rows), dtype=float).reshape(len(rows), -1)


@needs_lo
def test_workbook_and_one_cell_formulas_compute_the_equation(recalculated):
    for name, eq, features, rows, _, done, paste in recalculated:
        manifest = {"task": eq.task, "classes": eq.classes}
        want = _want(eq, rows)
        for form, got in (("workbook", sheets.read_outputs(done, len(rows), manifest)),
                          ("one-cell", sheets.read_paste(paste, len(rows), manifest))):
            have = got["prediction"].reshape(-1, 1) if eq.task == "regression" else got["probabilities"]
            # LibreOffice keeps 15 significant digits of a computed value (relative 5e-15) on
            # top of double-precision arithmetic in another order
            np.testing.assert_allclose(have, want, rtol=1e-12, atol=1e-13, err_msg=f"{name} {form}")
            if eq.task == "classification":
                np.testing.assert_array_equal(got["label"], np.asarray(eq.classes)[want.argmax(1)])


@needs_lo
def test_text_from_the_data_stays_text(recalculated):
    name, eq, features, rows, original, done, _ = recalculated[-1]
    assert name == "hostile"
    for path in (original, done):
        wb = load_workbook(path)                    # formulas as written, not values
        ws, cs = wb["inputs"], wb["coefficients"]
        assert [ws.cell(1, c).value for c in (1, 2)] == ["=1+1", "@name\nline"]
        assert all(ws.cell(1, c).data_type == "s" for c in (1, 2))
        levels = [ws.cell(r, 2).value for r in range(2, 2 + len(rows))]
        assert levels == HOSTILE[:5] + [None]
        assert all(ws.cell(r, 2).data_type in ("s", "n") for r in range(2, 2 + len(rows)))
        texts = [c.value for row in cs.iter_rows() for c in row if c.data_type == "s"]
        assert HOSTILE[0] in texts and HOSTILE[1] in texts
        formulas = [c.value for sheet in wb for row in sheet.iter_rows() for c in row if c.data_type == "f"]
        assert formulas and not any("HYPERLINK" in f or "cmd" in f for f in formulas)


@needs_lo
def test_blank_rows_wait_for_input(recalculated):
    _, eq, _, rows, _, done, _ = recalculated[0]
    wb = load_workbook(done, data_only=True)
    ((sheet, ref),) = list(wb.defined_names["pf_prediction"].destinations)
    values = [r[0].value for r in wb[sheet][ref]]
    assert all(isinstance(v, float) for v in values[:len(rows)])
    assert all(v in (None, "") for v in values[len(rows):]) and len(values) > len(rows)


def test_same_content_same_bytes():
    eq, table, rows = _hostile_fit()
    meta = {"target": "y", "task": "regression", "classes": None, "tool_version": "t"}
    a = equation_workbook(eq, meta, table.features, rows, CREATED)
    b = equation_workbook(eq, meta, table.features, rows, CREATED)
    assert a == b


def test_formula_string_literals():
    assert xl_string('say "x"') == '"say ""x"""'
    assert xl_string("a\nb") == '("a"&CHAR(10)&"b")'
    assert xl_string("\t") == "CHAR(9)" and xl_string("") == '""'
