"""Which variables matter: the main forest's per-tree out-of-bag importances against a null
calibrated on the data.

Every tree's out-of-bag error increase when one raw column is permuted (:mod:`pocketforest.
importance`, computed once on *all* discovery rows) gives a mean and a standard error over trees;
their ratio ``z`` grows with the rows for any real effect, so the test's power grows with the
data (the old shadow forest saw at most 3,000 rows).

A useless column's importance is symmetric about zero: permuting it moves its splits at random,
which no more often helps than hurts on rows the tree never saw. So the negative ``z`` values,
which only useless columns produce, mirror the null distribution (Janitza, Celik & Boulesteix 2018,
Advances in Data Analysis and Classification 12:885-915, who mirror the negative importances). We
estimate the null's scale from the mirrored negatives (root mean square, never below 1, the
scale if trees were independent) and call a column material when its ``z`` lies above that scale
times the one-sided normal quantile at ``ALPHA`` / columns (Bonferroni, family-wise).

The z-score alone is not a calibrated test (Strobl & Zeileis 2008: its power grows with the number
of trees) — here it only opens the door. Every material column then has to earn its place in the
discovery-row GLM, and the confirmation rows test what remains, so a false inclusion costs one
coefficient the confirmation test shows as null, while a false exclusion would lose an effect for
good. Correlated columns do not knock each other out: each keeps the importance the forest gives it
and the GLM on the discovery rows decides between them.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import stats

from ..importance import Importance
from .context import Context

ALPHA = 0.05          # family-wise share of useless columns let through (common practice)
MIN_NULL_SCALE = 1.0  # z's standard deviation if the trees' increases were independent


@dataclass
class Evidence:
    """Typed record of one variable's materiality (the manifest prints it as a dict)."""
    oob_importance: float
    oob_se: float
    z: float
    passed: bool
    requested: bool = False
    left_out: bool = False

    @property
    def decision(self) -> str:
        if self.left_out:
            return "left out by request"
        if self.requested:
            return "kept by request" + ("" if self.passed else " (did not pass the importance test)")
        return "material" if self.passed else "not material"

    def to_dict(self) -> dict:
        return {"oob_importance": self.oob_importance, "oob_se": self.oob_se, "z": self.z,
                "passed": self.passed, "requested": self.requested, "decision": self.decision}


@dataclass
class Materiality:
    material: list[str]
    evidence: dict[str, Evidence]
    notes: list[str] = field(default_factory=list)
    summary: dict = field(default_factory=dict)


def null_scale(z: np.ndarray) -> tuple[float, int]:
    """Scale of the null distribution of z from the mirrored negative values, and how many there were."""
    neg = z[z < 0]
    if len(neg) == 0:
        return MIN_NULL_SCALE, 0
    return max(MIN_NULL_SCALE, float(np.sqrt(np.mean(neg ** 2)))), int(len(neg))


def judge_materiality(ctx: Context, per_tree: np.ndarray, names: list[str]) -> Materiality:
    """``per_tree``: [trees, features] out-of-bag increases in the order of ``names``."""
    keep, drop = set(ctx.requests.keep), set(ctx.requests.drop)
    t = len(per_tree)
    mean = per_tree.mean(axis=0)
    se = per_tree.std(axis=0, ddof=1) / np.sqrt(t) if t > 1 else np.full(len(names), np.inf)
    z = np.divide(mean, se, out=np.zeros_like(mean), where=se > 0)
    scale, negatives = null_scale(z)
    threshold = scale * float(stats.norm.ppf(1.0 - ALPHA / max(1, len(names))))
    evidence, material = {}, []
    for j, name in enumerate(names):
        ev = Evidence(float(mean[j]), float(se[j]), float(z[j]), bool(z[j] > threshold),
                      requested=name in keep, left_out=name in drop)
        evidence[name] = ev
        if not ev.left_out and (ev.passed or ev.requested):
            material.append(name)
    material.sort(key=lambda v: -evidence[v].oob_importance)
    notes = _correlation_notes(ctx, material)
    summary = {"rule": (f"z = mean / standard error of the per-tree out-of-bag importance on all {len(ctx.frame)} "
                        f"discovery rows, above {threshold:.3g} = null scale {scale:.3g} (from {negatives} mirrored "
                        f"negative z values, at least 1) x the normal quantile at {ALPHA:g}/{len(names)} "
                        "(Janitza et al. 2018; Bonferroni over columns)"),
               "z_threshold": threshold, "null_scale": scale, "negative_z": negatives, "alpha": ALPHA,
               "rows": int(len(ctx.frame)), "trees": int(t),
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
