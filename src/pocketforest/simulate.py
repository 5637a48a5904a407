"""Simulations that check pocketforest's honesty claims, callable by the tests and the benchmark.

* :func:`null_rejection` — on pure-noise outcomes, terms chosen by a real data-driven search on
  the discovery rows and tested on the confirmation rows are rejected at the nominal rate (data
  splitting, Cox 1975, Biometrika 62:441-444); tested on the rows that chose them ("naive"),
  far more often (Berk, Brown, Buja, Zhang & Zhao 2013, Ann Stat 41:802-837).
* :func:`loss_coverage` — the paired percentile bootstrap interval for the loss (Efron &
  Tibshirani 1993, ch. 13) covers the true difference about 95% of the time; the truth is the
  same difference on a very large independent sample from the same generator.

Both return plain dicts so the benchmark can print and store them. The selection and the test
are the ones the toolkit uses: :func:`pocketforest.equation.block_test`.
"""
from __future__ import annotations

import itertools

import numpy as np

from .equation import block_test
from .evaluate import loss_with_interval


def _candidates(X: np.ndarray, centre: np.ndarray) -> tuple[np.ndarray, list[str]]:
    """Squares and pairwise products of the centred inputs: the bends and interactions a
    discovery step may suggest."""
    Z = X - centre
    cols, names = [], []
    for j in range(X.shape[1]):
        cols.append(Z[:, j] ** 2)
        names.append(f"x{j}^2")
    for i, j in itertools.combinations(range(X.shape[1]), 2):
        cols.append(Z[:, i] * Z[:, j])
        names.append(f"x{i}*x{j}")
    return np.column_stack(cols), names


def _forward_select(base: np.ndarray, cand: np.ndarray, y: np.ndarray, k: int, family: str) -> list[int]:
    """Pick ``k`` candidates one at a time, each the one that best improves the fit on these rows.

    Gaussian: the largest F statistic for adding it (the block test itself). Binomial: the
    largest |correlation| of the candidate with the working residuals y - p of the current model
    (the score-test direction; cheap enough for thousands of data sets).
    """
    chosen: list[int] = []
    for _ in range(k):
        current = np.column_stack([base] + [cand[:, c] for c in chosen])
        best, best_score = -1, -np.inf
        if family == "binomial":
            beta = _logit_fit(current, y)
            resid = y - 1.0 / (1.0 + np.exp(-(current @ beta)))
        for c in range(cand.shape[1]):
            if c in chosen:
                continue
            if family == "gaussian":
                test = block_test(np.column_stack([current, cand[:, c]]), current, y, "gaussian")
                score = -np.inf if test is None else test["statistic"]
            else:
                score = abs(np.corrcoef(cand[:, c], resid)[0, 1])
            if score > best_score:
                best, best_score = c, score
        chosen.append(best)
    return chosen


def _logit_fit(X: np.ndarray, y: np.ndarray, iters: int = 25) -> np.ndarray:
    """Plain Newton-Raphson logistic fit, used only to steer the simulated selection."""
    beta = np.zeros(X.shape[1])
    for _ in range(iters):
        p = 1.0 / (1.0 + np.exp(-(X @ beta)))
        w = p * (1 - p) + 1e-12
        step = np.linalg.lstsq((X * w[:, None]).T @ X, X.T @ (y - p), rcond=None)[0]
        beta += step
        if np.max(np.abs(step)) < 1e-8:
            break
    return beta


def null_rejection(n_datasets: int = 1000, *, n_rows: int = 400, n_features: int = 4, k: int = 2,
                   family: str = "gaussian", alpha: float = 0.05, seed: int = 0) -> dict:
    """Share of pure-noise data sets whose selected terms the block test rejects at ``alpha``.

    Each data set: ``n_features`` standard normal inputs, an outcome unrelated to them (normal,
    or a fair coin for ``family="binomial"``), half the rows for discovery and half for
    confirmation. On the discovery rows a forward search picks the ``k`` best of all squares and
    pairwise products (centred at the discovery means). The block test of those terms beyond
    the main effects is then run on the confirmation rows (``split_rate``, should be ``alpha``)
    and on the discovery rows (``naive_rate``, inflated by the search).
    """
    if family not in ("gaussian", "binomial"):
        raise ValueError("family must be 'gaussian' or 'binomial'")
    rng = np.random.default_rng(seed)
    split_hits = naive_hits = 0
    half = n_rows // 2
    n_cand = n_features + n_features * (n_features - 1) // 2
    for _ in range(n_datasets):
        X = rng.normal(size=(n_rows, n_features))
        y = rng.normal(size=n_rows) if family == "gaussian" else rng.integers(0, 2, n_rows).astype(float)
        d, c = slice(0, half), slice(half, n_rows)
        centre = X[d].mean(axis=0)
        cand, _ = _candidates(X, centre)
        base = np.column_stack([np.ones(n_rows), X])
        chosen = _forward_select(base[d], cand[d], y[d], k, family)
        full = np.column_stack([base, cand[:, chosen]])
        for rows, counter in ((c, "split"), (d, "naive")):
            test = block_test(full[rows], base[rows], y[rows], family)
            if test is not None and test["p_value"] < alpha:
                if counter == "split":
                    split_hits += 1
                else:
                    naive_hits += 1
    rate_s, rate_n = split_hits / n_datasets, naive_hits / n_datasets
    return {"split_rate": rate_s, "naive_rate": rate_n, "alpha": alpha, "n_datasets": n_datasets,
            "mc_se": float(np.sqrt(alpha * (1 - alpha) / n_datasets)), "family": family,
            "n_rows": n_rows, "candidates": n_cand, "selected": k}


def _generator(task: str, n_classes: int = 2):
    """A synthetic truth with a bend and an interaction, and two fixed models of it: a close one
    (the role of the forest) and a cruder one (the role of a surrogate)."""
    def draw(rng: np.random.Generator, n: int):
        x = rng.uniform(-1, 1, (n, 3))
        f = 2 * x[:, 0] ** 2 + 1.5 * x[:, 1] * x[:, 2] + x[:, 1]
        close = f + 0.3 * np.sin(3 * x[:, 0])
        crude = 0.67 + x[:, 1] + 0.8 * x[:, 1] * x[:, 2]
        if task == "regression":
            return f + rng.normal(0, 0.5, n), close, crude
        if n_classes > 2:   # ordered classes: scores for low / mid / high (and more) along f
            cuts = np.linspace(-0.3, 1.8, n_classes)

            def probs(score):
                z = -2.5 * (score[:, None] - cuts[None, :]) ** 2
                e = np.exp(z - z.max(axis=1, keepdims=True))
                return e / e.sum(axis=1, keepdims=True)
            p = probs(f)
            codes = (rng.uniform(size=n)[:, None] > np.cumsum(p, axis=1)).sum(axis=1)
            names = np.array([f"c{k}" for k in range(n_classes)], dtype=object)
            return names[np.minimum(codes, n_classes - 1)], probs(close), probs(crude)
        c = 0.67
        p = 1 / (1 + np.exp(-2.5 * (f - c)))
        y = np.where(rng.uniform(size=n) < p, "yes", "no").astype(object)
        pc = 1 / (1 + np.exp(-2.5 * (close - c)))
        pr = 1 / (1 + np.exp(-2.5 * (crude - c)))
        return y, np.column_stack([1 - pc, pc]), np.column_stack([1 - pr, pr])
    return draw


def loss_coverage(n_sims: int = 500, *, task: str = "regression", n_classes: int = 2, n_test: int = 400,
                  resamples: int = 1000, level: float = 0.95, truth_rows: int = 1_000_000, seed: int = 0) -> dict:
    """Share of simulated test sets whose loss interval covers the true loss.

    The two models are fixed functions, so the true loss (forest metric minus surrogate metric,
    R² or accuracy) is a property of the population: computed once on ``truth_rows`` fresh rows.
    Each simulation draws ``n_test`` test rows, runs :func:`loss_with_interval` with its own
    seed and checks whether the interval contains the truth.
    """
    if task == "regression":
        classes = None
    else:
        classes = ["no", "yes"] if n_classes == 2 else [f"c{k}" for k in range(n_classes)]
    draw = _generator(task, n_classes)
    rng = np.random.default_rng(seed)
    y, a, b = draw(rng, truth_rows)
    truth = loss_with_interval(y, a, b, task, classes, resamples=1, reference_values=False)["value"]
    covered, widths, below = 0, [], 0
    for s in range(n_sims):
        y, a, b = draw(rng, n_test)
        r = loss_with_interval(y, a, b, task, classes, resamples=resamples, seed=seed + s, level=level,
                               reference_values=False)
        covered += r["ci_low"] <= truth <= r["ci_high"]
        below += truth < r["ci_low"]
        widths.append(r["ci_high"] - r["ci_low"])
    cov = covered / n_sims
    return {"coverage": cov, "level": level, "n_sims": n_sims, "task": task,
            "n_classes": None if classes is None else len(classes), "n_test": n_test,
            "resamples": resamples, "true_difference": float(truth), "mean_width": float(np.mean(widths)),
            "truth_below_interval": below / n_sims,
            "mc_se": float(np.sqrt(level * (1 - level) / n_sims))}
