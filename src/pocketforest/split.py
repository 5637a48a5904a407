"""Seeded discovery / confirmation / test splits.

The three parts are disjoint on purpose: discovery rows choose terms and grow the forest,
confirmation rows estimate and test the equation, test rows judge every model. Keeping them apart
is what makes the p-values and accuracy figures honest (Cox 1975).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import InputError


@dataclass(frozen=True)
class Splits:
    discovery: np.ndarray
    confirmation: np.ndarray
    test: np.ndarray

    def sizes(self) -> dict[str, int]:
        return {"discovery": len(self.discovery), "confirmation": len(self.confirmation),
                "test": len(self.test)}


def parse_fractions(text: str) -> tuple[float, float, float]:
    """Read ``D,C,T`` (shares or any positive weights) into three shares that sum to one."""
    parts = [p.strip() for p in str(text).split(",")]
    try:
        values = [float(p) for p in parts]
    except ValueError:
        raise InputError(f"--split '{text}' is not three numbers: write it like 0.5,0.25,0.25") from None
    if len(values) != 3 or any(not np.isfinite(v) or v <= 0 for v in values):
        raise InputError(f"--split '{text}' needs three positive numbers D,C,T, for example 0.5,0.25,0.25")
    total = sum(values)
    return values[0] / total, values[1] / total, values[2] / total


def make_splits(n_rows: int, fractions: tuple[float, float, float], seed: int,
                strata: np.ndarray | None = None) -> Splits:
    """Split row positions; stratified on ``strata`` (class labels) when given."""
    d, c, t = fractions
    idx = np.arange(n_rows)
    n_test = int(round(t * n_rows))
    n_conf = int(round(c * n_rows))
    parts = (n_conf, n_rows - n_test - n_conf) + ((n_test,) if t > 0 else ())
    if min(parts) < 10:
        raise InputError(f"too few rows ({n_rows}) for the splits {d:.2f}/{c:.2f}/{t:.2f}: "
                         "each part needs at least 10 rows; add rows or change --split")
    from sklearn.model_selection import train_test_split  # here, so `--split` is checked without loading it

    try:
        if n_test == 0:   # no test split: the small-data plan judges by cross-validation instead
            rest, test = idx, np.array([], dtype=int)
        else:
            rest, test = train_test_split(idx, test_size=n_test, random_state=seed,
                                          stratify=None if strata is None else strata)
        disc, conf = train_test_split(rest, test_size=n_conf, random_state=seed + 1,
                                      stratify=None if strata is None else strata[rest])
    except ValueError as exc:
        raise InputError(f"cannot split the rows {d:.2f}/{c:.2f}/{t:.2f} with every class in each "
                         f"part ({exc}); add rows of the rare class or change --split") from None
    return Splits(np.sort(disc), np.sort(conf), np.sort(test))
