"""The equation as a spreadsheet: ``equation.xlsx`` (written with openpyxl) and one-cell formulas.

Sheet ``inputs``: one column per input the equation reads, one row per reference row, then blank
rows for the user's own values; right of the inputs the prediction (or label and class
probabilities), then the linear predictor(s) and each term's contribution, all native formulas
(IF, ISBLANK, EXACT, MAX, LN, EXP, INDEX, MATCH). Sheet ``coefficients``: the coefficients, the
missing-value fills, the compared category levels and the classes, which the formulas reference by
cell. Sheet ``notes``: what the columns mean and the cautions. Defined names (``pf_inputs``,
``pf_prediction`` or ``pf_label`` and ``pf_prob_1``...) mark where things are, for verify.

Text from the data (names, levels, classes) is only ever a text cell, never part of a formula
(the formulas point at the cell), so a value such as ``=HYPERLINK(...)`` stays inert text. The
one-cell formulas for pasting (in equation.txt) carry levels as string literals instead, with the
quote doubled and control characters as ``CHAR(n)``.

A blank input cell is a missing value: a number takes the training fill, a category the missing
level; a category never seen in training (or typed differently, EXACT compares case and spaces)
matches no level, as in the other forms.
"""
from __future__ import annotations

import io
import zipfile
from datetime import datetime

from openpyxl import Workbook
from openpyxl.cell.cell import ILLEGAL_CHARACTERS_RE
from openpyxl.styles import Alignment, Font, PatternFill
from openpyxl.utils import get_column_letter, quote_sheetname
from openpyxl.workbook.defined_name import DefinedName

from ..expr import num_literal
from .breakdown import INTERCEPT, blocks, term_groups
from .dialect import Dialect, Inputs, equation_inputs, print_expr

BLANK_ROWS = 25
#: How verify finds the one-cell formulas: the last lines of equation.txt that start with this.
CELL_PREFIX = "spreadsheet formula "
INPUTS, COEFS, NOTES = "inputs", "coefficients", "notes"
_HEAD = PatternFill("solid", fgColor="EBE6D3")     # the report's table-head colour
_REF = PatternFill("solid", fgColor="F3F0E3")      # the report's panel colour: reference rows
_OUT = PatternFill("solid", fgColor="E3EAF3")      # outputs, a light tint of the report's slate
_BOLD = Font(bold=True, color="2C4A25")


def xl_number(value: float) -> str:
    """An exact number literal for a formula; negatives in parentheses (Excel's unary minus binds
    tighter than ^)."""
    text = num_literal(value).upper()
    return f"({text})" if text.startswith("-") else text


def xl_string(value: str) -> str:
    """A formula string literal: quotes doubled, control characters as CHAR(n)."""
    pieces, cur = [], []
    for ch in str(value):
        if ord(ch) < 32:
            if cur:
                pieces.append('"' + "".join(cur) + '"')
                cur = []
            pieces.append(f"CHAR({ord(ch)})")
        else:
            cur.append('""' if ch == '"' else ch)
    if cur or not pieces:
        pieces.append('"' + "".join(cur) + '"')
    return pieces[0] if len(pieces) == 1 else "(" + "&".join(pieces) + ")"


def cell_text(value: str) -> str:
    """Text as a cell can hold it: XML 1.0 has no place for most control characters."""
    return ILLEGAL_CHARACTERS_RE.sub("\ufffd", str(value))[:32767]


XL = Dialect(number=xl_number, text=xl_string, is_level=lambda var, lit: f"IF(EXACT({var},{lit}),1,0)",
             square=lambda a: f"{a}^2", pos=lambda a: f"MAX(0,{a})", log=lambda a: f"LN({a})")


class _Cells(Inputs):
    """Inputs are cells of one row: numbers imputed with IF(ISBLANK(...)), levels compared with
    EXACT (case-sensitive, unlike "="); fills and levels are cells of the coefficients sheet
    (``refs``) or, for a one-cell formula, literals."""

    def __init__(self, columns: dict[str, str], row: int, refs: dict | None = None) -> None:
        super().__init__()
        self.columns, self.row, self.cells = columns, row, refs

    def _cell(self, feature: str) -> str:
        return f"{self.columns[feature]}{self.row}"

    def numeric(self, feature: str, fill: float) -> str:
        super().numeric(feature, fill)
        cell = self._cell(feature)
        fill_ref = self.cells["fill"][feature] if self.cells else xl_number(fill)
        return f"IF(ISBLANK({cell}),{fill_ref},{cell})"

    def categorical(self, feature: str) -> str:
        super().categorical(feature)
        return self._cell(feature)

    def level(self, feature: str, level: str, d: Dialect) -> str:
        cell = self.categorical(feature)
        if level == "":
            return f"IF(LEN({cell})=0,1,0)"
        lit = self.cells["level"][(feature, level)] if self.cells else xl_string(level)
        return f"IF(EXACT({cell},{lit}),1,0)"


def _levels_and_fills(eq) -> tuple[dict[str, float], list[tuple[str, str]]]:
    """The fills of the numeric inputs and the (input, level) pairs the formulas compare with."""
    levels: list[tuple[str, str]] = []

    class _Probe(Inputs):
        def level(self, feature, level, d):
            if level != "" and (feature, level) not in levels:
                levels.append((feature, level))
            return super().level(feature, level, d)

    p = _Probe()
    for c in eq.columns:
        print_expr(c.node, XL, p)
    fills = {r.feature: r.fill for r in p if r.kind == "numeric"}
    return fills, levels


# ---------------------------------------------------------------- one-cell formulas

def cell_formulas(eq, feature_order: list[str]) -> tuple[list[tuple[str, str]], list[tuple[str, str]]]:
    """(inputs as (column letter, name), [(what, formula)]) for pasting into row 2 of a sheet whose
    row 2 holds the inputs from column A: the prediction, or each class probability."""
    names = [n for n, _ in equation_inputs(eq, feature_order)]
    columns = {n: get_column_letter(i + 1) for i, n in enumerate(names)}
    cells = _Cells(columns, 2)
    etas = []
    for _, coef in blocks(eq):
        parts = [xl_number(coef[0])] + [f"{xl_number(b)}*{print_expr(c.node, XL, cells)}"
                                        for b, c in zip(coef[1:], eq.columns)]
        etas.append("(" + "+".join(parts) + ")")
    if eq.task == "regression":
        out = [("prediction", "=" + (etas[0] if eq.link == "identity" else f"EXP({etas[0]})"))]
    else:
        out = [(f"P({eq.target} = {cls})", "=" + p) for cls, p in zip(eq.classes, _softmax(etas))]
    return [(columns[n], n) for n in names], out


# ---------------------------------------------------------------- the workbook

def text_cell(ws, row: int, col: int, value: str, **style):
    """A text cell that stays text: never read as a formula, even when it starts with '='."""
    cell = ws.cell(row=row, column=col)
    cell.value = cell_text(value)
    cell.data_type = "s"
    cell.quotePrefix = True
    for k, v in style.items():
        setattr(cell, k, v)
    return cell


def write_rows(ws, rows, inputs: list[tuple[str, str]], first_row: int = 2, fill=None) -> None:
    """Input rows from column A: numbers as numbers, categories as text cells, missing as blank."""
    for i in range(len(rows)):
        r = first_row + i
        for c, (name, kind) in enumerate(inputs, start=1):
            value = rows[name].iloc[i]
            present = value is not None and value == value and str(value) != ""
            if kind == "numeric" and present:
                ws.cell(row=r, column=c).value = float(value)
            elif present:
                text_cell(ws, r, c, str(value))
            if fill is not None:
                ws.cell(row=r, column=c).fill = fill


def _abs(sheet: str, col: int, row: int) -> str:
    return f"{quote_sheetname(sheet)}!${get_column_letter(col)}${row}"


def equation_workbook(eq, meta: dict, features: list, rows, created: str | None = None,
                      cautions: list[str] = (), blank_rows: int = BLANK_ROWS) -> bytes:
    """The workbook's bytes. ``features``: the data's features (manifest order); ``rows``: the
    reference input rows (a DataFrame with the features' columns)."""
    wb = Workbook()
    ws = wb.active
    ws.title = INPUTS
    cs = wb.create_sheet(COEFS)
    ns = wb.create_sheet(NOTES)
    order = [f.name for f in features]
    inputs = equation_inputs(eq, order)
    coef_blocks = blocks(eq)
    refs = _coefficient_sheet(cs, eq, coef_blocks)

    columns = {name: get_column_letter(i + 1) for i, (name, _) in enumerate(inputs)}
    n_in = len(inputs)
    outputs = ["prediction"] if eq.task == "regression" else ["label"] + [f"P({c})" for c in eq.classes]
    first_out = n_in + 1
    first_eta = first_out + len(outputs) + 1          # one empty column between outputs and workings
    groups = term_groups(eq)
    eta_cols = [first_eta + k for k in range(len(coef_blocks))]
    first_contrib = first_eta + len(coef_blocks)

    for i, (name, _) in enumerate(inputs, start=1):
        text_cell(ws, 1, i, name, font=_BOLD, fill=_HEAD)
    for k, name in enumerate(outputs):
        text_cell(ws, 1, first_out + k, name, font=_BOLD, fill=_OUT)
    for k, (cls, _) in enumerate(coef_blocks):
        text_cell(ws, 1, eta_cols[k], "linear predictor" + (f" ({cls})" if len(coef_blocks) > 1 else ""), font=_BOLD)
    contrib_col = {}
    col = first_contrib
    for k, (cls, _) in enumerate(coef_blocks):
        for g, grp in enumerate(groups):
            head = f"contribution: {grp.label}" + (f" ({cls})" if len(coef_blocks) > 1 else "")
            text_cell(ws, 1, col, head, font=_BOLD)
            contrib_col[(k, g)] = col
            col += 1

    n_ref = len(rows)
    last = 1 + n_ref + blank_rows
    write_rows(ws, rows, inputs, fill=_REF)
    for r in range(2, last + 1):
        i = r - 2
        cells = _Cells(columns, r, refs)
        for k, (_, coef) in enumerate(coef_blocks):
            for g, grp in enumerate(groups):
                parts = [f"{refs['coef'][(k, j)]}*{print_expr(eq.columns[j].node, XL, cells)}" for j in grp.columns]
                ws.cell(row=r, column=contrib_col[(k, g)]).value = "=" + "+".join(parts)
            lo = get_column_letter(contrib_col[(k, 0)]) if groups else None
            hi = get_column_letter(contrib_col[(k, len(groups) - 1)]) if groups else None
            total = f"+SUM({lo}{r}:{hi}{r})" if groups else ""
            ws.cell(row=r, column=eta_cols[k]).value = f"={refs['coef'][(k, -1)]}{total}"
        empty = ""
        if i >= n_ref and n_in:  # the user's rows stay empty until something is typed
            empty = f"COUNTA({get_column_letter(1)}{r}:{get_column_letter(n_in)}{r})=0"
        etas = [f"{get_column_letter(c)}{r}" for c in eta_cols]
        for k, formula in enumerate(_output_formulas(eq, etas, r, first_out, refs)):
            cell = ws.cell(row=r, column=first_out + k)
            cell.value = f"=IF({empty},\"\",{formula})" if empty else f"={formula}"
            cell.fill = _OUT
    for c in range(1, col):
        ws.column_dimensions[get_column_letter(c)].width = 16
    ws.freeze_panes = ws.cell(row=2, column=1)
    _names(wb, n_in, first_out, outputs, last)
    _notes(ns, eq, meta, inputs, n_ref, last, cautions)
    return _save(wb, created)


def _softmax(etas: list[str], top: str | None = None) -> list[str]:
    """Class probabilities, the reference class's score being 0. With ``top`` (the largest score,
    as a formula) EXP(e_k - top) / sum_j EXP(e_j - top), which cannot overflow; without it (a
    one-cell formula, where every score is written out and repeating it for the maximum would
    double the length) 1 / sum_j EXP(MIN(700, e_j - e_k)): EXP stops at e^700 (about 1e304) so
    extreme scores give probabilities of 1e-304 or less instead of #NUM!."""
    scores = ["0"] + etas
    if top is not None:
        total = "+".join(f"EXP({s}-{top})" for s in scores)
        return [f"EXP({s}-{top})/({total})" for s in scores]
    out = []
    for k in range(len(scores)):
        terms = []
        for j in range(len(scores)):
            if j == k:
                terms.append("1")
            elif k == 0:
                terms.append(f"EXP(MIN(700,{scores[j]}))")
            elif j == 0:
                terms.append(f"EXP(MIN(700,-{scores[k]}))")
            else:
                terms.append(f"EXP(MIN(700,{scores[j]}-{scores[k]}))")
        out.append(f"1/({'+'.join(terms)})")
    return out


def _output_formulas(eq, etas: list[str], r: int, first_out: int, refs: dict) -> list[str]:
    if eq.task == "regression":
        return [etas[0] if eq.link == "identity" else f"EXP({etas[0]})"]
    probs = _softmax(etas, top=f"MAX(0,{','.join(etas)})")
    lo, hi = get_column_letter(first_out + 1), get_column_letter(first_out + len(eq.classes))
    label = f"INDEX({refs['classes']},MATCH(MAX({lo}{r}:{hi}{r}),{lo}{r}:{hi}{r},0))"
    return [label] + probs


def _coefficient_sheet(cs, eq, coef_blocks) -> dict:
    """Coefficients (columns C..), fills, levels and classes; returns the absolute references."""
    refs: dict = {"coef": {}, "fill": {}, "level": {}}
    text_cell(cs, 1, 1, "term", font=_BOLD, fill=_HEAD)
    text_cell(cs, 1, 2, "design column", font=_BOLD, fill=_HEAD)
    for k, (cls, _) in enumerate(coef_blocks):
        text_cell(cs, 1, 3 + k, "coefficient" + (f" ({cls} against {eq.classes[0]})" if eq.task == "classification" else ""),
              font=_BOLD, fill=_HEAD)
    label_of = {}
    for g in term_groups(eq):
        for j in g.columns:
            label_of[j] = g.label
    text_cell(cs, 2, 1, INTERCEPT)
    text_cell(cs, 2, 2, INTERCEPT)
    for j, c in enumerate(eq.columns):
        text_cell(cs, 3 + j, 1, label_of.get(j, c.label))
        text_cell(cs, 3 + j, 2, c.label)
    for k, (_, coef) in enumerate(coef_blocks):
        cs.cell(row=2, column=3 + k).value = float(coef[0])
        refs["coef"][(k, -1)] = _abs(COEFS, 3 + k, 2)
        for j, b in enumerate(coef[1:]):
            cs.cell(row=3 + j, column=3 + k).value = float(b)
            refs["coef"][(k, j)] = _abs(COEFS, 3 + k, 3 + j)
    base = 3 + len(coef_blocks) + 1
    fills, levels = _levels_and_fills(eq)
    text_cell(cs, 1, base, "input", font=_BOLD, fill=_HEAD)
    text_cell(cs, 1, base + 1, "a blank cell counts as", font=_BOLD, fill=_HEAD)
    for i, (name, fill) in enumerate(fills.items(), start=2):
        text_cell(cs, i, base, name)
        cs.cell(row=i, column=base + 1).value = float(fill)
        refs["fill"][name] = _abs(COEFS, base + 1, i)
    text_cell(cs, 1, base + 3, "input", font=_BOLD, fill=_HEAD)
    text_cell(cs, 1, base + 4, "level compared", font=_BOLD, fill=_HEAD)
    for i, (name, level) in enumerate(levels, start=2):
        text_cell(cs, i, base + 3, name)
        text_cell(cs, i, base + 4, level)
        refs["level"][(name, level)] = _abs(COEFS, base + 4, i)
    if eq.task == "classification":
        text_cell(cs, 1, base + 6, "classes", font=_BOLD, fill=_HEAD)
        for i, cls in enumerate(eq.classes, start=2):
            text_cell(cs, i, base + 6, cls)
        col = get_column_letter(base + 6)
        refs["classes"] = f"{quote_sheetname(COEFS)}!${col}$2:${col}${1 + len(eq.classes)}"
    for c in range(1, base + 7):
        cs.column_dimensions[get_column_letter(c)].width = 22
    return refs


def _names(wb, n_in: int, first_out: int, outputs: list[str], last: int) -> None:
    sheet = quote_sheetname(INPUTS)
    if n_in:
        wb.defined_names["pf_inputs"] = DefinedName("pf_inputs", attr_text=f"{sheet}!$A$1:${get_column_letter(n_in)}$1")
    keys = ["pf_prediction"] if outputs == ["prediction"] else ["pf_label"] + [f"pf_prob_{k}" for k in range(1, len(outputs))]
    for k, key in enumerate(keys):
        col = get_column_letter(first_out + k)
        wb.defined_names[key] = DefinedName(key, attr_text=f"{sheet}!${col}$2:${col}${last}")


def _notes(ns, eq, meta: dict, inputs, n_ref: int, last: int, cautions) -> None:
    what = "the prediction" if eq.task == "regression" else "the label and each class probability"
    lines = [f"Equation for {eq.target} ({eq.family} family, {eq.link} link), fitted on the {eq.fit_on} rows "
             f"(n = {eq.n}); pocketforest {meta.get('tool_version', '')}.",
             "",
             f"Sheet '{INPUTS}': type values into the columns of inputs; the coloured columns give {what}.",
             f"Rows 2 to {1 + n_ref} are the bundle's reference rows (reference.csv); rows {2 + n_ref} to {last} "
             "are for your own values (copy a row down for more).",
             "A blank cell is a missing value: a number then takes the value listed on the coefficients sheet, "
             "a category counts as the missing level.",
             "Type categories exactly as they are listed (EXACT compares letter case and spaces); a category "
             "never seen in training counts as the reference level.",
             "Right of the outputs: the linear predictor and each term's contribution to it (they add up, "
             "with the intercept, to the linear predictor).",
             f"Sheet '{COEFS}': the coefficients, fills and levels the formulas use, by cell; change nothing there "
             "unless you mean to change the equation.",
             "", "Cautions:"]
    lines += [f"- {_plain(c)}" for c in cautions]
    for i, text in enumerate(lines, start=1):
        text_cell(ns, i, 1, text, alignment=Alignment(wrap_text=True, vertical="top"))
    ns.column_dimensions["A"].width = 110


def _plain(html_text: str) -> str:
    """A caution from the report, without its markup."""
    import html
    import re
    return html.unescape(re.sub(r"<[^>]+>", "", html_text))


def _save(wb, created: str | None) -> bytes:
    """Bytes that depend only on the content and the bundle's creation time: openpyxl stamps the
    current time into the document properties and the zip entries, so both are fixed here."""
    stamp = datetime.fromisoformat(created).replace(tzinfo=None) if created else datetime(2000, 1, 1)
    wb.properties.creator = "pocketforest"
    wb.properties.created = stamp
    wb.properties.modified = stamp
    raw = io.BytesIO()
    wb.save(raw)
    out = io.BytesIO()
    with zipfile.ZipFile(raw) as src, zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as dst:
        for info in src.infolist():
            data = src.read(info.filename)
            if info.filename == "docProps/core.xml":
                data = _fix_modified(data, stamp)
            fixed = zipfile.ZipInfo(info.filename, date_time=(1980, 1, 1, 0, 0, 0))
            fixed.compress_type = zipfile.ZIP_DEFLATED
            dst.writestr(fixed, data)
    return out.getvalue()


def _fix_modified(core: bytes, stamp: datetime) -> bytes:
    """openpyxl writes the save time as dcterms:modified whatever the properties say."""
    import re
    text = core.decode("utf-8")
    iso = stamp.strftime("%Y-%m-%dT%H:%M:%SZ")
    text = re.sub(r"(<dcterms:modified[^>]*>)[^<]*(</dcterms:modified>)", rf"\g<1>{iso}\g<2>", text)
    return text.encode("utf-8")
