"""Preparing a table for fitting: check the target and flags, choose the task, type and screen
every feature column, and name the ONNX inputs.

Row numbers in messages are file lines (header = line 1), so a user can find the cell.
"""
from __future__ import annotations

import os
import re
import shlex
from collections.abc import Sequence

import numpy as np
import pandas as pd

from ..errors import InputError
from ..features import Feature, Table
from .messages import check_finite, examples, missing_hint, numbers_as_text_message, plural, quote_list, suggest
from .reading import read_table
from .values import (category_series, date_format, is_boolean, numbers_as_text, parse_numbers, plain, sort_labels,
                     spelling_variants)

#: More levels than this cannot be one-hot encoded sensibly by the exports.
MAX_CATEGORIES = 200
#: ONNX graph outputs; a feature input with one of these names would clash with them.
RESERVED_ONNX_NAMES: frozenset[str] = frozenset({"prediction", "label", "probabilities"})

_IDENT_RE = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
_ID_SHARE = 0.95
_ID_MIN_ROWS = 20
_MOSTLY_NUMERIC = 0.90
_MIN_PER_CLASS = 3


def load(
    path: str | os.PathLike[str],
    target: str,
    *,
    task: str = "auto",
    categorical: Sequence[str] = (),
    ignore: Sequence[str] = (),
    min_rows: int = 40,
    decimal_comma: bool = False,
) -> Table:
    """Read a file and prepare it (see :func:`read_table`, :func:`prepare`)."""
    df = read_table(path, decimal_comma=decimal_comma)
    sheet = df.attrs.get("sheet")
    table = prepare(
        df, target, task=task, categorical=categorical, ignore=ignore, source=str(path), min_rows=min_rows
    )
    if sheet and sheet["sheets"] > 1:
        table.notes.insert(0, f"read sheet '{sheet['name']}', the first of the workbook's {sheet['sheets']} sheets: "
                              "move the table's sheet to the front to read another")
    return table


def column_named(name: str, columns: Sequence[str]) -> str:
    """The column a user means by ``name``: itself, or without surrounding spaces, since header
    names are read stripped (a header cell ``"9( "`` is column ``"9("``). Unknown names are
    returned as given, for the caller's message."""
    if name in columns or name.strip() not in columns:
        return name
    return name.strip()


def prepare(
    df: pd.DataFrame,
    target: str,
    *,
    task: str = "auto",
    categorical: Sequence[str] = (),
    ignore: Sequence[str] = (),
    source: str = "<data>",
    min_rows: int = 40,
) -> Table:
    """Check the table, pick the task, type and screen the feature columns.

    Row numbers in messages are file lines (header = line 1), computed from the frame's
    position before rows with a missing target are dropped.
    """
    source = str(source)
    df = df.reset_index(drop=True)
    columns = [str(c) for c in df.columns]
    df.columns = columns
    dups = sorted({c for c in columns if columns.count(c) > 1})
    if dups:
        raise InputError(f"{source}: duplicate column names {quote_list(dups)}: rename them so each is unique")
    if task not in ("auto", "regression", "classification"):
        raise InputError(f"unknown task '{task}': use auto, regression or classification")
    target = column_named(str(target), columns)
    categorical = [column_named(str(c), columns) for c in categorical]
    ignore = [column_named(str(c), columns) for c in ignore]

    if target not in columns:
        raise InputError(f"{source}: no target column '{target}'{suggest(target, columns)}")
    for flag, names in (("--categorical", categorical), ("--ignore", ignore)):
        for name in names:
            if name not in columns:
                raise InputError(f"{source}: {flag} names column '{name}', which is not in the file{suggest(name, columns)}")
        if target in names:
            raise InputError(f"{source}: '{target}' is the target; it cannot also be given to {flag}: remove it from {flag}")

    notes: list[str] = []
    n_all = len(df)
    all_lines = np.arange(n_all) + 2

    # -- target
    y_raw = plain(df[target])
    keep = y_raw.notna().to_numpy()
    if not keep.any():
        raise InputError(f"{source}: target column '{target}' is empty in every row: choose another --target")
    dropped_rows = int(n_all - keep.sum())
    if dropped_rows:
        notes.append(f"dropped {dropped_rows} row(s) with a missing target '{target}'")
    y = y_raw[keep].reset_index(drop=True)
    lines = all_lines[keep]
    n = len(y)

    task, y_out, classes = _target(y, target, task, lines, source, notes)
    if n < min_rows:
        raise InputError(
            f"{source}: too few rows ({n}) for the discovery/confirmation/test splits: need at least {min_rows}"
        )
    if classes is not None:
        counts = pd.Series(y_out).value_counts()
        notes += _spelling_notes(f"target '{target}'", "classes", counts)
        rare = [c for c in classes if counts.get(c, 0) < _MIN_PER_CLASS]
        if rare:
            desc = ", ".join(f"'{c}' ({int(counts.get(c, 0))} rows)" for c in rare)
            raise InputError(
                f"{source}: target '{target}' class {desc} has fewer than {_MIN_PER_CLASS} rows; each class needs at "
                f"least {_MIN_PER_CLASS} so the discovery/confirmation/test splits each get one: add rows, merge "
                "rare classes or remove those rows"
            )

    # -- features
    dropped: dict[str, str] = {}
    kept: list[tuple[str, str, pd.Series]] = []  # (name, kind, typed column)
    for col in columns:
        if col == target:
            continue
        if col in ignore:
            dropped[col] = "ignored"
            notes.append(f"dropped column '{col}': ignored as asked")
            continue
        full = plain(df[col])
        kind, typed, reason = _type_column(col, full, keep, col in categorical, lines, source)
        if reason:
            dropped[col] = reason
            notes.append(f"dropped column '{col}': {_REASON_TEXT[reason]}")
            continue
        if kind == "categorical":
            notes += _spelling_notes(f"column '{col}'", "levels", typed[typed != ""].value_counts())
        if kind == "categorical" and col not in categorical and date_format(typed) is not None:
            notes.append(f"column '{col}' holds dates ({typed.nunique()} distinct), used as categories with no "
                         "order: to use time as a number, save it as days since a start date, or pass --ignore "
                         f"{shlex.quote(col)}")
        kept.append((col, kind, typed))

    if not kept:
        why = "; ".join(f"'{c}' {r}" for c, r in dropped.items()) or "the file has only the target column"
        raise InputError(f"{source}: no feature columns left to learn from ({why}): add predictor columns or fewer --ignore")

    names = [c for c, _, _ in kept]
    inputs = _onnx_inputs(names)
    features: list[Feature] = []
    data: dict[str, pd.Series] = {}
    for (col, kind, typed), onnx_name in zip(kept, inputs):
        if kind == "numeric":
            present = typed.notna()
            features.append(
                Feature(
                    name=col,
                    kind="numeric",
                    onnx_input=onnx_name,
                    missing=float(1.0 - present.mean()),
                    min=float(typed[present].min()),
                    max=float(typed[present].max()),
                )
            )
        else:
            present = typed != ""
            features.append(
                Feature(
                    name=col,
                    kind="categorical",
                    onnx_input=onnx_name,
                    missing=float(1.0 - present.mean()),
                    categories=sorted(set(typed[present])),
                )
            )
        data[col] = typed
    data[target] = y_out
    frame = pd.DataFrame(data, columns=names + [target])
    return Table(
        data=frame,
        target=target,
        task=task,
        features=features,
        classes=classes,
        source=source,
        notes=notes,
        dropped_columns=dropped,
        rows_dropped_missing_target=dropped_rows,
    )


def _spelling_notes(what: str, noun: str, counts: pd.Series) -> list[str]:
    """One note per group of labels spelt alike (:func:`values.spelling_variants`); ``counts``:
    rows per label, most common first, as ``value_counts`` gives them."""
    notes = []
    for group in spelling_variants(list(counts.index)):
        parts = [f"'{g}' ({plural(int(counts[g]), 'row')})" for g in group]
        notes.append(f"{what} has {noun} that differ only in letter case or spacing: "
                     f"{', '.join(parts[:-1])} and {parts[-1]}: they are kept as separate {noun}; if they mean "
                     "the same, write them the same way in the file")
    return notes


_REASON_TEXT = {
    "ignored": "ignored as asked",
    "id-like": "looks like an identifier (a different value in almost every row)",
    "constant": "has the same value in every row",
    "all missing": "is empty in every row",
}


def _target(
    y: pd.Series, target: str, task: str, lines: np.ndarray, source: str, notes: list[str]
) -> tuple[str, pd.Series, list[str] | None]:
    """Decide the task and return the typed target (float64 or str labels) and classes."""
    is_bool = is_boolean(y)
    values, bad = (np.full(len(y), np.nan), np.ones(len(y), bool)) if is_bool else parse_numbers(y)
    spelled = None if is_bool or task == "classification" else numbers_as_text(y, bad)
    if spelled:
        raise InputError(numbers_as_text_message(spelled, source, f"target '{target}'", examples(y, bad, lines),
                                                 "or --task classification to take them as classes"))
    numeric = not is_bool and not bad.any()
    share_numeric = 1.0 - bad.mean()
    if not numeric and not is_bool and share_numeric >= _MOSTLY_NUMERIC and task != "classification":
        raise InputError(
            f"{source}: target '{target}' is numeric but has {plural(int(bad.sum()), 'text value')} "
            f"({examples(y, bad, lines)}): fix them or pass --task classification{missing_hint(y, bad)}"
        )
    if numeric:
        check_finite(values, target, lines, source)
    distinct = len(np.unique(values)) if numeric else y.nunique()

    if task == "auto":
        if not numeric:
            task = "classification"
            notes.append(f"task: classification (target '{target}' is {'boolean' if is_bool else 'text'})")
        elif distinct == 2:
            task = "classification"
            notes.append(f"task: classification (target '{target}' has exactly 2 values); pass --task regression to override")
        else:
            task = "regression"
            integer = bool(np.all(values == np.floor(values)))
            if integer and distinct <= 10:
                notes.append(
                    f"target '{target}' has {distinct} integer values: treated as regression; "
                    "pass --task classification if these are classes"
                )
            else:
                notes.append(f"task: regression (target '{target}' is numeric)")
    elif task == "regression" and not numeric:
        raise InputError(
            f"{source}: --task regression needs a numeric target, but '{target}' has text values "
            f"({examples(y, bad, lines)}): use --task classification or fix the values"
        )

    if task == "regression":
        if distinct < 2:
            raise InputError(f"{source}: target '{target}' has the same value in every row: nothing to predict; choose another --target")
        if _is_row_counter(values, bad):
            raise InputError(
                f"{source}: target '{target}' goes up by exactly 1 on every row: it is a row number or id, "
                "not an outcome; choose another --target"
            )
        return task, pd.Series(values, dtype="float64"), None

    labels = category_series(pd.Series(values) if numeric else y)
    classes = sort_labels(sorted(set(labels)))
    if len(classes) < 2:
        raise InputError(
            f"{source}: target '{target}' has only one class ('{classes[0]}'): a classifier needs at least two; choose another --target"
        )
    return task, labels, classes


def _type_column(
    col: str, full: pd.Series, keep: np.ndarray, force_cat: bool, lines: np.ndarray, source: str
) -> tuple[str, pd.Series, str | None]:
    """Return (kind, typed kept-rows column, drop reason or None).

    ``full`` is the whole column (all file rows, needed to spot a row counter), ``keep`` marks
    the rows with a target; typing and checks use the kept rows only.
    """
    s = full[keep].reset_index(drop=True)
    present = s.notna().to_numpy()
    n = len(s)
    if not present.any():
        return "numeric", s, "all missing"

    kind = "categorical"
    if not force_cat and not is_boolean(s):
        values_full, bad_full = parse_numbers(full)  # parse once: this is the slow step on big files
        values, bad = values_full[keep], bad_full[keep]
        spelled = numbers_as_text(s, bad)
        if spelled:
            raise InputError(numbers_as_text_message(spelled, source, f"column '{col}'", examples(s, bad, lines),
                                                     f"or --categorical {shlex.quote(col)} to keep them as categories"))
        if not bad.any():
            kind = "numeric"
        elif 1.0 - bad.sum() / present.sum() >= _MOSTLY_NUMERIC:
            raise InputError(
                f"{source}: column '{col}' is numeric but has {plural(int(bad.sum()), 'text value')} "
                f"({examples(s, bad, lines)}): fix them or pass --categorical {shlex.quote(col)}"
                f"{missing_hint(s, bad)}"
            )

    if kind == "numeric":
        check_finite(values, col, lines, source)
        if len(np.unique(values[present])) == 1:
            return kind, s, "constant"
        if _is_row_counter(values_full, bad_full):
            return kind, s, "id-like"
        return kind, pd.Series(values, dtype="float64"), None

    typed = category_series(s)
    levels = typed[present].nunique()
    if levels == 1:
        return kind, typed, "constant"
    if n >= _ID_MIN_ROWS and levels >= _ID_SHARE * n:
        return kind, typed, "id-like"
    if levels > MAX_CATEGORIES:
        raise InputError(
            f"{source}: column '{col}' has {levels} distinct values, too many categories to encode "
            f"(limit {MAX_CATEGORIES}): pass --ignore {shlex.quote(col)} or group its values"
        )
    return kind, typed, None


def _is_row_counter(values: np.ndarray, bad: np.ndarray) -> bool:
    """An integer column going up by exactly 1 on every file row is a row number, not a feature."""
    if len(values) < 3 or bad.any() or np.isnan(values).any():
        return False
    if not np.all(values == np.floor(values)):
        return False
    return bool(np.all(np.diff(values) == 1))


def _onnx_inputs(names: Sequence[str]) -> list[str]:
    """ONNX input names: the column name when it is a plain identifier, else a sanitized unique one.

    Plain names are reserved first so a sanitized name never takes another column's own name;
    the graph's output names are reserved too.
    """
    taken = set(RESERVED_ONNX_NAMES)
    own = {n for n in names if _IDENT_RE.match(n) and n not in RESERVED_ONNX_NAMES}
    taken |= own
    out: list[str] = []
    for name in names:
        if name in own:
            out.append(name)
            continue
        base = re.sub(r"[^A-Za-z0-9_]", "_", name)
        if not base:
            base = "col"
        if base[0].isdigit():
            base = "c_" + base
        candidate, k = base, 2
        while candidate in taken:
            candidate = f"{base}_{k}"
            k += 1
        taken.add(candidate)
        out.append(candidate)
    return out
