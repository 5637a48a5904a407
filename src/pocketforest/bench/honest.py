"""The statistical figures: null rejection of the block test (split vs naive) and coverage of
the loss interval, measured by :mod:`pocketforest.simulate`."""
from __future__ import annotations

from pathlib import Path

from .common import Figure, Section, judge


def run(quick: bool, root: Path, say) -> Section:
    """The statistical figures (no files needed under ``root``)."""
    return Section(honest_figures(quick))


def honest_figures(quick: bool) -> list[Figure]:
    """Null rejection of the block test (split vs naive) and coverage of the loss interval.

    Selection on discovery rows, test on confirmation rows should reject pure noise at the
    nominal 5% (Cox 1975); testing on the rows that chose the terms rejects far more often
    (Berk et al. 2013). The paired percentile bootstrap interval should cover the true loss 95%
    of the time (Efron & Tibshirani 1993).
    """
    from ..simulate import loss_coverage, null_rejection

    n_null, n_cover, truth = (20, 20, 20_000) if quick else (400, 400, 1_000_000)
    figures = []
    for family, rows in (("gaussian", 400), ("binomial", 800)):
        res = null_rejection(n_null if family == "gaussian" else max(10, n_null // 2), n_rows=rows, family=family, seed=0)
        rate = res["split_rate"]
        figures.append(Figure(f"null rejection, split ({family}, {res['n_datasets']} data sets)", rate,
                              "0.05 ± 0.02", judge(abs(rate - 0.05), "<=", 0.02), detail=res,
                              note=f"naive (same rows chose and tested the terms): {res['naive_rate']:.3f}"))
    for task, k in (("regression", 2), ("classification", 2), ("classification", 3)):
        res = loss_coverage(n_cover, task=task, n_classes=k, truth_rows=truth, seed=0)
        label = task if task == "regression" else f"{k} classes"
        figures.append(Figure(f"loss interval coverage ({label}, {res['n_sims']} sims)", res["coverage"],
                              "0.95 ± 0.03", judge(abs(res["coverage"] - 0.95), "<=", 0.03), detail=res,
                              note=f"Monte Carlo se {res['mc_se']:.3f}"))
    return figures
