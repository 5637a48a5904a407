"""Reference rows: inputs that exercise every category and missing values, with each model's
prediction computed by the fitting libraries, so any other software can check itself against them.

Missing inputs are written as empty fields, except in a few closing rows whose every input cell
holds one of intake's missing-value texts (``NA``, `` null ``, ...): every printed form reads those
texts from intake's one list, and ``verify`` hands these cells to the forms as text, so a form whose
list has drifted fails verify. A prediction that is not a finite number (an equation with no finite
value there) is written as an empty field, the missing prediction every form gives.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from .design import MISSING_LEVEL
from .intake.values import MISSING_TOKENS


def missing_spellings() -> list[str]:
    """Each non-empty missing-value text once, every other one with surrounding spaces (which
    intake and the forms strip)."""
    return [f" {t} " if i % 2 else t for i, t in enumerate(sorted(t for t in MISSING_TOKENS if t))]


def pick_rows(data: pd.DataFrame, features, test_rows: np.ndarray, seed: int,
              n_random: int = 30) -> tuple[pd.DataFrame, list[str | None]]:
    """Every category level, a missing value in each column that has them, random test rows,
    one row with every input missing, and one such row per missing-value text.

    Returns the rows as the models see them and, per row, the text its input cells are written
    with (None: the values themselves)."""
    rng = np.random.default_rng(seed)
    chosen: list[int] = []
    for f in features:
        col = data[f.name]
        if f.kind == "categorical":
            values = col.fillna(MISSING_LEVEL).astype(str)
            for level in sorted(values.unique()):
                chosen.append(int(np.flatnonzero(values.to_numpy() == level)[0]))
        elif col.isna().any():
            chosen.append(int(np.flatnonzero(col.isna().to_numpy())[0]))
    extra = rng.choice(test_rows, size=min(n_random, len(test_rows)), replace=False)
    order = list(dict.fromkeys(chosen + [int(i) for i in extra]))
    rows = data.iloc[order][[f.name for f in features]].reset_index(drop=True)
    spellings = missing_spellings()
    blank = {f.name: (np.nan if f.kind == "numeric" else MISSING_LEVEL) for f in features}
    out = pd.concat([rows, pd.DataFrame([blank] * (1 + len(spellings)))], ignore_index=True)
    return out, [None] * (len(rows) + 1) + spellings


def prediction_columns(task: str, classes: list[str] | None, model: str) -> list[str]:
    if task == "regression":
        return [f"pred_{model}"]
    return [f"label_{model}"] + [f"prob_{model}_{c}" for c in classes]


def with_predictions(rows: pd.DataFrame, predict, task: str, classes: list[str] | None,
                     models: tuple[str, ...] = ("forest", "tree", "equation")) -> pd.DataFrame:
    """``predict(rows, model)`` gives values or probabilities; add the contract's columns for
    ``models`` (those the bundle holds: no equation columns without an equation). A value that
    is not finite is missing (NaN), and so is the label of a row without probabilities."""
    out = rows.copy()
    for model in models:
        pred = np.asarray(predict(rows, model), dtype=float)
        pred = np.where(np.isfinite(pred), pred, np.nan)
        if task == "regression":
            out[f"pred_{model}"] = pred
        else:
            missing = np.isnan(pred).any(axis=1)
            pred[missing] = np.nan
            best = np.argmax(np.where(missing[:, None], 0.0, pred), axis=1)
            out[f"label_{model}"] = ["" if m else classes[k] for k, m in zip(best, missing)]
            for k, c in enumerate(classes):
                out[f"prob_{model}_{c}"] = pred[:, k]
    return out


def reference_csv(ref: pd.DataFrame, features, spellings: list[str | None]) -> bytes:
    """reference.csv: missing as empty fields, the spelled rows' inputs as their text."""
    out = ref.copy()
    spelled = np.array([s is not None for s in spellings])
    for f in features:
        col = out[f.name].astype(object)
        col[spelled] = [s for s in spellings if s is not None]
        out[f.name] = col
    return out.to_csv(index=False, float_format=None, lineterminator="\n").encode()
