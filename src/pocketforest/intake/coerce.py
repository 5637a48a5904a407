"""Typing new rows for scoring exactly as the training rows were typed.

Used by ``score``, ``compare`` and the Python API on a bundle alone: it needs only the manifest's
feature list, pandas and numpy (no fitting library).
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from ..errors import InputError
from ..features import Feature
from .messages import SEMICOLON_HINT, check_finite, examples, missing_hint, numbers_as_text_message, plural, quote_list
from .values import category_series, numbers_as_text, parse_numbers, plain


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
        # a semicolon-separated .csv read as comma-separated has its names run together
        semicolons = any(";" in str(c) for c in df.attrs.get("file_header", df.columns))
        hint = f"; the header holds semicolons: {SEMICOLON_HINT}" if semicolons else ""
        raise InputError(
            f"{source}: missing column(s) {quote_list(missing_cols)} that the model needs: add them "
            f"(cells may be empty){hint}"
        )
    lines = np.arange(len(df)) + first_row + 2
    out: dict[str, pd.Series] = {}
    for f in features:
        s = df[f.name]
        if isinstance(s, pd.DataFrame):
            raise InputError(f"{source}: duplicate column '{f.name}': rename the copies so each name is unique")
        s = plain(s)
        if f.kind == "numeric":
            values, bad = parse_numbers(s)
            spelled = numbers_as_text(s, bad)
            if spelled:
                raise InputError(numbers_as_text_message(
                    spelled, source, f"column '{f.name}'", examples(s, bad, lines),
                    "or write them with a decimal point" if spelled == "decimal" else ""))
            if bad.any():
                raise InputError(
                    f"{source}: column '{f.name}' must be numeric but has {plural(int(bad.sum()), 'text value')} "
                    f"({examples(s, bad, lines)}): fix them or leave the cells empty{missing_hint(s, bad)}"
                )
            check_finite(values, f.name, lines, source)
            out[f.name] = pd.Series(values, index=df.index, dtype="float64")
        else:
            out[f.name] = category_series(s)
    return pd.DataFrame(out, index=df.index, columns=[f.name for f in features])
