"""Read a data table and turn it into typed features, a target and a task.

Everything a user can get wrong in a data file is caught here and raised as
:class:`~pocketforest.errors.InputError` with one line that names the file, column or value and
says what to do, so later stages can assume clean, typed input.

CSV/TSV files are read as text and typed column by column here (not by pandas' guesses), because
a single stray word in a numeric column should be reported, not silently turn the column into
categories.
"""
from __future__ import annotations

import csv
import difflib
import math
import os
import re
import shlex
import warnings
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .errors import InputError

__all__ = [
    "Feature",
    "Table",
    "read_table",
    "iter_table",
    "prepare",
    "load",
    "coerce_for_scoring",
    "category_text",
    "MISSING_TOKENS",
    "MAX_CATEGORIES",
    "RESERVED_ONNX_NAMES",
]

#: Text values (after stripping whitespace) that mean "missing"; the empty string too.
MISSING_TOKENS: frozenset[str] = frozenset({"", "NA", "N/A", "NaN", "nan", "null", "NULL", "None"})
#: More levels than this cannot be one-hot encoded sensibly by the exports.
MAX_CATEGORIES = 200
#: ONNX graph outputs; a feature input with one of these names would clash with them.
RESERVED_ONNX_NAMES: frozenset[str] = frozenset({"prediction", "label", "probabilities"})

_EXTENSIONS = {".csv": ",", ".tsv": "\t", ".parquet": None}
_DELIMITER_NAMES = {",": "comma", "\t": "tab", ";": "semicolon", "|": "pipe"}
_IDENT_RE = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
_INT_RE = re.compile(r"^[+-]?\d+$")
_NUMBER_RE = re.compile(r"^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?$")
_LEADING_ZERO_RE = re.compile(r"^[+-]?0\d")
_ID_SHARE = 0.95
_ID_MIN_ROWS = 20
_MOSTLY_NUMERIC = 0.90
_MIN_PER_CLASS = 3
_EXAMPLES = 3


@dataclass
class Feature:
    """One input column as the model and every export see it."""

    name: str
    kind: str  # "numeric" | "categorical"
    onnx_input: str
    missing: float
    min: float | None = None
    max: float | None = None
    categories: list[str] | None = None

    def to_dict(self) -> dict[str, Any]:
        """Manifest form: numeric features carry min/max, categorical ones their categories."""
        out: dict[str, Any] = {
            "name": self.name,
            "kind": self.kind,
            "onnx_input": self.onnx_input,
            "missing": self.missing,
        }
        if self.kind == "numeric":
            out["min"] = self.min
            out["max"] = self.max
        else:
            out["categories"] = list(self.categories or [])
        return out


@dataclass
class Table:
    """A typed table ready for fitting, plus what was dropped and why."""

    data: pd.DataFrame
    target: str
    task: str  # "regression" | "classification"
    features: list[Feature]
    classes: list[str] | None
    source: str
    notes: list[str] = field(default_factory=list)
    dropped_columns: dict[str, str] = field(default_factory=dict)
    rows_dropped_missing_target: int = 0


# --------------------------------------------------------------------------- reading


def read_table(path: str | os.PathLike[str], columns: Sequence[str] | None = None) -> pd.DataFrame:
    """Read a whole CSV/TSV/Parquet file into a frame with missing values as NaN.

    CSV/TSV columns stay text (typing happens in :func:`prepare` / :func:`coerce_for_scoring`);
    Parquet columns keep their native types, with text columns cleaned the same way as CSV.
    ``columns`` reads only those columns (the ones absent from the file are skipped silently so
    :func:`coerce_for_scoring` can name them all at once); parsing text is the slow part.
    """
    p, sep = _check_path(path)
    if sep is None:
        df = _read_parquet(p, columns)
        if len(df) == 0:
            raise InputError(f"{p}: has no rows: write the data rows into the Parquet file")
        return df
    header = _csv_header(p, sep)
    names, kwargs = _csv_selection(header, columns, sep)
    with _csv_errors(p, sep, header):
        df = pd.read_csv(p, **kwargs)
    if len(df) == 0:
        raise InputError(f"{p}: has a header but no data rows: add rows below the header")
    return _finish_csv_frame(df, names, p)


def iter_table(
    path: str | os.PathLike[str], chunksize: int = 100_000, columns: Sequence[str] | None = None
) -> Iterator[tuple[int, pd.DataFrame]]:
    """Yield ``(first_row, frame)`` chunks so big files can be scored in bounded memory.

    ``first_row`` is the 0-based data row of the chunk's first row (pass it to
    :func:`coerce_for_scoring` so line numbers in errors are right); each frame has a fresh
    0-based index and is cleaned exactly like :func:`read_table` (``columns`` as there).
    """
    p, sep = _check_path(path)
    first = 0
    if sep is None:
        import pyarrow.parquet as pq

        try:
            pf = pq.ParquetFile(p)
            raw = _parquet_selection(pf.schema_arrow.names, columns)
            batches = pf.iter_batches(batch_size=chunksize, columns=raw)
        except (OSError, ValueError) as exc:  # pyarrow's ArrowInvalid is a ValueError
            raise _parquet_error(p, exc) from None
        while True:
            try:
                batch = next(batches, None)
            except (OSError, ValueError) as exc:
                raise _parquet_error(p, exc) from None
            if batch is None:
                break
            df = _clean_parquet_frame(batch.to_pandas(), p)
            yield first, df
            first += len(df)
    else:
        header = _csv_header(p, sep)
        names, kwargs = _csv_selection(header, columns, sep)
        with _csv_errors(p, sep, header):
            reader = pd.read_csv(p, chunksize=chunksize, **kwargs)
        while True:
            # the warnings filter must not stay active while the caller runs, so enter per chunk
            with _csv_errors(p, sep, header):
                chunk = next(reader, None)
            if chunk is None:
                break
            chunk = _finish_csv_frame(chunk.reset_index(drop=True), names, p)
            yield first, chunk
            first += len(chunk)
    if first == 0:
        raise InputError(f"{p}: has a header but no data rows: add rows below the header")


def _csv_selection(header: list[str], columns: Sequence[str] | None, sep: str) -> tuple[list[str], dict[str, Any]]:
    """Column names to expect and read_csv arguments, restricted to ``columns`` if given."""
    kwargs = _csv_kwargs(sep)
    if columns is None:
        return header, kwargs
    wanted = set(map(str, columns))
    positions = [i for i, name in enumerate(header) if name in wanted]
    # usecols=[] would also drop the rows; read one column and remove it later instead
    kwargs["usecols"] = positions or [0]
    return [header[i] for i in positions] if positions else [], kwargs


def _parquet_selection(names: Sequence[Any], columns: Sequence[str] | None) -> list[Any] | None:
    if columns is None:
        return None
    wanted = set(map(str, columns))
    return [n for n in names if str(n).strip() in wanted]


def _check_path(path: str | os.PathLike[str]) -> tuple[Path, str | None]:
    """Validate extension and existence before any parser gets a chance to fail obscurely."""
    p = Path(path)
    ext = p.suffix.lower()
    if ext not in _EXTENSIONS:
        shown = f"'{p.suffix}'" if p.suffix else "no extension"
        raise InputError(
            f"{p}: unsupported file type ({shown}): use a .csv, .tsv or .parquet file"
        )
    if not p.exists():
        raise InputError(f"{p}: file not found: check the path")
    if p.is_dir():
        raise InputError(f"{p}: is a directory, not a data file: give the path of a .csv, .tsv or .parquet file")
    try:
        size = p.stat().st_size
        with open(p, "rb"):
            pass
    except OSError as exc:
        raise InputError(f"{p}: cannot be read ({exc.strerror or exc}): check the file permissions") from None
    if size == 0:
        raise InputError(f"{p}: is empty: it needs a header line and data rows")
    return p, _EXTENSIONS[ext]


def _csv_kwargs(sep: str) -> dict[str, Any]:
    """Everything as text, no NA guessing (we apply our own missing tokens)."""
    return dict(
        sep=sep,
        dtype=str,
        keep_default_na=False,
        na_filter=False,
        encoding="utf-8-sig",
        index_col=False,
        skip_blank_lines=True,
    )


def _not_utf8(p: Path) -> InputError:
    return InputError(f"{p}: is not UTF-8 text: re-save it with UTF-8 encoding")


def _csv_header(p: Path, sep: str) -> list[str]:
    """Read the raw header (pandas would silently rename duplicates) and check its names."""
    try:
        with open(p, encoding="utf-8-sig", newline="") as fh:
            row: list[str] = []
            for row in csv.reader(fh, delimiter=sep):
                if any(cell.strip() for cell in row):
                    break
            else:
                row = []
    except UnicodeDecodeError:
        raise _not_utf8(p) from None
    except csv.Error as exc:
        raise InputError(f"{p}: header line cannot be parsed ({exc}): fix the quoting in the first line") from None
    if not row:
        raise InputError(f"{p}: is empty: it needs a header line and data rows")
    header = [cell.strip() for cell in row]
    if len(header) == 1:
        _check_delimiter(p, sep, header[0])
    blank = [str(i + 1) for i, name in enumerate(header) if not name]
    if blank:
        where = "position" if len(blank) == 1 else "positions"
        raise InputError(
            f"{p}: column {where} {', '.join(blank)} of the header {'has' if len(blank) == 1 else 'have'} "
            f"no name: give every column a name in the first line (or remove empty trailing columns)"
        )
    dups = sorted({name for name in header if header.count(name) > 1})
    if dups:
        raise InputError(f"{p}: duplicate column names {_quote_list(dups)}: rename them so each is unique")
    return header


def _check_delimiter(p: Path, sep: str, only: str) -> None:
    """A one-column header holding another delimiter means the file is split wrongly."""
    for other in ("\t", ";", ",", "|"):
        if other != sep and other in only:
            if other == "\t":
                hint = "rename it to .tsv"
            elif other == ",":
                hint = "rename it to .csv"
            else:
                hint = "re-save it comma-separated as .csv (or tab-separated as .tsv)"
            raise InputError(
                f"{p}: header '{_short(only)}' looks {_DELIMITER_NAMES[other]}-separated, but a "
                f"{p.suffix.lower()} file must be {_DELIMITER_NAMES[sep]}-separated: {hint}"
            )


class _csv_errors:
    """Context manager turning pandas/codec failures during CSV parsing into InputError."""

    def __init__(self, p: Path, sep: str, header: list[str]) -> None:
        self.p, self.sep, self.header = p, sep, header
        self._warn: warnings.catch_warnings | None = None

    def __enter__(self) -> "_csv_errors":
        self._warn = warnings.catch_warnings()
        self._warn.__enter__()
        # pandas only *warns* (and drops data) when the first data row is too long.
        warnings.simplefilter("error", pd.errors.ParserWarning)
        return self

    def __exit__(self, etype: type | None, exc: BaseException | None, tb: Any) -> bool:
        assert self._warn is not None
        self._warn.__exit__(None, None, None)
        if exc is None or isinstance(exc, InputError):
            return False
        p = self.p
        if isinstance(exc, UnicodeDecodeError):
            raise _not_utf8(p) from None
        if isinstance(exc, pd.errors.EmptyDataError):
            raise InputError(f"{p}: is empty: it needs a header line and data rows") from None
        if isinstance(exc, (pd.errors.ParserError, pd.errors.ParserWarning)):
            m = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", str(exc))
            if m:
                line, saw = int(m.group(2)), int(m.group(3))
            else:
                line, saw = self._find_long_row()
            if line:
                raise InputError(
                    f"{p}: line {line} has {saw} fields but the header has {len(self.header)}: "
                    f"fix that row (quote values containing '{_printable(self.sep)}')"
                ) from None
            raise InputError(f"{p}: cannot be parsed as {_DELIMITER_NAMES[self.sep]}-separated text ({_short(str(exc))}): check quoting and delimiters") from None
        return False

    def _find_long_row(self) -> tuple[int, int]:
        """Locate the first over-long row ourselves; only used on the error path."""
        try:
            with open(self.p, encoding="utf-8-sig", newline="") as fh:
                reader = csv.reader(fh, delimiter=self.sep)
                for row in reader:
                    if len(row) > len(self.header):
                        return reader.line_num, len(row)
        except (UnicodeDecodeError, csv.Error):
            pass
        return 0, 0


def _finish_csv_frame(df: pd.DataFrame, header: list[str], p: Path) -> pd.DataFrame:
    """Put back the exact header names and apply the missing-value rules."""
    if not header:  # a column selection that matched nothing: keep the row count only
        return df.iloc[:, :0]
    if len(df.columns) != len(header):  # defensive: pandas and csv disagree on the header
        raise InputError(f"{p}: header has {len(header)} names but pandas found {len(df.columns)} columns: check quoting in the first line")
    df.columns = header
    _check_short_rows(df, p)
    for col in header:
        df[col] = _clean_text(df[col])
    return df


def _check_short_rows(df: pd.DataFrame, p: Path) -> None:
    """A row whose whole text landed in the first column and holds another delimiter was written
    with a different separator; pandas would quietly pad it with empty cells."""
    if df.shape[1] < 2 or len(df) == 0:
        return
    first = df.iloc[:, 0].astype(str)
    rest_empty = (df.iloc[:, 1:].astype(str) == "").all(axis=1)
    if not rest_empty.any():
        return
    own = _EXTENSIONS.get(p.suffix.lower())
    for other in (o for o in (";", "\t", "|", ",") if o != own):
        hit = (rest_empty & first.str.contains(other, regex=False)).to_numpy()
        if hit.any():
            line = int(np.flatnonzero(hit)[0]) + 2
            raise InputError(
                f"{p}: line {line} holds one field with '{_printable(other)}' in it while the header has "
                f"{df.shape[1]} columns: the file mixes delimiters; re-save it with one delimiter throughout"
            )


def _read_parquet(p: Path, columns: Sequence[str] | None = None) -> pd.DataFrame:
    import pyarrow.parquet as pq

    try:
        table = pq.read_table(p, columns=_parquet_selection(pq.read_schema(p).names, columns))
        df = table.to_pandas()
    except (OSError, ValueError) as exc:  # ArrowInvalid subclasses ValueError
        raise _parquet_error(p, exc) from None
    return _clean_parquet_frame(df, p).reset_index(drop=True)


def _parquet_error(p: Path, exc: BaseException) -> InputError:
    return InputError(
        f"{p}: cannot be read as Parquet ({_short(str(exc).splitlines()[0] if str(exc) else type(exc).__name__)}): "
        "the file may be truncated or corrupt; write it again"
    )


def _clean_parquet_frame(df: pd.DataFrame, p: Path) -> pd.DataFrame:
    """Same column-name and missing-text rules as CSV; native numeric types stay."""
    names = [str(c).strip() for c in df.columns]
    blank = [str(i + 1) for i, n in enumerate(names) if not n]
    if blank:
        raise InputError(f"{p}: column position(s) {', '.join(blank)} have no name: name every column")
    dups = sorted({n for n in names if names.count(n) > 1})
    if dups:
        raise InputError(f"{p}: duplicate column names {_quote_list(dups)}: rename them so each is unique")
    df = df.copy()
    df.columns = names
    for col in names:
        df[col] = _plain(df[col])
    return df


def _plain(s: pd.Series) -> pd.Series:
    """Categorical dtype to its values, text cleaned; a frame built in code gets the file rules too."""
    if isinstance(s.dtype, pd.CategoricalDtype):
        s = s.astype(object)
    return _clean_text(s) if _is_textlike(s) else s


def _is_textlike(s: pd.Series) -> bool:
    return pd.api.types.is_string_dtype(s.dtype) or s.dtype == object


def _clean_text(s: pd.Series) -> pd.Series:
    """Strip whitespace and turn missing tokens into NaN (text columns only)."""
    if pd.api.types.is_string_dtype(s.dtype) and s.dtype != object:
        s = s.str.strip()
    elif s.dtype == object:
        s = s.map(lambda v: v.strip() if isinstance(v, str) else v)
    else:
        return s
    return s.mask(s.isin(MISSING_TOKENS))


# --------------------------------------------------------------------------- typing helpers


def category_text(value: Any) -> str:
    """The text of one categorical value or class label.

    Numbers become their shortest form with integer-valued floats as ``"1"`` (not ``"1.0"``),
    so CSV text, Parquet ints and Parquet floats of the same value agree. Text with leading zeros
    (codes such as ``"007"``) and very long digit strings (ids) is kept exactly.
    """
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    if isinstance(value, (bool, np.bool_)):
        return "True" if value else "False"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        f = float(value)
        if math.isnan(f):
            return ""
        if f.is_integer():
            return str(int(f))
        return repr(f)
    text = str(value).strip()
    if text in MISSING_TOKENS:
        return ""
    if _LEADING_ZERO_RE.match(text):
        return text
    if _INT_RE.match(text):
        return str(int(text))
    if _NUMBER_RE.match(text):
        f = float(text)
        if math.isfinite(f):
            if f.is_integer() and abs(f) < 2**53:
                return str(int(f))
            return repr(f)
    return text


def _category_series(s: pd.Series) -> pd.Series:
    """Object column of str, "" for missing; maps distinct values once for speed."""
    present = s.notna()
    out = pd.Series("", index=s.index, dtype=object)
    if present.any():
        vals = s[present]
        uniq = pd.unique(vals.to_numpy(dtype=object))
        mapping = {u: category_text(u) for u in uniq}
        out[present] = vals.map(mapping).astype(object)
    return out


def _is_boolean(s: pd.Series) -> bool:
    if pd.api.types.is_bool_dtype(s.dtype):
        return True
    return s.dtype == object and pd.api.types.infer_dtype(s, skipna=True) == "boolean"


def _numbers(s: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Float view of a column and a mask of present values that are not numbers."""
    present = s.notna().to_numpy()
    if pd.api.types.is_numeric_dtype(s.dtype) and not pd.api.types.is_bool_dtype(s.dtype):
        values = s.to_numpy(dtype="float64", na_value=np.nan)
    else:
        conv = pd.to_numeric(s, errors="coerce")
        values = conv.to_numpy(dtype="float64", na_value=np.nan)
    bad = present & np.isnan(values)
    return values, bad


def _examples(s: pd.Series, mask: np.ndarray, lines: np.ndarray) -> str:
    idx = np.flatnonzero(mask)[:_EXAMPLES]
    parts = [f"'{_short(str(s.iloc[i]), 30)}' at line {int(lines[i])}" for i in idx]
    more = ", ..." if mask.sum() > len(idx) else ""
    return ", ".join(parts) + more


def _inf_check(values: np.ndarray, col: str, lines: np.ndarray, source: str) -> None:
    inf = np.isinf(values)
    if inf.any():
        where = ", ".join(str(int(x)) for x in lines[np.flatnonzero(inf)[:_EXAMPLES]])
        raise InputError(
            f"{source}: column '{col}' has infinite values (line {where}{', ...' if inf.sum() > _EXAMPLES else ''}): "
            "replace them with finite numbers or leave the cells empty"
        )


def _sort_labels(labels: Sequence[str]) -> list[str]:
    """Numeric-looking labels sort by value ("2" before "10"), others lexicographically."""
    labels = list(labels)
    try:
        keys = [float(x) for x in labels]
    except ValueError:
        return sorted(labels)
    if any(math.isnan(k) for k in keys):
        return sorted(labels)
    return [x for _, x in sorted(zip(keys, labels))]


# --------------------------------------------------------------------------- prepare


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
        raise InputError(f"{source}: duplicate column names {_quote_list(dups)}: rename them so each is unique")
    if task not in ("auto", "regression", "classification"):
        raise InputError(f"unknown task '{task}': use auto, regression or classification")
    categorical = [str(c) for c in categorical]
    ignore = [str(c) for c in ignore]

    if target not in columns:
        raise InputError(f"{source}: no target column '{target}'{_suggest(target, columns)}")
    for flag, names in (("--categorical", categorical), ("--ignore", ignore)):
        for name in names:
            if name not in columns:
                raise InputError(f"{source}: {flag} names column '{name}', which is not in the file{_suggest(name, columns)}")
        if target in names:
            raise InputError(f"{source}: '{target}' is the target; it cannot also be given to {flag}: remove it from {flag}")

    notes: list[str] = []
    n_all = len(df)
    all_lines = np.arange(n_all) + 2

    # -- target
    y_raw = _plain(df[target])
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
        full = _plain(df[col])
        kind, typed, reason = _type_column(col, full, keep, col in categorical, lines, source)
        if reason:
            dropped[col] = reason
            notes.append(f"dropped column '{col}': {_REASON_TEXT[reason]}")
            continue
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
    is_bool = _is_boolean(y)
    values, bad = (np.full(len(y), np.nan), np.ones(len(y), bool)) if is_bool else _numbers(y)
    numeric = not is_bool and not bad.any()
    share_numeric = 1.0 - bad.mean()
    if not numeric and not is_bool and share_numeric >= _MOSTLY_NUMERIC and task != "classification":
        raise InputError(
            f"{source}: target '{target}' is numeric but has {_count(int(bad.sum()), 'text value')} "
            f"({_examples(y, bad, lines)}): fix them or pass --task classification"
        )
    if numeric:
        _inf_check(values, target, lines, source)
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
            f"({_examples(y, bad, lines)}): use --task classification or fix the values"
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

    labels = _category_series(pd.Series(values) if numeric else y)
    classes = _sort_labels(sorted(set(labels)))
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
    if not force_cat and not _is_boolean(s):
        values_full, bad_full = _numbers(full)  # parse once: this is the slow step on big files
        values, bad = values_full[keep], bad_full[keep]
        if not bad.any():
            kind = "numeric"
        elif 1.0 - bad.sum() / present.sum() >= _MOSTLY_NUMERIC:
            raise InputError(
                f"{source}: column '{col}' is numeric but has {_count(int(bad.sum()), 'text value')} "
                f"({_examples(s, bad, lines)}): fix them or pass --categorical {shlex.quote(col)}"
            )

    if kind == "numeric":
        _inf_check(values, col, lines, source)
        if len(np.unique(values[present])) == 1:
            return kind, s, "constant"
        if _is_row_counter(values_full, bad_full):
            return kind, s, "id-like"
        return kind, pd.Series(values, dtype="float64"), None

    typed = _category_series(s)
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


# --------------------------------------------------------------------------- load / scoring


def load(
    path: str | os.PathLike[str],
    target: str,
    *,
    task: str = "auto",
    categorical: Sequence[str] = (),
    ignore: Sequence[str] = (),
    min_rows: int = 40,
) -> Table:
    """Read a file and prepare it (see :func:`read_table`, :func:`prepare`)."""
    df = read_table(path)
    return prepare(
        df, target, task=task, categorical=categorical, ignore=ignore, source=str(path), min_rows=min_rows
    )


def coerce_for_scoring(
    df: pd.DataFrame, features: list[Feature], *, source: str, first_row: int = 0
) -> pd.DataFrame:
    """Type new rows exactly like the training data so every model sees the same input.

    Returns only the features' columns (in feature order) and keeps ``df``'s index so the
    caller can line predictions up with other columns of the same chunk. Unseen categories
    pass through; the models decide what they mean.
    """
    missing_cols = [f.name for f in features if f.name not in df.columns]
    if missing_cols:
        raise InputError(
            f"{source}: missing column(s) {_quote_list(missing_cols)} that the model needs: add them (cells may be empty)"
        )
    lines = np.arange(len(df)) + first_row + 2
    out: dict[str, pd.Series] = {}
    for f in features:
        s = df[f.name]
        if isinstance(s, pd.DataFrame):
            raise InputError(f"{source}: duplicate column '{f.name}': rename the copies so each name is unique")
        s = _plain(s)
        if f.kind == "numeric":
            values, bad = _numbers(s)
            if bad.any():
                raise InputError(
                    f"{source}: column '{f.name}' must be numeric but has {_count(int(bad.sum()), 'text value')} "
                    f"({_examples(s, bad, lines)}): fix them or leave the cells empty"
                )
            _inf_check(values, f.name, lines, source)
            out[f.name] = pd.Series(values, index=df.index, dtype="float64")
        else:
            out[f.name] = _category_series(s)
    return pd.DataFrame(out, index=df.index, columns=[f.name for f in features])


# --------------------------------------------------------------------------- message helpers


def _suggest(name: str, columns: Sequence[str]) -> str:
    """'; did you mean ...' from close matches, case-insensitive too, plus the column list."""
    lower = {c.lower(): c for c in columns}
    close = [c for c in columns if c.lower() == name.lower()]
    for m in difflib.get_close_matches(name.lower(), list(lower), n=3, cutoff=0.6):
        if lower[m] not in close:
            close.append(lower[m])
    for m in difflib.get_close_matches(name, list(columns), n=3, cutoff=0.6):
        if m not in close:
            close.append(m)
    hint = f"; did you mean {' or '.join(repr(c) for c in close[:3])}?" if close else ""
    shown = list(columns[:20])
    listing = ", ".join(shown) + (", ..." if len(columns) > 20 else "")
    return f"{hint} (columns: {listing})"


def _count(n: int, noun: str) -> str:
    return f"{n} {noun}" + ("" if n == 1 else "s")


def _quote_list(names: Sequence[str]) -> str:
    return ", ".join(f"'{n}'" for n in names)


def _short(text: str, limit: int = 60) -> str:
    text = text.replace("\n", " ").replace("\r", " ")
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _printable(sep: str) -> str:
    return "\\t" if sep == "\t" else sep
