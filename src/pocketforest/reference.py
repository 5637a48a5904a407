"""Reference rows: inputs that exercise every category and missing values, with each model's
prediction computed by the fitting libraries, so any other software can check itself against them.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from .design import MISSING_LEVEL


def pick_rows(data: pd.DataFrame, features, test_rows: np.ndarray, seed: int, n_random: int = 30) -> pd.DataFrame:
    """Every category level, a missing value in each column that has them, random test rows,
    and one row with every input missing."""
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
    blank = {f.name: (np.nan if f.kind == "numeric" else MISSING_LEVEL) for f in features}
    return pd.concat([rows, pd.DataFrame([blank])], ignore_index=True)


def prediction_columns(task: str, classes: list[str] | None, model: str) -> list[str]:
    if task == "regression":
        return [f"pred_{model}"]
    return [f"label_{model}"] + [f"prob_{model}_{c}" for c in classes]


def with_predictions(rows: pd.DataFrame, predict, task: str, classes: list[str] | None) -> pd.DataFrame:
    """``predict(rows, model)`` gives values or probabilities; add the contract's columns."""
    out = rows.copy()
    for model in ("forest", "tree", "equation"):
        pred = predict(rows, model)
        if task == "regression":
            out[f"pred_{model}"] = np.asarray(pred, dtype=float)
        else:
            proba = np.asarray(pred, dtype=float)
            out[f"label_{model}"] = [classes[k] for k in np.argmax(proba, axis=1)]
            for k, c in enumerate(classes):
                out[f"prob_{model}_{c}"] = proba[:, k]
    return out
