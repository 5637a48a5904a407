"""Small tables and helpers shared by the intake tests (invented data: synthetic cases)."""
from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest

from pocketforest.errors import InputError

N = 60


def frame(n: int = N, seed: int = 0) -> pd.DataFrame:
    """A small mixed table as text, like read_table returns for a CSV."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n).round(3)
    return pd.DataFrame(
        {
            "x": [str(v) for v in x],
            "color": [["red", "green", "blue"][i % 3] for i in range(n)],
            "y": [str(round(2 * v + rng.normal(), 3)) for v in x],
        }
    )


def write(tmp_path, name: str, text: str | bytes):
    path = tmp_path / name
    if isinstance(text, bytes):
        path.write_bytes(text)
    else:
        path.write_text(text, encoding="utf-8")
    return path


def csv_text(df: pd.DataFrame, sep: str = ",") -> str:
    return df.to_csv(index=False, sep=sep, lineterminator="\n")


def raises(match: str, func, *args, **kwargs) -> str:
    with pytest.raises(InputError) as info:
        func(*args, **kwargs)
    msg = str(info.value)
    assert "\n" not in msg, msg
    assert re.search(match, msg), msg
    return msg
