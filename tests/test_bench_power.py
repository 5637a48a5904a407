"""The power section: the planted truth has the shares it claims, recovery is read correctly, and
the quick run is well formed."""
from __future__ import annotations

import numpy as np
import pytest

from pocketforest.bench import power

N = 200_000   # generator only (numpy, well under a second)


@pytest.mark.parametrize("task", ["regression", "classification"])
def test_planted_shares_are_as_designed(task):
    p = power.planted(N, seed=5, task=task)
    for part, share in power.SHARES.items():
        # the sample variance of a part has relative standard error sqrt((kurtosis - 1) / n); the
        # heaviest-tailed part, a product of two normals, has kurtosis 9: 0.6% at 200,000 rows, so
        # 5% relative is more than 7 standard errors
        assert p.realised[part] == pytest.approx(share, rel=0.05), part
    # the parts use disjoint independent inputs, so they are uncorrelated: |r| has standard error
    # 1/sqrt(n) = 0.0022, and 0.015 is about 7 of them
    names = list(p.parts)
    r = np.corrcoef(np.vstack([p.parts[k] for k in names]))
    assert np.abs(r[np.triu_indices(len(names), 1)]).max() < 0.015


def test_regression_noise_and_correlated_noise_columns():
    p = power.planted(N, seed=6)
    d = p.data
    # outcome variance 1 by construction (relative SE of a variance of a near-normal: sqrt(2/n) = 0.3%)
    assert np.var(d["y"]) == pytest.approx(1.0, rel=0.02)
    # r = 0.6 by construction; SE of r is (1 - r²)/sqrt(n) = 0.0014
    assert np.corrcoef(d["noise_lin"], d["x_lin"])[0, 1] == pytest.approx(0.6, abs=0.01)
    assert np.corrcoef(d["noise_bend"], d["x_bend"])[0, 1] == pytest.approx(0.6, abs=0.01)
    for c in ("noise_a", "noise_b"):
        assert abs(np.corrcoef(d[c], d["y"])[0, 1]) < 0.015


def test_binomial_scale_gives_the_logistic_error_the_remaining_share():
    # latent-variable R² (McKelvey & Zavoina 1975): Var(s·η) / (Var(s·η) + π²/3) = 1 - 0.84
    s2 = power.LOGIT_SCALE ** 2
    signal = sum(power.SHARES.values())
    assert s2 * signal / (s2 * signal + np.pi ** 2 / 3) == pytest.approx(signal, rel=1e-12)
    d = power.planted(N, seed=7, task="classification").data
    # intercept 0 and an outcome symmetric about 0 on average: balanced classes (SE 0.0011)
    assert (d["y"] == "yes").mean() == pytest.approx(0.5, abs=0.01)


def test_recovery_rules():
    terms = [("linear", ("x_lin",)), ("linear", ("x_bend",)), ("interaction", ("x_c", "site")),
             ("interaction", ("k1", "k2")), ("linear", ("noise_a",))]
    rec = power.recovered(terms)
    assert rec == {"linear": True, "category": False, "bend": False, "num_num": False, "num_level": True,
                   "cat_cat": True}
    assert power.recovered([("hinge", ("x_bend",))])["bend"]
    assert power.recovered([("interaction", ("x_b", "x_a"))])["num_num"]
    assert power.noise_in(terms) == ["noise_a"]


def test_quick_run_is_well_formed(tmp_path):
    section = power.run(True, tmp_path, lambda text: None)   # as `bench --only power --quick` runs it
    rows = section.raw["power"]
    names = [f.name for f in section.figures]
    assert names == ["power: recovered, regression 1,000 rows", "power: noise runs, regression 1,000 rows"]
    assert section.figures[0].passed is None                   # recovery is judged from 20,000 rows on
    assert [(r["task"], r["n"]) for r in rows] == [("regression", 1_000)]
    r = rows[0]
    assert set(r["recovered"]) == set(power.SHARES)
    assert r["recovery"] == pytest.approx(np.mean(list(r["recovered"].values())))
    assert r["noise_in"] == bool(r["noise"]) and set(r["noise"]) <= set(power.NOISE_COLUMNS)
    assert r["terms"], "the equation has at least one term"
    text = power.render_power(rows)
    assert "1,000" in text and "noise" in text


def test_sizes_tasks_and_seeds_come_from_the_command_line():
    import argparse
    parser = argparse.ArgumentParser()
    power.add_arguments(parser)
    args = parser.parse_args(["--power-sizes", "1000,5_000", "--power-tasks", "classification", "--power-seeds", "3"])
    assert power.options(args) == {"sizes": (1000, 5000), "seeds": (3,), "tasks": ("classification",), "trees": None}
    from pocketforest.errors import InputError
    with pytest.raises(InputError, match="--power-tasks"):
        power.options(parser.parse_args(["--power-tasks", "survival"]))
