"""Value normalisation: one set of rules for what a cell means, shared by fitting and scoring.

Text is stripped and the missing-value tokens become NaN; categorical values and class labels get
one canonical text (:func:`category_text`) whether they came from CSV text, Parquet integers or
floats; numbers are parsed with a mask of the present cells that are not numbers, so callers can
report them instead of silently treating a column as categories.
"""
from __future__ import annotations

import math
import re
from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

#: Text values (after stripping whitespace) that mean "missing"; the empty string too.
MISSING_TOKENS: frozenset[str] = frozenset({"", "NA", "N/A", "NaN", "nan", "null", "NULL", "None"})

_INT_RE = re.compile(r"^[+-]?\d+$")
_NUMBER_RE = re.compile(r"^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?$")
#: a number written with a decimal comma, as spreadsheets save it where the comma is the decimal
#: mark: 6,8  -0,25  ,5  1,5E-3 (no thousands separators: "1.234,5" stays text)
DECIMAL_COMMA = r"[+-]?(?:\d+,\d*|,\d+)(?:[eE][+-]?\d+)?"
#: a number with commas grouping its thousands: 23,453  1,234,567  -1,234.5
THOUSANDS = r"[+-]?\d{1,3}(?:,\d{3})+(?:\.\d+)?"
#: a percentage: 12%  -3.5%  12 %
PERCENT = r"[+-]?(?:\d+\.?\d*|\.\d+)\s?%"
#: how spreadsheets write dates: ISO 8601 first, then day or month first with slashes or dots
DATE_FORMATS = ("ISO8601", "%d/%m/%Y", "%m/%d/%Y", "%d.%m.%Y")
_LEADING_ZERO_RE = re.compile(r"^[+-]?0\d")


def plain(s: pd.Series) -> pd.Series:
    """Categorical dtype to its values, text cleaned; a frame built in code gets the file rules too."""
    if isinstance(s.dtype, pd.CategoricalDtype):
        s = s.astype(object)
    return clean_text(s) if _is_textlike(s) else s


def _is_textlike(s: pd.Series) -> bool:
    return pd.api.types.is_string_dtype(s.dtype) or s.dtype == object


def clean_text(s: pd.Series) -> pd.Series:
    """Strip whitespace and turn missing tokens into NaN (text columns only)."""
    if pd.api.types.is_string_dtype(s.dtype) and s.dtype != object:
        s = s.str.strip()
    elif s.dtype == object:
        s = s.map(lambda v: v.strip() if isinstance(v, str) else v)
    else:
        return s
    return s.mask(s.isin(MISSING_TOKENS))


def decimal_points(s: pd.Series) -> pd.Series:
    """A text column with every decimal-comma number rewritten with a point (6,8 -> 6.8) and all
    other text unchanged: how a file read with ``--decimal-comma`` reaches the typing step."""
    if not _is_textlike(s):
        return s
    comma = s.str.fullmatch(DECIMAL_COMMA, na=False).to_numpy(dtype=bool)
    if not comma.any():
        return s
    out = s.copy()
    out[comma] = s[comma].str.replace(",", ".", regex=False)
    return out


def numbers_as_text(s: pd.Series, bad: np.ndarray) -> str | None:
    """How the numbers are written when every value of ``s`` that is not a number (``bad``, from
    :func:`parse_numbers`) is a number in another spelling; None otherwise.

    ``"decimal"``: a decimal comma (6,8), the way a decimal-comma locale saves numbers;
    ``"thousands"``: commas grouping thousands (1,234,567 or 1,234.5);
    ``"either"``: one comma before exactly three digits (23,453), which both readings fit;
    ``"percent"``: percentages (12%).
    Read as text, any of them would silently become a category (or a class).
    """
    if not bad.any():
        return None
    distinct = pd.Series(pd.unique(s[bad].to_numpy(dtype=object)), dtype=object).astype(str)   # few, for categories
    if distinct.str.fullmatch(PERCENT).all():
        return "percent"
    decimal = distinct.str.fullmatch(DECIMAL_COMMA)
    grouped = distinct.str.fullmatch(THOUSANDS)
    if not (decimal | grouped).all():
        return None
    if decimal.all():
        return "either" if grouped.all() else "decimal"
    return "thousands" if grouped.all() else None


def date_format(s: pd.Series) -> str | None:
    """The format (:data:`DATE_FORMATS`) every present value of a text column parses with, or None:
    a date read as a category has no order and no distance between its values."""
    distinct = pd.unique(s.dropna().astype(str).to_numpy(dtype=object))
    if len(distinct) < 2 or not all(("-" in v or "/" in v or "." in v) for v in distinct):
        return None
    for fmt in DATE_FORMATS:
        parsed = pd.to_datetime(pd.Series(distinct, dtype=object), format=fmt, errors="coerce")
        if parsed.notna().all():
            return fmt
    return None


def spelling_variants(labels: Sequence[str]) -> list[list[str]]:
    """Groups of labels that differ only in letter case or spacing ("Yes" and "yes", "part shade"
    and "part  shade"), in the order given (callers pass the most common first). They stay
    separate categories: case can mean something (chemical symbols), so the caller says so
    instead of merging them."""
    groups: dict[str, list[str]] = {}
    for label in labels:
        if label:
            groups.setdefault(spelling_key(label), []).append(label)
    return [g for g in groups.values() if len(g) > 1]


def spelling_key(label: str) -> str:
    """A label with its case and spacing ignored (:func:`spelling_variants`)."""
    return " ".join(label.split()).casefold()


def number_text(value: Any) -> str | None:
    """The shortest text of a stored number (integer-valued floats as ``"1"``, NaN as empty), or
    None when ``value`` is not a number: one rule for Parquet values and workbook cells."""
    if isinstance(value, (bool, np.bool_)):
        return None
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        f = float(value)
        if math.isnan(f):
            return ""
        return str(int(f)) if f.is_integer() else repr(f)
    return None


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
    number = number_text(value)
    if number is not None:
        return number
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


def category_series(s: pd.Series) -> pd.Series:
    """Object column of str, "" for missing; maps distinct values once for speed."""
    present = s.notna()
    out = pd.Series("", index=s.index, dtype=object)
    if present.any():
        vals = s[present]
        uniq = pd.unique(vals.to_numpy(dtype=object))
        mapping = {u: category_text(u) for u in uniq}
        out[present] = vals.map(mapping).astype(object)
    return out


def is_boolean(s: pd.Series) -> bool:
    if pd.api.types.is_bool_dtype(s.dtype):
        return True
    return s.dtype == object and pd.api.types.infer_dtype(s, skipna=True) == "boolean"


def parse_numbers(s: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Float view of a column and a mask of present values that are not numbers."""
    present = s.notna().to_numpy()
    if pd.api.types.is_numeric_dtype(s.dtype) and not pd.api.types.is_bool_dtype(s.dtype):
        values = s.to_numpy(dtype="float64", na_value=np.nan)
    else:
        conv = pd.to_numeric(s, errors="coerce")
        values = conv.to_numpy(dtype="float64", na_value=np.nan)
    bad = present & np.isnan(values)
    return values, bad


def sort_labels(labels: Sequence[str]) -> list[str]:
    """Numeric-looking labels sort by value ("2" before "10"), others lexicographically."""
    labels = list(labels)
    try:
        keys = [float(x) for x in labels]
    except ValueError:
        return sorted(labels)
    if any(math.isnan(k) for k in keys):
        return sorted(labels)
    return [x for _, x in sorted(zip(keys, labels))]
