"""Which variables matter: the main forest's out-of-bag importances, with a standard error over
rows, against a null calibrated on the data.

Every tree's out-of-bag error increase when one raw column is permuted (:mod:`pocketforest.
importance`, computed once on *all* discovery rows) is kept per row: each row's increase averaged
over the trees that left it out. The importance is the mean over rows and its standard error the
spread over rows / sqrt(rows). Rows, unlike trees, are nearly independent draws, so this error says
how far a useless column's importance strays with new data; the spread over trees does not (all
trees grow on the same rows, so with more trees a noise column's z grows without bound: Strobl &
Zeileis 2008, "Danger: high power!"). For a useless column the permuted rows are distributed like
the real ones, so its importance is centred on zero, and ``z`` = importance / standard error grows
with the rows only for a real effect: the test's power grows with the data (the shadow forest
it replaces saw at most 3,000 rows).

The negative z values, which only useless columns produce, mirror the null distribution (Janitza,
Celik & Boulesteix 2018, Advances in Data Analysis and Classification 12:885-915). Their root mean
square, pooled with five pseudo-values at scale 1, estimates the null's scale (never below 1); a column is material when its z lies above that
scale times the one-sided normal quantile at ``ALPHA`` / columns (Bonferroni, family-wise).

Materiality only opens the door. Every material column then has to stay in the discovery-row GLM,
and the confirmation rows test what remains, so a false inclusion costs one coefficient the
confirmation test shows as null, while a false exclusion would lose an effect for good.
Correlated columns do not knock each other out: each keeps the importance the forest gives it, and
only with enough rows may the GLM, which sees both, drop a stand-in (:mod:`.select`).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import stats

from ..importance import Importance, Increases
from .context import Context

ALPHA = 0.05          # family-wise share of useless columns let through (common practice)
MIN_NULL_SCALE = 1.0  # z's standard deviation if the rows' increases were independent
PRIOR_NEGATIVES = 5   # pseudo-values at that scale pooled with the mirrored negatives (common practice: shrinkage)


@dataclass
class Evidence:
    """Typed record of one variable's materiality (the manifest prints it as a dict)."""
    oob_importance: float     # mean over rows (equals Breiman's mean over trees up to rows' weights)
    oob_se: float             # standard error over rows
    z: float
    passed: bool
    requested: bool = False
    left_out: bool = False
    #: Above the family-wise (Bonferroni) bound too; a column that passes only the per-column bound
    #: must also pay the extended BIC's extra penalty to stay in the discovery-row GLM.
    strong: bool = True

    @property
    def decision(self) -> str:
        if self.left_out:
            return "left out by request"
        if self.requested:
            return "kept by request" + ("" if self.passed else " (did not pass the importance test)")
        return "material" if self.passed else "not material"

    def to_dict(self) -> dict:
        return {"oob_importance": self.oob_importance, "oob_se": self.oob_se, "z": self.z,
                "passed": self.passed, "strong": self.strong, "requested": self.requested, "decision": self.decision}


@dataclass
class Materiality:
    material: list[str]
    evidence: dict[str, Evidence]
    notes: list[str] = field(default_factory=list)
    summary: dict = field(default_factory=dict)


def null_scale(z: np.ndarray) -> tuple[float, int]:
    """Scale of the null distribution of z from the mirrored negative values, and how many there were.

    A handful of negatives gives a very noisy scale, so they are pooled with
    :data:`PRIOR_NEGATIVES` pseudo-values at scale 1 (what independent rows would give); the scale
    never falls below 1.
    """
    neg = z[z < 0]
    pooled = (PRIOR_NEGATIVES * MIN_NULL_SCALE ** 2 + float(np.sum(neg ** 2))) / (PRIOR_NEGATIVES + len(neg))
    return max(MIN_NULL_SCALE, float(np.sqrt(pooled))), int(len(neg))


def judge_materiality(ctx: Context, increases: Increases, names: list[str]) -> Materiality:
    """``increases``: the out-of-bag increases of :func:`pocketforest.importance.oob_increases`,
    features in the order of ``names``."""
    keep, drop = set(ctx.requests.keep), set(ctx.requests.drop)
    rows = increases.per_row[np.all(np.isfinite(increases.per_row), axis=1)]
    t = len(rows)
    mean = rows.mean(axis=0) if t else np.zeros(len(names))
    se = rows.std(axis=0, ddof=1) / np.sqrt(t) if t > 1 else np.full(len(names), np.inf)
    z = np.divide(mean, se, out=np.zeros_like(mean), where=se > 0)
    scale, negatives = null_scale(z)
    # Bonferroni over the columns unless the discovery-row GLM will check every main effect too
    per_column = ALPHA if ctx.glm_checks_main_effects else ALPHA / max(1, len(names))
    threshold = scale * float(stats.norm.ppf(1.0 - per_column))
    family_wise = scale * float(stats.norm.ppf(1.0 - ALPHA / max(1, len(names))))
    evidence, material = {}, []
    for j, name in enumerate(names):
        ev = Evidence(float(mean[j]), float(se[j]), float(z[j]), bool(z[j] > threshold),
                      requested=name in keep, left_out=name in drop, strong=bool(z[j] > family_wise))
        evidence[name] = ev
        if not ev.left_out and (ev.passed or ev.requested):
            material.append(name)
    material.sort(key=lambda v: -evidence[v].oob_importance)
    notes = _correlation_notes(ctx, material)
    summary = {"rule": (f"z = mean / standard error over rows of the out-of-bag importance on all {t} "
                        f"discovery rows with an out-of-bag prediction, above {threshold:.3g} = null scale {scale:.3g} (from {negatives} mirrored "
                        f"negative z values pooled with {PRIOR_NEGATIVES} at scale 1, at least 1) x the normal quantile at {per_column:.3g} "
                        "(Janitza et al. 2018; " + ("per column: the discovery-row GLM then checks every main effect)"
                                                    if ctx.glm_checks_main_effects else "Bonferroni over columns)")),
               "z_threshold": threshold, "null_scale": scale, "negative_z": negatives, "alpha": ALPHA,
               "rows": int(t), "trees": int(len(increases.per_tree)),
               "correlated_clusters": [{"variables": c, "max_abs_spearman": _max_rho(ctx, c)}
                                       for c in ctx.correlated_clusters(material)]}
    return Materiality(material, evidence, notes, summary)


def top_ranked(importance: list[Importance], drop: tuple[str, ...]) -> str | None:
    return next((i.feature for i in importance if i.feature not in drop), None)


def _max_rho(ctx: Context, cluster: list[str]) -> float:
    rho = ctx.rank_correlation.loc[cluster, cluster].to_numpy().copy()
    np.fill_diagonal(rho, 0.0)
    return float(rho.max())


def _correlation_notes(ctx: Context, material: list[str]) -> list[str]:
    """One note per cluster of strongly rank-correlated material numbers (detail in the manifest)."""
    return [f"{', '.join(c)} are strongly correlated (|Spearman| up to {_max_rho(ctx, c):.2f}): their importances "
            "are shared out between them and partial dependence extrapolates; accumulated local effects are used "
            "for their shapes, and at most one of them gets a bend"
            for c in ctx.correlated_clusters(material)]
