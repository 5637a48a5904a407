"""The raw-column design every model shares: named inputs, imputation, category encoding.

All three models see the same raw columns through the same fitted preprocessing, so their ONNX
graphs take identical inputs and a caller never encodes anything by hand.

Policy (documented in the README): a missing number is replaced by the median of the discovery
rows; a missing category is its own level, the empty string; a category never seen in training
sets every indicator of that column to zero (the trees treat it as "none of the known levels", the
equation as its reference level) and is counted as outside the training envelope when scoring.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from sklearn.compose import ColumnTransformer
from sklearn.impute import SimpleImputer
from sklearn.preprocessing import OneHotEncoder

from .features import Feature

MISSING_LEVEL = ""


@dataclass(frozen=True)
class DesignColumn:
    """One column after preprocessing: a numeric feature, or one level of a categorical one."""
    feature: str
    level: str | None  # None for numeric


def model_frame(data: pd.DataFrame, features: list[Feature]) -> pd.DataFrame:
    """Raw feature columns renamed to their ONNX input names, typed as the graphs expect."""
    out = {}
    for f in features:
        col = data[f.name]
        if f.kind == "numeric":
            out[f.onnx_input] = pd.to_numeric(col, errors="coerce").astype("float64")
        else:
            out[f.onnx_input] = col.fillna(MISSING_LEVEL).astype(str).astype(object)
    return pd.DataFrame(out, index=data.index)


def encoded_levels(feature: Feature, data: pd.DataFrame) -> list[str]:
    """Every level known at intake, plus the missing level when the table has missing values."""
    levels = list(feature.categories or [])
    if (data[feature.name].fillna(MISSING_LEVEL).astype(str) == MISSING_LEVEL).any():
        levels = [MISSING_LEVEL] + [v for v in levels if v != MISSING_LEVEL]
    return levels


def make_preprocessor(features: list[Feature], data: pd.DataFrame) -> tuple[ColumnTransformer, list[DesignColumn]]:
    """An unfitted ColumnTransformer and the design columns it will produce, in order."""
    numeric = [f for f in features if f.kind == "numeric"]
    categorical = [f for f in features if f.kind == "categorical"]
    parts = []
    columns: list[DesignColumn] = []
    if numeric:
        parts.append(("num", SimpleImputer(strategy="median", keep_empty_features=True),
                      [f.onnx_input for f in numeric]))
        columns += [DesignColumn(f.name, None) for f in numeric]
    if categorical:
        cats = [encoded_levels(f, data) for f in categorical]
        parts.append(("cat", OneHotEncoder(categories=cats, handle_unknown="ignore",
                                           sparse_output=False, dtype=np.float64),
                      [f.onnx_input for f in categorical]))
        for f, levels in zip(categorical, cats):
            columns += [DesignColumn(f.name, lv) for lv in levels]
    return ColumnTransformer(parts, remainder="drop", sparse_threshold=0.0), columns


def fill_values(preprocessor: ColumnTransformer, features: list[Feature]) -> dict[str, float | str]:
    """The value a missing input becomes, per feature: the median, or the missing level."""
    fills: dict[str, float | str] = {}
    numeric = [f for f in features if f.kind == "numeric"]
    if numeric:
        imputer = preprocessor.named_transformers_["num"]
        for f, v in zip(numeric, imputer.statistics_):
            fills[f.name] = float(v)
    for f in features:
        if f.kind == "categorical":
            fills[f.name] = MISSING_LEVEL
    return fills
