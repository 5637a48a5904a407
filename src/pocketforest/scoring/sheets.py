"""Reading equation.xlsx back, and a workbook for the one-cell formulas of equation.txt.

verify has LibreOffice recalculate both (:func:`engines.recalculate`) and reads the computed
values with openpyxl; the workbook's defined names (``pf_inputs``, ``pf_prediction`` or
``pf_label`` / ``pf_prob_k``) say where its inputs and outputs are, so nothing depends on a
column's position or on a header's text.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ..export.workbook import CELL_PREFIX
from .runners import RunnerFailed


def _range(wb, name: str):
    if name not in wb.defined_names:
        raise RunnerFailed(f"the workbook defines no {name}: it was not written by pocketforest")
    ((sheet, ref),) = list(wb.defined_names[name].destinations)
    return wb[sheet][ref]


def _column(wb, name: str, n: int) -> list:
    cells = _range(wb, name)
    return [row[0].value for row in cells][:n]


def _numbers(values: list) -> np.ndarray:
    """Computed values; an error value (#VALUE!, #NUM!) or a blank counts as NaN."""
    return np.array([float(v) if isinstance(v, (int, float)) and not isinstance(v, bool) else np.nan
                     for v in values])


def _outputs(wb, n: int, manifest: dict, prefix: str = "pf_") -> dict[str, np.ndarray]:
    if manifest["task"] == "regression":
        return {"prediction": _numbers(_column(wb, f"{prefix}prediction", n))}
    k = len(manifest["classes"])
    labels = np.array(["" if v is None else str(v) for v in _column(wb, f"{prefix}label", n)])
    probs = np.column_stack([_numbers(_column(wb, f"{prefix}prob_{j}", n)) for j in range(1, k + 1)])
    return {"label": labels, "probabilities": probs}


def read_outputs(path: Path, n: int, manifest: dict) -> dict[str, np.ndarray]:
    """The first ``n`` rows of equation.xlsx's outputs, as recalculated."""
    from openpyxl import load_workbook
    return _outputs(load_workbook(path, data_only=True), n, manifest)


def input_names(book: Path) -> list[str]:
    """The workbook's input columns, in order (the one-cell formulas use the same layout)."""
    from openpyxl import load_workbook
    wb = load_workbook(book, read_only=False)
    return [c.value or "" for c in _range(wb, "pf_inputs")[0]]


def cell_formulas(text: str, count: int) -> list[str]:
    """The one-cell formulas of equation.txt: the last ``count`` lines starting with the prefix
    (they close the file, so no line printed from a name earlier on can be mistaken for one)."""
    found = [ln[len(CELL_PREFIX):].split(": ", 1)[1] for ln in text.splitlines()
             if ln.startswith(CELL_PREFIX) and ": =" in ln]
    if len(found) < count:
        raise RunnerFailed(f"equation.txt holds {len(found)} spreadsheet formula(s), expected {count}")
    return found[-count:]


def paste_workbook(book: Path, text: str, ref: pd.DataFrame, manifest: dict, out: Path) -> Path:
    """A workbook laid out as equation.txt asks (inputs in row 2 from column A; here one row per
    reference row) with its formulas pasted right of the inputs and filled down."""
    from openpyxl import Workbook
    from openpyxl.formula.translate import Translator
    from openpyxl.utils import get_column_letter
    from openpyxl.workbook.defined_name import DefinedName

    from ..export.workbook import cell_text, text_cell, write_rows

    shown = {cell_text(f["name"]): f for f in manifest["features"]}   # headers as the cells hold them
    try:
        names = [shown[h]["name"] for h in input_names(book)]
    except KeyError as exc:
        raise RunnerFailed(f"equation.xlsx has an input column {exc} the manifest does not list") from None
    kinds = {f["name"]: f["kind"] for f in manifest["features"]}
    count = 1 if manifest["task"] == "regression" else len(manifest["classes"])
    formulas = cell_formulas(text, count)
    wb = Workbook()
    ws = wb.active
    ws.title = "paste"
    for c, name in enumerate(names, start=1):
        text_cell(ws, 1, c, name)
    write_rows(ws, ref, [(n, kinds[n]) for n in names])
    for i in range(len(ref)):
        r = 2 + i
        for k, formula in enumerate(formulas):
            col = get_column_letter(len(names) + 2 + k)
            ws[f"{col}{r}"] = Translator(formula, origin=f"{col}2").translate_formula(f"{col}{r}")
    first = len(names) + 2
    last = 1 + len(ref)
    if manifest["task"] == "regression":
        keys = ["paste_prediction"]
    else:
        # the formulas give the probabilities; the label is their first largest, as elsewhere
        keys = [f"paste_prob_{k}" for k in range(1, count + 1)]
    for k, key in enumerate(keys):
        col = get_column_letter(first + k)
        wb.defined_names[key] = DefinedName(key, attr_text=f"paste!${col}$2:${col}${last}")
    wb.save(out)
    return out


def read_paste(path: Path, n: int, manifest: dict) -> dict[str, np.ndarray]:
    from openpyxl import load_workbook
    wb = load_workbook(path, data_only=True)
    if manifest["task"] == "regression":
        return {"prediction": _numbers(_column(wb, "paste_prediction", n))}
    classes = manifest["classes"]
    probs = np.column_stack([_numbers(_column(wb, f"paste_prob_{j}", n)) for j in range(1, len(classes) + 1)])
    best = np.argmax(np.nan_to_num(probs, nan=-1.0), axis=1)
    return {"label": np.array([classes[b] for b in best]), "probabilities": probs}
