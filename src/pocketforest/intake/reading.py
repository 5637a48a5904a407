"""Reading CSV/TSV/Parquet files and Excel workbooks, whole or in chunks, with every file problem
as one clear line.

CSV/TSV files are read as text and typed column by column later (not by pandas' guesses),
because a single stray word in a numeric column should be reported, not silently turn the column
into categories. A workbook's first sheet is read as the text a CSV saved from it would hold, so it
is typed and checked exactly like one. Column names and missing-value text are cleaned the same
way for every format.
"""
from __future__ import annotations

import csv
import datetime as dt
import os
import re
import warnings
from collections.abc import Iterator, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..errors import InputError
from .messages import SEMICOLON_HINT, printable, quote_list, shorten
from .values import clean_text, decimal_points, number_text, plain

#: A file's kind by extension: a CSV/TSV delimiter, None for Parquet, WORKBOOK for Excel.
WORKBOOK = "workbook"
_EXTENSIONS = {".csv": ",", ".tsv": "\t", ".parquet": None, ".xlsx": WORKBOOK}
#: What the readers take, for messages.
KINDS_TEXT = ".csv, .tsv, .parquet or .xlsx"
_DELIMITER_NAMES = {",": "comma", "\t": "tab", ";": "semicolon", "|": "pipe"}


def read_table(path: str | os.PathLike[str], columns: Sequence[str] | None = None, *,
               decimal_comma: bool = False) -> pd.DataFrame:
    """Read a whole CSV/TSV/Parquet file or a workbook's first sheet into a frame with missing
    values as NaN.

    CSV/TSV columns stay text (typing happens in :func:`prepare` / :func:`coerce_for_scoring`);
    Parquet columns keep their native types, with text columns cleaned the same way as CSV.
    ``columns`` reads only those columns (the ones absent from the file are skipped silently so
    :func:`coerce_for_scoring` can name them all at once); parsing text is the slow part.
    ``decimal_comma``: the numbers are written 6,8 and a .csv is semicolon-separated, as
    spreadsheets save text where the comma is the decimal mark (R's ``read.csv2`` convention).
    """
    p, sep = _check_path(path, decimal_comma)
    if sep == WORKBOOK:
        return _read_workbook(p, columns)
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
    df = _finish_csv_frame(df, names, p, decimal_comma)
    df.attrs["file_header"] = header   # every name in the file, for hints when a selection misses
    return df


def parquet_chunks(path: Path, batches, first: int) -> Iterator[tuple[int, pd.DataFrame]]:
    """``(first_row, frame)`` for each pyarrow record batch, cleaned like :func:`read_table`; a
    batch pyarrow cannot read is one input error naming the file. Returns the row after the last."""
    while True:
        try:
            batch = next(batches, None)
        except (OSError, ValueError) as exc:  # pyarrow's ArrowInvalid is a ValueError
            raise _parquet_error(path, exc) from None
        if batch is None:
            break
        frame = _clean_parquet_frame(batch.to_pandas(), path)
        yield first, frame
        first += len(frame)
    return first   # the row after the last one (0: the file had no data rows)


def iter_table(
    path: str | os.PathLike[str], chunksize: int = 100_000, columns: Sequence[str] | None = None, *,
    decimal_comma: bool = False,
) -> Iterator[tuple[int, pd.DataFrame]]:
    """Yield ``(first_row, frame)`` chunks so big files can be scored in bounded memory.

    ``first_row`` is the 0-based data row of the chunk's first row (pass it to
    :func:`coerce_for_scoring` so line numbers in errors are right); each frame has a fresh
    0-based index and is cleaned exactly like :func:`read_table` (``columns`` and
    ``decimal_comma`` as there).
    """
    p, sep = _check_path(path, decimal_comma)
    first = 0
    if sep == WORKBOOK:   # a sheet holds at most 1,048,576 rows: read whole, handed out in chunks
        whole = _read_workbook(p, columns)
        for start in range(0, len(whole), chunksize):
            chunk = whole.iloc[start:start + chunksize].reset_index(drop=True)
            chunk.attrs = dict(whole.attrs)
            yield start, chunk
        return
    if sep is None:
        import pyarrow.parquet as pq

        try:
            pf = pq.ParquetFile(p)
            raw = _parquet_selection(pf.schema_arrow.names, columns)
            batches = pf.iter_batches(batch_size=chunksize, columns=raw)
        except (OSError, ValueError) as exc:  # pyarrow's ArrowInvalid is a ValueError
            raise _parquet_error(p, exc) from None
        first = yield from parquet_chunks(p, batches, first)
    else:
        header = _csv_header(p, sep)
        names, kwargs = _csv_selection(header, columns, sep)
        with _csv_errors(p, sep, header):
            reader = pd.read_csv(p, chunksize=chunksize, **kwargs)
        try:
            while True:
                # the warnings filter must not stay active while the caller runs, so enter per chunk
                with _csv_errors(p, sep, header):
                    chunk = next(reader, None)
                if chunk is None:
                    break
                chunk = _finish_csv_frame(chunk.reset_index(drop=True), names, p, decimal_comma)
                chunk.attrs["file_header"] = header
                yield first, chunk
                first += len(chunk)
        finally:
            reader.close()   # also when the caller stops early (an error in a later chunk)
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


def _check_path(path: str | os.PathLike[str], decimal_comma: bool = False) -> tuple[Path, str | None]:
    """Validate extension and existence before any parser gets a chance to fail obscurely; the
    delimiter (a .csv written with decimal commas is semicolon-separated)."""
    p = Path(path)
    ext = p.suffix.lower()
    if ext not in _EXTENSIONS:
        shown = f"'{p.suffix}'" if p.suffix else "no extension"
        raise InputError(
            f"{p}: unsupported file type ({shown}): use a {KINDS_TEXT} file"
        )
    if not p.exists():
        raise InputError(f"{p}: file not found: check the path")
    if p.is_dir():
        raise InputError(f"{p}: is a directory, not a data file: give the path of a {KINDS_TEXT} file")
    try:
        size = p.stat().st_size
        with open(p, "rb"):
            pass
    except OSError as exc:
        raise InputError(f"{p}: cannot be read ({exc.strerror or exc}): check the file permissions") from None
    if size == 0:
        raise InputError(f"{p}: is empty: it needs a header line and data rows")
    sep = _EXTENSIONS[ext]
    if decimal_comma and sep in (None, WORKBOOK):
        raise InputError(_parquet_decimal_comma(p))
    return p, (";" if decimal_comma and sep == "," else sep)


def _parquet_decimal_comma(p: Path) -> str:
    kind = "an Excel workbook" if p.suffix.lower() == ".xlsx" else "a Parquet file"
    return f"{p}: --decimal-comma is for .csv and .tsv files: {kind} stores its numbers as numbers; drop the option"


def whole_files_only(p: Path, what: str) -> InputError:
    """For readers that split files (DuckDB sampling, the cluster's pieces): a workbook is read whole."""
    return InputError(f"{p}: {what} reads .csv, .tsv and .parquet files; a workbook's sheet is read whole "
                      "(at most 1,048,576 rows): drop the option, or save the sheet as .csv or .parquet")


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
            first: list[str] = []   # the first data row, to tell a stray delimiter from a name
            reader = csv.reader(fh, delimiter=sep)
            for row in reader:
                if any(cell.strip() for cell in row):
                    break
            else:
                row = []
            if len(row) == 1:
                first = next((r for r in reader if any(cell.strip() for cell in r)), [])
    except UnicodeDecodeError:
        raise _not_utf8(p) from None
    except csv.Error as exc:
        raise InputError(f"{p}: header line cannot be parsed ({exc}): fix the quoting in the first line") from None
    if not row:
        raise InputError(f"{p}: is empty: it needs a header line and data rows")
    header = [cell.strip() for cell in row]
    if len(header) == 1:
        _check_delimiter(p, sep, header[0], first[0] if len(first) == 1 else None)
    blank = [str(i + 1) for i, name in enumerate(header) if not name]
    if blank:
        where = "position" if len(blank) == 1 else "positions"
        raise InputError(
            f"{p}: column {where} {', '.join(blank)} of the header {'has' if len(blank) == 1 else 'have'} "
            f"no name: give every column a name in the first line (or remove empty trailing columns)"
        )
    dups = sorted({name for name in header if header.count(name) > 1})
    if dups:
        raise InputError(f"{p}: duplicate column names {quote_list(dups)}: rename them so each is unique")
    return header


def _check_delimiter(p: Path, sep: str, only: str, row: str | None) -> None:
    """A one-column header that another delimiter splits into names, over a first data row that
    holds it too (or no data row), means the file is split wrongly; a single column may still be
    called ``;`` or ``dose; mg`` (the fuzz test met one)."""
    for other in ("\t", ";", ",", "|"):
        parts = only.split(other)
        if other == sep or sum(1 for part in parts if part.strip()) < 2:
            continue
        if row is None or other in row:
            if other == "\t":
                hint = "rename it to .tsv"
            elif other == "," and sep == ";":   # only with --decimal-comma
                hint = "drop --decimal-comma (with it a .csv is read as semicolon-separated)"
            elif other == ",":
                hint = "rename it to .csv"
            elif other == ";" and sep == ",":
                hint = ("pass --decimal-comma if its numbers are written 6,8 (a .csv is then read as "
                        "semicolon-separated), or re-save it comma-separated")
            else:
                hint = "re-save it comma-separated as .csv (or tab-separated as .tsv)"
            raise InputError(
                f"{p}: header '{shorten(only)}' looks {_DELIMITER_NAMES[other]}-separated, but a "
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
                semicolons = self.sep == "," and ";" in ",".join(self.header)
                hint = f" or, {SEMICOLON_HINT}" if semicolons else ""
                raise InputError(
                    f"{p}: line {line} has {saw} fields but the header has {len(self.header)}: "
                    f"fix that row (quote values containing '{printable(self.sep)}'){hint}"
                ) from None
            raise InputError(f"{p}: cannot be parsed as {_DELIMITER_NAMES[self.sep]}-separated text ({shorten(str(exc))}): check quoting and delimiters") from None
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


def _finish_csv_frame(df: pd.DataFrame, header: list[str], p: Path, decimal_comma: bool = False) -> pd.DataFrame:
    """Put back the exact header names and apply the missing-value rules (and, for a file with
    decimal commas, rewrite its numbers with points)."""
    if not header:  # a column selection that matched nothing: keep the row count only
        return df.iloc[:, :0]
    if len(df.columns) != len(header):  # defensive: pandas and csv disagree on the header
        raise InputError(f"{p}: header has {len(header)} names but pandas found {len(df.columns)} columns: check quoting in the first line")
    df.columns = header
    _check_short_rows(df, p)
    for col in header:
        df[col] = clean_text(df[col])
        if decimal_comma:
            df[col] = decimal_points(df[col])
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
                f"{p}: line {line} holds one field with '{printable(other)}' in it while the header has "
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
        f"{p}: cannot be read as Parquet ({shorten(str(exc).splitlines()[0] if str(exc) else type(exc).__name__)}): "
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
        raise InputError(f"{p}: duplicate column names {quote_list(dups)}: rename them so each is unique")
    df = df.copy()
    df.columns = names
    for col in names:
        df[col] = plain(df[col])
    return df


def _cell_text(value: Any) -> str:
    """One workbook cell as a CSV saved from the sheet would hold it: numbers in full precision,
    dates as ISO 8601 (the time only when it is not midnight), TRUE/FALSE, empty for no value."""
    if value is None or value == "":
        return ""
    if isinstance(value, bool):
        return "TRUE" if value else "FALSE"
    number = number_text(value)
    if number is not None:
        return number
    if isinstance(value, dt.datetime):
        return value.date().isoformat() if value.time() == dt.time(0) else value.isoformat(sep=" ")
    if isinstance(value, (dt.date, dt.time)):
        return value.isoformat()
    return str(value)


def _read_workbook(p: Path, columns: Sequence[str] | None = None) -> pd.DataFrame:
    """The first sheet of an .xlsx workbook (openpyxl through pandas), as text like a CSV: the first
    non-empty row names the columns; empty rows are skipped; a column with neither a name nor a
    value (the sheet's used range reaching past the table) is left out. Formula cells give the
    value the spreadsheet last saved. ``attrs["sheet"]``: the sheet read and how many there are."""
    import zipfile

    from openpyxl.utils import get_column_letter

    try:
        with pd.ExcelFile(p, engine="openpyxl") as book:
            sheets = book.sheet_names
            raw = pd.read_excel(book, sheet_name=sheets[0], header=None, dtype=object, keep_default_na=False,
                                na_filter=False)
    except (zipfile.BadZipFile, KeyError, ValueError, OSError) as exc:
        raise InputError(f"{p}: cannot be read as an Excel workbook ({shorten(str(exc) or type(exc).__name__)}): "
                         "save it again from the spreadsheet as .xlsx") from None
    text = raw.map(_cell_text) if len(raw.columns) else raw
    text = text[(text != "").any(axis=1)] if len(text.columns) else text
    if len(text) == 0:
        raise InputError(f"{p}: sheet '{sheets[0]}' is empty: it needs a header row and data rows")
    header = [h.strip() for h in text.iloc[0]]
    body = text.iloc[1:].reset_index(drop=True)
    used = [i for i, h in enumerate(header) if h or (body.iloc[:, i] != "").any()]
    blank = [get_column_letter(int(raw.columns[i]) + 1) for i in used if not header[i]]
    if blank:
        raise InputError(f"{p}: column {', '.join(blank)} of sheet '{sheets[0]}' has values but no name: give "
                         "every column a name in the header row")
    header = [header[i] for i in used]
    body = body.iloc[:, used]
    dups = sorted({n for n in header if header.count(n) > 1})
    if dups:
        raise InputError(f"{p}: duplicate column names {quote_list(dups)}: rename them so each is unique")
    body.columns = header
    if len(body) == 0:
        raise InputError(f"{p}: sheet '{sheets[0]}' has a header but no data rows: add rows below the header")
    if columns is not None:
        wanted = set(map(str, columns))
        body = body[[c for c in header if c in wanted]]
    df = pd.DataFrame({c: clean_text(body[c].astype(object)) for c in body.columns}, index=body.index)
    df.attrs["file_header"] = header
    df.attrs["sheet"] = {"name": str(sheets[0]), "sheets": len(sheets)}
    return df
