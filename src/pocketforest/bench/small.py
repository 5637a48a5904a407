"""Small data (issue 12): null rejection at 150 and 300 rows, loss-interval coverage at 150 rows,
and the row count below which there is no test split, all through the real pipeline.

Three simulations, each on seeded invented tables whose truth they construct:

* **Null rejection** (:func:`null_one`). A pure-noise outcome (standard normal, or a fair coin
  for the binomial case) independent of five normal inputs and one four-level category. The
  pipeline's own fitting step (``pipeline._fit_models``, the step ``distill`` runs once for the
  bundle) runs with the split of the plan the row count chooses; below the threshold the rows go
  50/50 to discovery and confirmation. The figure read is the confirmation fit's block test
  (``equation.inference.block_test``: the table "for the paper"; the refit for scoring carries the
  same test): every suggested term beyond the main effects, tested on rows that took no part in
  choosing them (Cox 1975). A data set whose discovery suggested no such term has no block test;
  that happens on the discovery rows alone, so conditional on a test existing the confirmation
  rows still give a valid test, and the 5% goal is judged on that conditional rate, once at least
  :data:`MIN_TESTS` data sets have a test (on pure noise 8-12% do). The rate over
  all data sets (no test = no rejection) and the test of the whole confirmation-fit model against
  the intercept alone (``equation.block_test`` with the intercept as the reduced design: the F
  test, or the likelihood-ratio test, penalised after a Firth fit) are printed beside it.
* **Loss-interval coverage** (:func:`coverage_one`). A planted truth (:func:`planted_small`: a
  slope, a bend, an interaction of two numbers and a category effect, plus noise; the binary
  variant passes the same predictor through a logit) at 150 rows through ``distill`` (the 2 x
  5-fold cross-validation plan, the loss interval by nested cross-validation unless
  ``--small-nested 0``). The bundle's forest and equation then predict a fixed
  population sample of :data:`POPULATION_ROWS` fresh rows; forest metric minus equation metric
  there (R² or accuracy, the pipeline's loss metric) is the true loss of *these fitted models*.
  Cross-validation of the whole pipeline estimates the expected performance of the modelling
  procedure over training sets of about this size rather than that of the one fitted model
  (Bates, Hastie & Tibshirani 2024, J Am Stat Assoc, "Cross-validation: what does it
  estimate and how well does it do it?"), so a second target is printed: the mean
  of the fitted models' true loss over all simulated data sets (the procedure's expected loss at
  this row count). Two intervals are read: the cross-validated one (about the procedure: judged
  against the expected loss, and printed, not judged, against the fitted loss) and the bundle's own
  models' one on the confirmation rows (``loss.equation.bundle_models``, :mod:`pocketforest.own_loss`:
  judged against the fitted loss).
* **Threshold** (:func:`threshold_one`). The same planted truth at several row counts, each table
  run through ``distill`` twice: forced three-way split ``Settings(split=(0.5, 0.25, 0.25))`` and
  forced cross-validation plan (``distill(..., plan=...)``). Per plan: (a) the exported
  equation's true metric on the population sample, (b) the absolute error of the equation metric
  the plan reports against that truth. Differences are paired (same table). The rule, fixed
  before the run: the split plan *stops losing* at the smallest measured size from which on, at
  every larger measured size too, the cross-validation plan's advantage is at most
  :data:`TOLERANCE` on both (a) and (b).

Goals (issue 12): block test rejects pure noise at 5% ± 2% over at least 200 data sets at 150
and 300 rows; loss-interval coverage at 150 rows at least 0.93.

Run: ``python -m pocketforest.bench --only small`` (or ``--small`` beside the default sections),
``--quick`` (a few data sets, nothing judged), ``--small-null N``, ``--small-coverage N``,
``--small-seeds N`` (threshold tables per size), ``--small-tasks regression``, ``--small-parts
null,threshold``, ``--small-sizes 300,800`` (threshold row counts). Results and the threshold
chosen from them: docs/performance.md, "Small data".
"""
from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError
from ..evaluate import outcome_values
from .common import Figure, Section, int_list, judge, name_list, settings

TASKS = ("regression", "classification")
NULL_SIZES = (150, 300)
COVERAGE_ROWS = 150
THRESHOLD_SIZES = (200, 300, 500, 800, 1200)
THRESHOLD_SPLIT = (0.5, 0.25, 0.25)
#: The threshold table is measured on the regression truth only (its binary variant is not run: cost).
THRESHOLD_TASKS = ("regression",)
PARTS = ("null", "coverage", "threshold")
#: Block tests (data sets whose discovery suggested terms beyond the main effects) needed before
#: the conditional rejection rate is judged: the issue's "at least 200 data sets".
MIN_TESTS = 200
#: Largest cross-validation advantage (R² or accuracy points) at which the split plan no longer loses.
TOLERANCE = 0.01
POPULATION_ROWS = 20_000
#: Full-run counts, chosen from the measured cost per run on this 2-core machine (about 0.3 s per
#: null data set; with the nested cross-validation's 40 extra refits, 11-18 s per regression and
#: 20-26 s per binary coverage run; 22 s per threshold table over the five sizes), about 1.5 hours.
FULL = {"null": 300, "coverage": {"regression": 150, "classification": 100}, "seeds": 20, "trees": 50,
        "population": POPULATION_ROWS}
QUICK = {"null": 6, "coverage": {"regression": 3, "classification": 3}, "seeds": 1, "trees": 20, "population": 2_000,
         "nested": 1}
QUICK_THRESHOLD_SIZES = (200, 500)
ALPHA = 0.05
LEVEL = 0.95
COVERAGE_GOAL = 0.93
BOOTSTRAP = 1000                 # the coverage runs read the interval
FAST_BOOTSTRAP = 50              # null and threshold runs never read it
GROUPS = ("g1", "g2", "g3", "g4")
GROUP_EFFECT = {"g1": 0.5, "g2": 0.0, "g3": -0.5, "g4": 0.0}
#: Seed-sequence tags keep the simulations' random streams apart.
_TAG = {"null": 11, "coverage": 12, "threshold": 13, "population": 14}
_TASK_CODE = {"regression": 0, "classification": 1}


def _rng(*key: int) -> np.random.Generator:
    return np.random.default_rng(list(key))


def null_table(n: int, rng: np.random.Generator, task: str) -> pd.DataFrame:
    """Five normal inputs and a four-level category; the outcome is independent of all of them."""
    df = pd.DataFrame({f"x{j + 1}": rng.standard_normal(n) for j in range(5)})
    df["grp"] = np.asarray(GROUPS, dtype=object)[rng.integers(0, len(GROUPS), n)]
    if task == "regression":
        df["y"] = rng.standard_normal(n)
    else:
        df["y"] = np.where(rng.uniform(size=n) < 0.5, "yes", "no").astype(object)
    return df


def planted_small(n: int, rng: np.random.Generator, task: str) -> pd.DataFrame:
    """Slope 0.6 x1, bend 0.5 (x2² - 1), interaction 0.5 x3 x4, a category effect and a noise
    input x5. Regression adds N(0, 1) noise (population R² of the truth 1.235 / 2.235 = 0.553: the
    parts are uncorrelated with variances 0.36, 0.5, 0.25 and 0.125); the binary
    variant draws "yes" with probability logistic(1.5 · predictor)."""
    x = rng.standard_normal((n, 5))
    grp = np.asarray(GROUPS, dtype=object)[rng.integers(0, len(GROUPS), n)]
    eta = (0.6 * x[:, 0] + 0.5 * (x[:, 1] ** 2 - 1.0) + 0.5 * x[:, 2] * x[:, 3]
           + np.array([GROUP_EFFECT[g] for g in grp]))
    df = pd.DataFrame({f"x{j + 1}": x[:, j] for j in range(5)})
    df["grp"] = grp
    if task == "regression":
        df["y"] = eta + rng.standard_normal(n)
    else:
        df["y"] = np.where(rng.uniform(size=n) < 1.0 / (1.0 + np.exp(-1.5 * eta)), "yes", "no").astype(object)
    return df


def _table(df: pd.DataFrame, task: str, source: str):
    from ..intake import prepare
    return prepare(df, "y", task=task, source=source)


# --------------------------------------------------------------------------- null rejection


def null_one(n: int, index: int, task: str, trees: int) -> dict:
    """One pure-noise data set through the pipeline's fitting step; the confirmation fit's tests."""
    from .. import pipeline
    from ..resample import choose_plan

    table = _table(null_table(n, _rng(_TAG["null"], n, _TASK_CODE[task], index), task), task, f"null-{task}-{n}-{index}")
    plan = choose_plan(n, None)
    t0 = time.perf_counter()
    fit = pipeline._fit_models(table, settings(trees=trees, seed=index, quiet=True, bootstrap=FAST_BOOTSTRAP), plan.split)
    seconds = time.perf_counter() - t0
    inference = fit.equation.inference or fit.equation          # the table "for the paper"
    block = inference.block_test
    whole = whole_model_test(fit)
    return {"n": n, "index": index, "task": task, "plan": plan.kind, "confirmation_rows": int(inference.n),
            "terms": len(inference.terms), "method": inference.method,
            "block_p": None if block is None else float(block["p_value"]),
            "block_df": None if block is None else int(block["df"]),
            "whole_p": None if whole is None else float(whole["p_value"]), "seconds": seconds}


def whole_model_test(fit) -> dict | None:
    """The confirmation fit against the intercept alone, on the confirmation rows: the same
    :func:`pocketforest.equation.block_test` with the intercept as the reduced design (F test;
    likelihood ratio, penalised after a Firth fit)."""
    from ..equation import _impute, _response, block_test
    inference = fit.equation.inference or fit.equation
    table = fit.table
    conf = table.data.iloc[fit.splits.confirmation].reset_index(drop=True)
    kinds = {f.name: f.kind for f in table.features}
    X = inference.design(_impute(conf[list(kinds)], fit.fills, kinds))
    y = _response(outcome_values(conf[table.target].to_numpy(), table.task), table.task, inference.classes)
    return block_test(X, X[:, :1], y, inference.family, penalised=inference.method.startswith("Firth"),
                      n_classes=len(inference.classes) if inference.classes else None)


def summarise_null(rows: list[dict]) -> list[dict]:
    out = []
    for task in dict.fromkeys(r["task"] for r in rows):
        for n in sorted({r["n"] for r in rows if r["task"] == task}):
            rs = [r for r in rows if r["task"] == task and r["n"] == n]
            tested = [r for r in rs if r["block_p"] is not None]
            whole = [r for r in rs if r["whole_p"] is not None]
            hits = sum(r["block_p"] < ALPHA for r in tested)
            cond = hits / len(tested) if tested else None
            out.append({"task": task, "n": n, "datasets": len(rs), "plan": rs[0]["plan"],
                        "with_block_test": len(tested) / len(rs), "tested": len(tested),
                        "rate_given_test": cond,
                        "mc_se_given_test": float(np.sqrt(ALPHA * (1 - ALPHA) / len(tested))) if tested else None,
                        "rate_all": hits / len(rs),
                        "whole_model_rate": (sum(r["whole_p"] < ALPHA for r in whole) / len(whole)) if whole else None,
                        "mc_se_all": float(np.sqrt(ALPHA * (1 - ALPHA) / len(rs))),
                        "seconds": float(np.mean([r["seconds"] for r in rs]))})
    return out


# --------------------------------------------------------------------------- loss coverage


def _population(task: str, rows: int) -> tuple[pd.DataFrame, np.ndarray]:
    pop = planted_small(rows, _rng(_TAG["population"], _TASK_CODE[task]), task)
    return pop, outcome_values(pop["y"].to_numpy(), task)


def _true_metric(result, pop: pd.DataFrame, y_pop: np.ndarray, model: str) -> float:
    from ..evaluate import loss_metric, metrics
    task = result.table.task
    return metrics(y_pop, result.predict(pop, model), task, result.classes, auc=False)[loss_metric(task)]


def coverage_one(index: int, task: str, trees: int, pop: pd.DataFrame, y_pop: np.ndarray,
                 n: int = COVERAGE_ROWS, nested: int | None = None) -> dict:
    """One planted-truth table through ``distill``: the reported equation loss interval and the
    fitted models' true loss on the population sample. ``nested``: the nested cross-validation's
    repeats (None: distill's default; 0: the paired bootstrap over out-of-fold rows)."""
    from .. import pipeline

    table = _table(planted_small(n, _rng(_TAG["coverage"], n, _TASK_CODE[task], index), task), task,
                   f"planted-{task}-{n}-{index}")
    t0 = time.perf_counter()
    extra = {} if nested is None else {"nested_repeats": nested}
    r = pipeline.distill(table, settings(trees=trees, seed=index, quiet=True, bootstrap=BOOTSTRAP, **extra))
    seconds = time.perf_counter() - t0
    loss = r.loss["equation"]
    truth = _true_metric(r, pop, y_pop, "forest") - _true_metric(r, pop, y_pop, "equation")
    out = {"n": n, "index": index, "task": task, "plan": r.plan.kind, "metric": loss["metric"], "method": loss["method"],
           "reported": float(loss["value"]), "ci_low": float(loss["ci_low"]), "ci_high": float(loss["ci_high"]),
           "true_loss": float(truth), "covered": bool(loss["ci_low"] <= truth <= loss["ci_high"]),
           "seconds": seconds}
    own = loss.get("bundle_models")
    if own is not None:   # the interval about these models, on the confirmation rows (pocketforest.own_loss)
        out.update({"own_value": float(own["value"]), "own_low": float(own["ci_low"]), "own_high": float(own["ci_high"]),
                    "own_method": own["method"], "covered_own": bool(own["ci_low"] <= truth <= own["ci_high"])})
        if "nested" in own:
            out["own_standard_error"] = own["nested"]["standard_error"]
            out["own_naive_standard_error"] = own["nested"]["naive_standard_error"]
    if "nested" in loss:   # the pieces, so that the summary can judge variants of the rule on the same runs
        nv = loss["nested"]
        out.update({k: nv[k] for k in ("standard_error", "naive_standard_error", "unclipped_standard_error",
                                         "inner_estimate", "held_at", "folds")})
        z = (loss["ci_high"] - loss["ci_low"]) / (2.0 * nv["standard_error"]) if nv["standard_error"] > 0 else 0.0
        out["z"] = z
        out["covered_unbounded"] = bool(abs(truth - loss["value"]) <= z * max(nv["unclipped_standard_error"],
                                                                            nv["naive_standard_error"]))
    return out


def summarise_coverage(rows: list[dict]) -> list[dict]:
    out = []
    for task in dict.fromkeys(r["task"] for r in rows):
        rs = [r for r in rows if r["task"] == task]
        expected = float(np.mean([r["true_loss"] for r in rs]))     # the procedure's expected loss
        k = len(rs)
        covered_expected = [r["ci_low"] <= expected <= r["ci_high"] for r in rs]
        cov = float(np.mean([r["covered"] for r in rs]))
        cov_e = float(np.mean(covered_expected))
        out.append({"task": task, "n": rs[0]["n"], "runs": k, "plan": rs[0]["plan"], "metric": rs[0]["metric"],
                    "coverage_fitted": cov, "mc_se_fitted": float(np.sqrt(max(cov * (1 - cov), LEVEL * (1 - LEVEL)) / k)),
                    "coverage_expected": cov_e,
                    "mc_se_expected": float(np.sqrt(max(cov_e * (1 - cov_e), LEVEL * (1 - LEVEL)) / k)),
                    "expected_loss": expected, "mean_reported": float(np.mean([r["reported"] for r in rs])),
                    "sd_true_loss": float(np.std([r["true_loss"] for r in rs], ddof=1)) if k > 1 else None,
                    "truth_below": float(np.mean([r["true_loss"] < r["ci_low"] for r in rs])),
                    "truth_above": float(np.mean([r["true_loss"] > r["ci_high"] for r in rs])),
                    "mean_width": float(np.mean([r["ci_high"] - r["ci_low"] for r in rs])),
                    "method": rs[0].get("method", ""),
                    **{f"coverage_{v}": (float(np.mean([r[f"covered_{v}"] for r in rs]))
                                         if all(f"covered_{v}" in r for r in rs) else None)
                       for v in ("unbounded",)},
                    **_own_summary(rs, expected),
                    "held_above": (float(np.mean([r["held_at"] == "sqrt(K) x naive" for r in rs]))
                                   if all("held_at" in r for r in rs) else None),
                    "seconds": float(np.mean([r["seconds"] for r in rs]))})
    return out


def _own_summary(rs: list[dict], expected: float) -> dict:
    """Coverage of the interval about these models (confirmation rows), when the runs have it."""
    if not all("covered_own" in r for r in rs):
        return {}
    cov = float(np.mean([r["covered_own"] for r in rs]))
    return {"coverage_own": cov, "mc_se_own": float(np.sqrt(max(cov * (1 - cov), LEVEL * (1 - LEVEL)) / len(rs))),
            "own_below": float(np.mean([r["true_loss"] < r["own_low"] for r in rs])),
            "own_above": float(np.mean([r["true_loss"] > r["own_high"] for r in rs])),
            "own_width": float(np.mean([r["own_high"] - r["own_low"] for r in rs])),
            "own_rmse": float(np.sqrt(np.mean([(r["own_value"] - r["true_loss"]) ** 2 for r in rs]))),
            "headline_rmse": float(np.sqrt(np.mean([(r["reported"] - r["true_loss"]) ** 2 for r in rs]))),
            "own_method": rs[0]["own_method"]}


# --------------------------------------------------------------------------- threshold


def threshold_one(n: int, index: int, task: str, trees: int, pop: pd.DataFrame, y_pop: np.ndarray) -> dict:
    """One table through both plans: the exported equation's true metric and the error of the
    metric each plan reports for it."""
    from .. import pipeline
    from ..evaluate import loss_metric
    from ..resample import FOLDS, REPEATS, SMALL_SPLIT, Plan

    table = _table(planted_small(n, _rng(_TAG["threshold"], n, _TASK_CODE[task], index), task), task,
                   f"threshold-{task}-{n}-{index}")
    metric = loss_metric(task)
    base = settings(trees=trees, seed=index, quiet=True, bootstrap=FAST_BOOTSTRAP, nested_repeats=0)
    cv = Plan("cross-validation", SMALL_SPLIT, FOLDS, REPEATS, reason=f"benchmark: cross-validation forced at {n} rows")
    out = {"n": n, "index": index, "task": task, "metric": metric}
    for name, s, plan in (("split", settings(trees=trees, seed=index, quiet=True, bootstrap=FAST_BOOTSTRAP,
                                             nested_repeats=0, split=THRESHOLD_SPLIT), None),
                          ("cv", base, cv)):
        t0 = time.perf_counter()
        r = pipeline.distill(table, s, plan=plan)
        seconds = time.perf_counter() - t0
        truth = _true_metric(r, pop, y_pop, "equation")
        reported = float(r.evaluation["equation"][metric])
        out[name] = {"plan": r.plan.kind, "true": float(truth), "reported": reported,
                     "abs_error": abs(reported - truth), "seconds": seconds}
    return out


def _mean_se(values: list[float]) -> tuple[float, float]:
    v = np.asarray(values, dtype=float)
    return float(v.mean()), float(v.std(ddof=1) / np.sqrt(len(v))) if len(v) > 1 else float("nan")


def summarise_threshold(rows: list[dict]) -> list[dict]:
    out = []
    for task in dict.fromkeys(r["task"] for r in rows):
        for n in sorted({r["n"] for r in rows if r["task"] == task}):
            rs = [r for r in rows if r["task"] == task and r["n"] == n]
            gain, gain_se = _mean_se([r["cv"]["true"] - r["split"]["true"] for r in rs])
            err, err_se = _mean_se([r["split"]["abs_error"] - r["cv"]["abs_error"] for r in rs])
            out.append({"task": task, "n": n, "runs": len(rs), "metric": rs[0]["metric"],
                        **{f"{p}_{k}": float(np.mean([r[p][k] for r in rs]))
                           for p in ("split", "cv") for k in ("true", "abs_error", "seconds")},
                        "cv_true_advantage": gain, "cv_true_advantage_se": gain_se,
                        "cv_error_advantage": err, "cv_error_advantage_se": err_se,
                        "split_loses": bool(gain > TOLERANCE or err > TOLERANCE)})
    return out


def chosen_threshold(summary: list[dict], task: str) -> int | None:
    """The smallest measured size from which on the split plan no longer loses (module docstring);
    None when it still loses at the largest size measured."""
    ss = [s for s in summary if s["task"] == task]
    choice = None
    for s in reversed(ss):
        if s["split_loses"]:
            break
        choice = s["n"]
    return choice


# --------------------------------------------------------------------------- text


def render(null: list[dict], coverage: list[dict], threshold: list[dict], *, population: int = POPULATION_ROWS,
           judged: bool = True) -> str:
    """The section's three tables (those of the parts that ran); ``judged=False`` (a quick run)
    marks no goal."""
    blocks = [_render_null(null, judged)] if null else []
    if coverage:
        blocks.append(_render_coverage(coverage, population))
    if threshold:
        blocks.append(_render_threshold(threshold))
    return "\n\n".join(blocks)


def _render_null(null: list[dict], judged: bool) -> str:
    lines = [f"Small data: block-test null rejection at alpha {ALPHA} (goal 0.05 ± 0.02, judged on the rate among "
             f"data sets with a block test, from {MIN_TESTS} such data sets)",
             f"{'task':<15}{'rows':>6}{'data sets':>10}{'plan':>18}{'with test':>10}{'rate|test':>10}{'mc se':>7}"
             f"{'rate all':>9}{'whole model':>12}{'s/run':>7}  goal"]
    for s in null:
        cond = "-" if s["rate_given_test"] is None else f"{s['rate_given_test']:.3f}"
        se = "-" if s["mc_se_given_test"] is None else f"{s['mc_se_given_test']:.3f}"
        whole = "-" if s["whole_model_rate"] is None else f"{s['whole_model_rate']:.3f}"
        ok = _null_mark(s)
        lines.append(f"{s['task']:<15}{s['n']:>6}{s['datasets']:>10}{s['plan']:>18}{s['with_block_test']:>10.0%}"
                     f"{cond:>10}{se:>7}{s['rate_all']:>9.3f}{whole:>12}{s['seconds']:>7.2f}  "
                     + ("n/a" if ok is None else "(not judged)" if not judged else "pass" if ok else "SHORT"))
    return "\n".join(lines)


def _render_coverage(coverage: list[dict], population: int) -> str:
    lines = [f"Loss interval of the equation at {COVERAGE_ROWS} rows (level {LEVEL}, goal coverage >= {COVERAGE_GOAL}); "
                  f"truth on {population:,} population rows",
             f"{'task':<15}{'runs':>5}{'metric':>9}{'cover fitted':>13}{'mc se':>7}{'cover expected':>15}"
              f"{'expected loss':>14}{'mean reported':>14}{'sd true':>8}{'below':>7}{'above':>7}{'width':>7}{'s/run':>7}"
              f"{'no cap':>8}{'capped':>8}  interval"]
    for s in coverage:
        sd = "-" if s["sd_true_loss"] is None else f"{s['sd_true_loss']:.3f}"
        unb, cap = ("-" if s.get(k) is None else f"{s[k]:.3f}" for k in ("coverage_unbounded", "held_above"))
        lines.append(f"{s['task']:<15}{s['runs']:>5}{s['metric']:>9}{s['coverage_fitted']:>13.3f}{s['mc_se_fitted']:>7.3f}"
                     f"{s['coverage_expected']:>15.3f}{s['expected_loss']:>+14.4f}{s['mean_reported']:>+14.4f}{sd:>8}"
                     f"{s['truth_below']:>7.2f}{s['truth_above']:>7.2f}{s['mean_width']:>7.3f}{s['seconds']:>7.2f}"
                     f"{unb:>8}{cap:>8}  {s.get('method', '')}")
    lines.append("  cover fitted: the fitted models' own loss on the population rows; cover expected: the mean of those "
                 "over the runs. Nested cross-validation only, fitted loss: no cap = without the sqrt(K) x naive "
                 "ceiling; capped = share of runs at that ceiling")
    own = [s for s in coverage if "coverage_own" in s]
    if own:
        lines += ["", "Loss of these models judged on the confirmation rows (pocketforest.own_loss) against the fitted "
                      "models' loss on the population rows",
                  f"{'task':<15}{'runs':>5}{'cover':>8}{'mc se':>7}{'below':>7}{'above':>7}{'width':>7}"
                  f"{'rmse':>7}{'rmse cv':>8}  interval"]
        for s in own:
            lines.append(f"{s['task']:<15}{s['runs']:>5}{s['coverage_own']:>8.3f}{s['mc_se_own']:>7.3f}{s['own_below']:>7.2f}"
                         f"{s['own_above']:>7.2f}{s['own_width']:>7.3f}{s['own_rmse']:>7.3f}{s['headline_rmse']:>8.3f}  "
                         f"{s['own_method']}")
        lines.append("  rmse: of the estimate against the fitted models' loss; rmse cv: the same for the cross-validated "
                     "(procedure) estimate")
    return "\n".join(lines)


def _render_threshold(threshold: list[dict]) -> str:
    lines = ["Threshold: forced split 0.5/0.25/0.25 vs cross-validation plan, same tables (equation; true = on the "
                  "population rows; error = |reported - true|; advantage = cv better by, ± se)",
             f"{'task':<15}{'rows':>6}{'runs':>5}{'true split':>11}{'true cv':>9}{'cv adv':>16}"
              f"{'err split':>10}{'err cv':>8}{'cv adv':>16}{'s split':>8}{'s cv':>7}  split plan"]
    for s in threshold:
        lines.append(f"{s['task']:<15}{s['n']:>6}{s['runs']:>5}{s['split_true']:>11.4f}{s['cv_true']:>9.4f}"
                     f"{_pm(s['cv_true_advantage'], s['cv_true_advantage_se']):>16}{s['split_abs_error']:>10.4f}"
                     f"{s['cv_abs_error']:>8.4f}{_pm(s['cv_error_advantage'], s['cv_error_advantage_se']):>16}"
                     f"{s['split_seconds']:>8.2f}{s['cv_seconds']:>7.2f}  " + ("loses" if s["split_loses"] else "holds"))
    for task in dict.fromkeys(s["task"] for s in threshold):
        choice = chosen_threshold(threshold, task)
        largest = max(s["n"] for s in threshold if s["task"] == task)
        lines.append(f"  {task}: split plan stops losing (both advantages <= {TOLERANCE}) from "
                     + (f"{choice:,} rows" if choice is not None else f"beyond {largest:,} rows (not reached)"))
    return "\n".join(lines)


def _pm(value: float, se: float) -> str:
    return f"{value:+.4f}±{se:.4f}" if np.isfinite(se) else f"{value:+.4f}"


# --------------------------------------------------------------------------- section


def _null_mark(s: dict) -> bool | None:
    """The 5% ± 2% goal on the rate among data sets with a block test, judged from MIN_TESTS tests."""
    if s["rate_given_test"] is None or s["tested"] < MIN_TESTS:
        return None
    return judge(abs(s["rate_given_test"] - ALPHA), "<=", 0.02)


def small_figures(null: list[dict], coverage: list[dict], threshold: list[dict]) -> list[Figure]:
    out = []
    for s in null:
        rate = s["rate_given_test"]
        out.append(Figure(f"small: null rejection | block test, {s['task']} {s['n']} rows", rate, "0.05 ± 0.02",
                          _null_mark(s), detail=s,
                          note=f"{s['tested']} of {s['datasets']} data sets had a block test"
                               + ("" if s["tested"] >= MIN_TESTS else f" (fewer than {MIN_TESTS}: not judged)")
                               + "; over all data sets "
                               f"{s['rate_all']:.3f}; whole model vs intercept "
                               + ("-" if s["whole_model_rate"] is None else f"{s['whole_model_rate']:.3f}")))
    for s in coverage:
        # judged: the interval about these models against their own loss, the cross-validated
        # (procedure) interval against the expected loss; the latter against the fitted models'
        # loss is printed for comparison only
        pairs = [("own", "fitted models' loss, interval on the confirmation rows", True)] if "coverage_own" in s else []
        pairs += [("expected", "expected loss, cross-validated interval", True),
                  ("fitted", "fitted models' loss, cross-validated interval", "coverage_own" not in s)]
        for target, what, judged in pairs:
            cov = s[f"coverage_{target}"]
            out.append(Figure(f"small: loss coverage, {what}, {s['task']} {s['n']} rows", cov, f">= {COVERAGE_GOAL}",
                              judge(cov, ">=", COVERAGE_GOAL) if judged else None, detail=s,
                              note=f"{s['runs']} data sets, Monte Carlo se {s[f'mc_se_{target}']:.3f}"
                                   + ("" if judged else "; not judged (that interval is about the procedure)")))
    for task in dict.fromkeys(s["task"] for s in threshold):
        choice = chosen_threshold(threshold, task)
        out.append(Figure(f"small: rows from which the split plan holds, {task}", choice, "shown", None,
                          detail={"sizes": [s["n"] for s in threshold if s["task"] == task], "tolerance": TOLERANCE},
                          note="not reached at the sizes measured" if choice is None else ""))
    return out


def add_arguments(parser: argparse.ArgumentParser) -> None:
    g = parser.add_argument_group("small-data section (--small)")
    g.add_argument("--small-null", type=int, help=f"pure-noise data sets per size and task (default {FULL['null']})")
    g.add_argument("--small-coverage", type=int, help="coverage data sets per task (default "
                   + ", ".join(f"{k} {v}" for k, v in FULL["coverage"].items()) + ")")
    g.add_argument("--small-nested", type=int, help="nested cross-validation repeats of the coverage runs (default: "
                                                    "distill's; 0: the paired bootstrap over out-of-fold rows)")
    g.add_argument("--small-seeds", type=int, help=f"threshold tables per size (default {FULL['seeds']})")
    g.add_argument("--small-tasks", help="regression and/or classification, comma-separated (default both; the "
                                         "threshold table is regression only)")
    g.add_argument("--small-parts", help="null, coverage and/or threshold, comma-separated (default all three)")
    g.add_argument("--small-sizes", help="row counts of the threshold table (default "
                                         + ",".join(str(n) for n in THRESHOLD_SIZES) + ")")


def options(args: argparse.Namespace) -> dict:
    counts = {k: getattr(args, f"small_{k}") for k in ("null", "coverage", "seeds")}
    for k, v in counts.items():
        if v is not None and v < 2:
            raise InputError(f"--small-{k} {v}: give at least 2")
    sizes = int_list(args.small_sizes, "--small-sizes")
    if sizes and min(sizes) < 100:
        raise InputError(f"--small-sizes {args.small_sizes!r}: every size needs at least 100 rows")
    if args.small_nested is not None and args.small_nested < 0:
        raise InputError(f"--small-nested {args.small_nested}: give 0 or more")
    return {**counts, "nested": args.small_nested, "tasks": name_list(args.small_tasks, TASKS, "--small-tasks"),
            "parts": name_list(args.small_parts, PARTS, "--small-parts"), "sizes": sizes}


def run(quick: bool, root: Path, say, null: int | None = None, coverage: int | None = None,
        seeds: int | None = None, tasks: tuple[str, ...] | None = None, parts: tuple[str, ...] | None = None,
        sizes: tuple[int, ...] | None = None, nested: int | None = None) -> Section:
    """The small-data section (no files under ``root``); ``parts`` picks among :data:`PARTS`,
    ``sizes`` the threshold table's row counts."""
    cfg = dict(QUICK if quick else FULL)
    cfg.update({k: v for k, v in (("null", null), ("seeds", seeds)) if v is not None})
    if coverage is not None:
        cfg["coverage"] = {t: coverage for t in TASKS}
    nested = cfg.get("nested") if nested is None else nested   # --quick: one nested repeat
    tasks = tasks or (("regression",) if quick else TASKS)
    sizes = sizes or (QUICK_THRESHOLD_SIZES if quick else THRESHOLD_SIZES)
    parts = parts or PARTS
    t0 = time.perf_counter()
    say(f"small: null rejection ({cfg['null']} data sets per size), coverage ({cfg['coverage']}), "
        f"threshold ({cfg['seeds']} tables per size), trees {cfg['trees']}")
    null_rows = []
    for task in (tasks if "null" in parts else ()):
        for n in NULL_SIZES:
            null_rows += [null_one(n, i, task, cfg["trees"]) for i in range(cfg["null"])]
            say(f"  null {task} {n}: {time.perf_counter() - t0:.0f} s")
    cover_rows, threshold_rows = [], []
    for task in tasks:
        pop, y_pop = _population(task, cfg["population"])
        if "coverage" in parts:
            for i in range(cfg["coverage"][task]):
                cover_rows.append(coverage_one(i, task, cfg["trees"], pop, y_pop, nested=nested))
                if (i + 1) % 25 == 0:   # a long run shows how it is going
                    done = [r for r in cover_rows if r["task"] == task]
                    key = "covered_own" if all("covered_own" in r for r in done) else "covered"
                    say(f"  coverage {task}: {i + 1} runs, fitted-loss coverage so far "
                        f"{np.mean([r[key] for r in done]):.3f}, {time.perf_counter() - t0:.0f} s")
            say(f"  coverage {task}: {time.perf_counter() - t0:.0f} s")
        if task in THRESHOLD_TASKS and "threshold" in parts:
            for n in sizes:
                threshold_rows += [threshold_one(n, i, task, cfg["trees"], pop, y_pop) for i in range(cfg["seeds"])]
                say(f"  threshold {task} {n}: {time.perf_counter() - t0:.0f} s")
    ns, cs, ts = summarise_null(null_rows), summarise_coverage(cover_rows), summarise_threshold(threshold_rows)
    lines = ["", render(ns, cs, ts, population=cfg["population"], judged=not quick), f"small wall time {time.perf_counter() - t0:.0f} s (trees {cfg['trees']})"]
    return Section(small_figures(ns, cs, ts), raw={"small": {"config": cfg, "null": null_rows, "coverage": cover_rows,
                                                             "threshold": threshold_rows}}, lines=lines)
