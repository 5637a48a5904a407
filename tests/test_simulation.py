"""Modest versions of the honesty simulations (the benchmark runs the full ones).

Split: Cox (1975, Biometrika 62:441-444) — terms chosen on one part and tested on another keep
the nominal level; naive testing on the choosing rows rejects too often (Berk et al. 2013, Ann
Stat 41:802-837). Bootstrap: Efron & Tibshirani (1993, ch. 13) percentile interval should cover
the true difference about 95% of the time. Seeded, so each run gives the same numbers; the bands
are wide because 60-150 simulated data sets carry Monte Carlo error of a few percent.
"""
from __future__ import annotations

import pytest

from pocketforest.simulate import loss_coverage, null_rejection


def test_split_testing_keeps_the_level_and_naive_testing_does_not():
    r = null_rejection(60, n_rows=300, seed=11)
    assert r["n_datasets"] == 60 and r["candidates"] == 10
    assert r["split_rate"] <= 0.12                     # nominal 5%; 60 data sets, MC se ~2.8%
    assert r["naive_rate"] >= r["split_rate"] + 0.15   # selection on the same rows inflates it


def test_split_testing_keeps_the_level_for_a_binary_outcome():
    r = null_rejection(40, n_rows=300, family="binomial", seed=12)
    assert r["split_rate"] <= 0.15
    assert r["naive_rate"] > r["split_rate"] + 0.1


@pytest.mark.parametrize("task,k", [("regression", 2), ("classification", 2), ("classification", 3)])
def test_loss_interval_covers_the_true_difference(task, k):
    r = loss_coverage(120, task=task, n_classes=k, n_test=300, resamples=400, truth_rows=200_000, seed=13)
    assert r["true_difference"] > 0.05                 # the crude model is really worse
    assert 0.88 <= r["coverage"] <= 0.99
