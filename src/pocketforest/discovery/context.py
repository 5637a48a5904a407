"""What every discovery step reads: the discovery rows, the forest and the user's requests.

One small object instead of a dozen positional values: each step of :mod:`pocketforest.discovery`
takes the :class:`Context` and returns its own typed result.
"""
from __future__ import annotations

import sys
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import pandas as pd

from ..design import model_frame
from ..features import Feature
from ..forest import ForestFit
from .effects import Predict, forest_predictor

#: |Spearman| at which two numbers share their importance out and partial dependence
#: extrapolates (Strobl et al. 2008, BMC Bioinformatics 9:307; the cut itself is common practice).
CORRELATED = 0.7
#: From this many discovery rows the GLM on those rows checks every main effect (a main effect that
#: adds nothing leaves), so the importance test may let more through: see :mod:`.materiality` and
#: :mod:`.select`. Fewer rows cannot tell a chance pass from a weaker real effect at BIC's penalty:
#: on the wine data (178 rows, 89 for discovery) letting BIC remove main effects cost the equation
#: 0.05 of cross-validated accuracy (0.896 against 0.944 with every material variable kept and the
#: fit penalised), so small tables keep what the forest vouched for and rely on shrinkage.
GLM_CHECK_ROWS = 500


@dataclass(frozen=True)
class Requests:
    """What the user asked of discovery, and what the estimation rows can carry."""
    seed: int = 0
    quiet: bool = False
    max_terms: int | None = None
    keep: tuple[str, ...] = ()
    drop: tuple[str, ...] = ()
    min_samples_leaf: int = 5
    #: Coefficients the rows that estimate the equation can support (None: no limit); bends and
    #: products stop entering beyond it (:mod:`pocketforest.discovery.select`).
    budget: int | None = None
    #: Rows that will estimate the exported equation: decides whether two hinges may be offered.
    estimation_rows: int | None = None
    #: The equation's GLM family (gaussian, poisson, negative_binomial, binomial, multinomial): the
    #: discovery-row selection judges terms with the same likelihood the equation will be fitted by.
    family: str | None = None


@dataclass
class Context:
    forest: ForestFit
    features: list[Feature]
    task: str
    frame: pd.DataFrame          # discovery rows, raw columns
    y: np.ndarray
    fills: dict
    requests: Requests = field(default_factory=Requests)

    @property
    def kinds(self) -> dict[str, str]:
        return {f.name: f.kind for f in self.features}

    @property
    def classes(self) -> list[str] | None:
        return self.forest.classes

    @cached_property
    def design(self) -> np.ndarray:
        """The discovery rows after the forest's preprocessing (float64)."""
        prep = self.forest.pipeline.named_steps["prep"]
        return np.asarray(prep.transform(model_frame(self.frame, self.features)), dtype=np.float64)

    @cached_property
    def groups(self) -> dict[str, list[int]]:
        """Design columns of each raw variable (one for a number, the indicators of a category)."""
        return {f.name: [i for i, c in enumerate(self.forest.columns) if c.feature == f.name] for f in self.features}

    @cached_property
    def predict(self) -> Predict:
        return forest_predictor(self.forest.model, self.task)

    def predict_link(self, X: np.ndarray) -> np.ndarray:
        from .shape import link_scale
        return link_scale(self.predict(X), self.task)

    @cached_property
    def rank_correlation(self) -> pd.DataFrame:
        """|Spearman| between every pair of numeric features on the discovery rows, computed once."""
        nums = [f.name for f in self.features if f.kind == "numeric"]
        if not nums:
            return pd.DataFrame()
        rho = self.frame[nums].apply(pd.to_numeric, errors="coerce").corr(method="spearman").abs()
        return rho.fillna(0.0)

    def correlated_clusters(self, variables: list[str]) -> list[list[str]]:
        """Groups of the given numbers linked by |Spearman| >= CORRELATED (connected components)."""
        rho = self.rank_correlation
        nums = [v for v in variables if v in rho.index]
        seen: set[str] = set()
        clusters = []
        for v in nums:
            if v in seen:
                continue
            stack, comp = [v], []
            seen.add(v)
            while stack:
                a = stack.pop()
                comp.append(a)
                for b in nums:
                    if b not in seen and rho.loc[a, b] >= CORRELATED:
                        seen.add(b)
                        stack.append(b)
            if len(comp) > 1:
                clusters.append(sorted(comp, key=nums.index))
        return clusters

    def rng(self, offset: int) -> np.random.Generator:
        """A generator per step, so adding a step never changes another step's draws."""
        return np.random.default_rng(self.requests.seed + offset)

    @property
    def glm_checks_main_effects(self) -> bool:
        return len(self.frame) >= GLM_CHECK_ROWS

    def say(self, text: str, end: str = "\n") -> None:
        if not self.requests.quiet:
            print(text, end=end, file=sys.stderr, flush=True)
