"""Discovery: from the fitted forest to suggested GLM terms.

First version: every variable enters as a main effect (linear for numbers, treatment-coded levels
for categories). Shape and interaction search build on this module.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .forest import ForestFit
from .importance import Importance
from .intake import Table
from .terms import Term, main_effects


@dataclass
class Discovery:
    terms: list[Term]
    main_variables: list[str]
    interactions: list[dict] = field(default_factory=list)
    shapes: dict = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)

    def to_dict(self) -> dict:
        return {"main_variables": self.main_variables, "shapes": self.shapes}


def discover(forest: ForestFit, table: Table, disc: pd.DataFrame, y: np.ndarray,
             importance: list[Importance], fills: dict, *, seed: int = 0, quiet: bool = False) -> Discovery:
    terms = main_effects(table.features)
    return Discovery(terms, [f.name for f in table.features])
