"""The typed schema every stage shares: one :class:`Feature` per input column and the prepared
:class:`Table`.

Fitting, the exports and scoring all read these types, so they live apart from the intake code
that fills them (scoring imports them without loading the readers and screening).
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import pandas as pd


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
