"""Pieces of the one-line error messages: quoting, plurals, examples with line numbers, suggestions."""
from __future__ import annotations

import difflib
from collections.abc import Sequence

import numpy as np
import pandas as pd

from ..errors import InputError
from .values import MISSING_TOKENS

#: How many offending values a message quotes.
EXAMPLES = 3


def suggest(name: str, columns: Sequence[str]) -> str:
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


def plural(n: int, noun: str) -> str:
    return f"{n} {noun}" + ("" if n == 1 else "s")


def quote_list(names: Sequence[str]) -> str:
    return ", ".join(f"'{n}'" for n in names)


def shorten(text: str, limit: int = 60) -> str:
    text = text.replace("\n", " ").replace("\r", " ")
    return text if len(text) <= limit else text[: limit - 3] + "..."


def printable(sep: str) -> str:
    return "\\t" if sep == "\t" else sep


def examples(s: pd.Series, mask: np.ndarray, lines: np.ndarray) -> str:
    idx = np.flatnonzero(mask)[:EXAMPLES]
    parts = [f"'{shorten(str(s.iloc[i]), 30)}' at line {int(lines[i])}" for i in idx]
    more = ", ..." if mask.sum() > len(idx) else ""
    return ", ".join(parts) + more


#: Spellings of "missing" that spreadsheets and other packages write but that are not missing here
#: (values.MISSING_TOKENS is the list every export shares): lower case after stripping.
MISSING_LOOKALIKES = frozenset({"n/a", "na", "n.a.", "#n/a", "nan", "null", "none", "missing", "-", "--", "?", ".",
                                "not available", "unknown"})


def missing_hint(s: pd.Series, mask: np.ndarray) -> str:
    """A hint for text values that all look like a way of writing "missing": read as text they
    stop a numeric column, and the user's fix is to blank them, not to make the column a category."""
    texts = {str(v).strip().lower() for v in s[mask]}
    if texts and texts <= MISSING_LOOKALIKES:
        return ("; if they mean missing, leave those cells empty or write NA (the texts read as missing: "
                + ", ".join(sorted(t for t in MISSING_TOKENS if t)) + ")")
    return ""


#: The largest magnitude a model input can carry: every ONNX graph takes numbers as float32.
FLOAT32_MAX = float(np.finfo(np.float32).max)


def check_finite(values: np.ndarray, col: str, lines: np.ndarray, source: str) -> None:
    """Infinite numbers, and numbers beyond float32's range (they would reach the models as
    infinities), are input errors."""
    inf = np.isinf(values)
    if inf.any():
        where = ", ".join(str(int(x)) for x in lines[np.flatnonzero(inf)[:EXAMPLES]])
        raise InputError(
            f"{source}: column '{col}' has infinite values (line {where}{', ...' if inf.sum() > EXAMPLES else ''}): "
            "replace them with finite numbers or leave the cells empty"
        )
    with np.errstate(invalid="ignore"):
        huge = np.abs(values) > FLOAT32_MAX
    if huge.any():
        where = ", ".join(str(int(x)) for x in lines[np.flatnonzero(huge)[:EXAMPLES]])
        raise InputError(
            f"{source}: column '{col}' has values beyond ±3.4e38 (line {where}{', ...' if huge.sum() > EXAMPLES else ''}), "
            "more than the models' 32-bit inputs hold: rescale the column or leave those cells empty"
        )


def numbers_as_text_message(kind: str, source: str, what: str, shown: str, other: str = "") -> str:
    """The error for numbers written another way (``values.numbers_as_text``): read as text they
    would silently become categories (or classes).
    ``other``: the way to keep them as text, added at the end."""
    option = "pass --decimal-comma to read them as numbers (a .csv is then read as semicolon-separated)"
    tail = f", {other}" if other else ""
    if kind == "percent":
        return (f"{source}: {what} holds percentages ({shown}): save them as plain numbers (12 or 0.12, "
                f"not 12%){tail}")
    if kind == "decimal":
        return f"{source}: {what} holds numbers written with a decimal comma ({shown}): {option}{tail}"
    if kind == "thousands":
        return (f"{source}: {what} holds numbers with commas between their thousands ({shown}): save them "
                f"without the separators (1234567, not 1,234,567){tail}")
    return (f"{source}: {what} holds numbers with a comma before three digits ({shown}): if the comma "
            f"separates thousands, save them without it (23453, not 23,453); if it is the decimal mark, "
            f"{option}" + (f"; {other}" if other else ""))


#: the hint added where a semicolon-separated file may have been read as comma-separated
SEMICOLON_HINT = "if the file is semicolon-separated with numbers written 6,8, pass --decimal-comma"
