"""Power of discovery: a planted truth whose every part has a known share of the outcome's variance.

The generator (:func:`planted`) builds the outcome from six parts, each a function of its own
independent inputs, every input centred (numbers) or balanced (categories):

====================  =====================================  ======  ==========================
part                  formula                                share   variance of the formula
====================  =====================================  ======  ==========================
linear                a · x_lin                              1 %     a²  (x_lin ~ N(0, 1))
category              effect[grp], effects centred           2 %     mean of effect² (4 equal levels)
bend                  b · (x_bend² − 1)                      5 %     2 b²  (x_bend ~ N(0, 1))
number × number       c · x_a · x_b                          3 %     c²
number × one level    d · x_c · [site = "s2"]                3 %     d² / 3  (3 equal levels)
category × category   e · M[k1, k2], rows and columns of M   2 %     e² · mean(M²)
                      summing to zero
====================  =====================================  ======  ==========================

Because the parts use disjoint sets of independent inputs and each has mean zero, they are
uncorrelated, so the variance of their sum is the sum of their variances: every share is exact by
construction in the population, and the generator also reports the realised share in each sample
(printed in the table). Regression adds Gaussian noise with the remaining 84 % of the variance
(outcome variance 1). Binomial passes the same linear predictor, scaled by ``s``, through a logit;
there a part's share is its share on the latent scale, ``Var(s·part) / (Var(s·η) + π²/3)``, the
latent-variable R² of McKelvey & Zavoina (1975, J Math Sociol 4:103), and ``s`` is chosen so the
logistic error carries the same 84 %: ``s² = (π²/3) / 0.84``. The intercept is 0 (balanced classes).

Five noise columns enter no part: ``noise_lin`` (r = 0.6 with x_lin), ``noise_bend`` (r = 0.6 with
x_bend), two independent normals and one four-level category.

Recovery of a part, read from ``result.equation.terms`` (``.kind``, ``.variables``):
linear: a term of ``x_lin`` alone; category: a term of ``grp`` alone; bend: a term of ``x_bend``
alone whose kind is not linear; number × number: a term involving both ``x_a`` and ``x_b``; number
× one level: a term involving ``x_c`` and ``site``; category × category: a term involving ``k1`` and
``k2``. A noise run is one whose equation has any term involving a noise column.

Goals (issue 11): the recovered share grows with the rows and is at least 95 % at 20,000 rows; a
noise column enters the equation in at most 5 % of the runs at every size.

Run: ``python -m pocketforest.bench --only power`` (4 sizes x 5 seeds x 2 tasks),
``--quick`` (1,000 rows, 1 seed, regression), ``--power-sizes 1000,5000``, ``--power-seeds 0,1,2``,
``--power-tasks regression``, ``--power-trees N``; ``--power`` adds it to the default sections.
"""
from __future__ import annotations

import argparse
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError
from .common import Figure, Section, int_list, judge, name_list, settings

SHARES = {"linear": 0.01, "category": 0.02, "bend": 0.05, "num_num": 0.03, "num_level": 0.03, "cat_cat": 0.02}
PART_LABELS = {"linear": "linear 1%", "category": "category 2%", "bend": "bend 5%", "num_num": "num×num 3%",
               "num_level": "num×level 3%", "cat_cat": "cat×cat 2%"}
NOISE_SHARE = 1.0 - sum(SHARES.values())
NOISE_COLUMNS = ("noise_lin", "noise_bend", "noise_a", "noise_b", "noise_cat")
NOISE_R = 0.6
GROUPS = ("g1", "g2", "g3", "g4")
GROUP_EFFECT = np.array([1.0, -1.0, 0.5, -0.5])          # centred: mean 0 over equal levels
SITES = ("s1", "s2", "s3")
SLOPE_SITE = "s2"
K1, K2 = ("a", "b", "c"), ("u", "v")
CELL = np.array([[1.0, -1.0], [-1.0, 1.0], [0.0, 0.0]])   # rows and columns sum to zero
LOGIT_SCALE = float(np.sqrt((np.pi ** 2 / 3) / NOISE_SHARE))
FULL_SIZES = (1_000, 5_000, 20_000, 100_000)
FULL_SEEDS = (0, 1, 2, 3, 4)
TASKS = ("regression", "classification")
FULL_TREES = 100
QUICK_TREES = 40
BOOTSTRAP = 100               # the loss interval is not read here


def _coefficients() -> dict[str, float]:
    """Each part's multiplier so that its population variance equals its share (outcome variance 1)."""
    return {"linear": np.sqrt(SHARES["linear"]),
            "category": np.sqrt(SHARES["category"] / np.mean(GROUP_EFFECT ** 2)),
            "bend": np.sqrt(SHARES["bend"] / 2.0),
            "num_num": np.sqrt(SHARES["num_num"]),
            "num_level": np.sqrt(SHARES["num_level"] * len(SITES)),
            "cat_cat": np.sqrt(SHARES["cat_cat"] / np.mean(CELL ** 2))}


@dataclass
class Planted:
    data: pd.DataFrame                 # features and the outcome "y"
    parts: dict[str, np.ndarray]       # each part's contribution to the linear predictor (unscaled)
    realised: dict[str, float]         # each part's share of the variance in this sample


def planted(n: int, seed: int, task: str = "regression") -> Planted:
    """The planted-truth table (see the module docstring for the construction and the shares)."""
    rng = np.random.default_rng(seed)
    coef = _coefficients()
    x_lin, x_bend, x_a, x_b, x_c = (rng.standard_normal(n) for _ in range(5))
    g = rng.integers(0, len(GROUPS), n)
    site = rng.integers(0, len(SITES), n)
    k1, k2 = rng.integers(0, len(K1), n), rng.integers(0, len(K2), n)
    parts = {"linear": coef["linear"] * x_lin,
             "category": coef["category"] * GROUP_EFFECT[g],
             "bend": coef["bend"] * (x_bend ** 2 - 1.0),
             "num_num": coef["num_num"] * x_a * x_b,
             "num_level": coef["num_level"] * x_c * (site == SITES.index(SLOPE_SITE)),
             "cat_cat": coef["cat_cat"] * CELL[k1, k2]}
    eta = sum(parts.values())
    tail = np.sqrt(1 - NOISE_R ** 2)
    df = pd.DataFrame({"x_lin": x_lin, "grp": np.asarray(GROUPS, dtype=object)[g], "x_bend": x_bend,
                       "x_a": x_a, "x_b": x_b, "x_c": x_c, "site": np.asarray(SITES, dtype=object)[site],
                       "k1": np.asarray(K1, dtype=object)[k1], "k2": np.asarray(K2, dtype=object)[k2],
                       "noise_lin": NOISE_R * x_lin + tail * rng.standard_normal(n),
                       "noise_bend": NOISE_R * x_bend + tail * rng.standard_normal(n),
                       "noise_a": rng.standard_normal(n), "noise_b": rng.standard_normal(n),
                       "noise_cat": np.asarray(GROUPS, dtype=object)[rng.integers(0, len(GROUPS), n)]})
    if task == "regression":
        y = eta + rng.normal(0.0, np.sqrt(NOISE_SHARE), n)
        df["y"] = y
        total = float(np.var(y))
        realised = {k: float(np.var(v)) / total for k, v in parts.items()}
    else:
        lp = LOGIT_SCALE * eta
        df["y"] = np.where(rng.uniform(size=n) < 1.0 / (1.0 + np.exp(-lp)), "yes", "no")
        total = float(np.var(lp)) + np.pi ** 2 / 3       # latent scale (McKelvey & Zavoina 1975)
        realised = {k: float(np.var(LOGIT_SCALE * v)) / total for k, v in parts.items()}
    return Planted(df, parts, realised)


# --------------------------------------------------------------------------- recovery


def _terms(result) -> list[tuple[str, tuple[str, ...]]]:
    eq = getattr(result, "equation", None)
    return [(str(getattr(t, "kind", "")), tuple(getattr(t, "variables", ()) or ()))
            for t in (getattr(eq, "terms", None) or [])]


def recovered(terms: list[tuple[str, tuple[str, ...]]]) -> dict[str, bool]:
    """Which planted parts the equation's terms carry (rules in the module docstring)."""
    def alone(v: str, nonlinear: bool = False) -> bool:
        return any(vs == (v,) and (not nonlinear or k not in ("linear", "categorical")) for k, vs in terms)

    def together(*vs: str) -> bool:
        return any(len(t) > 1 and set(vs) <= set(t) for _, t in terms)

    return {"linear": alone("x_lin"), "category": alone("grp"), "bend": alone("x_bend", nonlinear=True),
            "num_num": together("x_a", "x_b"), "num_level": together("x_c", "site"),
            "cat_cat": together("k1", "k2")}


def noise_in(terms: list[tuple[str, tuple[str, ...]]]) -> list[str]:
    return sorted({v for _, vs in terms for v in vs if v in NOISE_COLUMNS})


def power_one(n: int, seed: int, task: str, trees: int) -> dict:
    from ..intake import prepare
    from .. import pipeline

    p = planted(n, seed, task)
    table = prepare(p.data, "y", task=task, source=f"planted-{task}-{n}-{seed}")
    t0 = time.perf_counter()
    result = pipeline.distill(table, settings(trees=trees, seed=seed, quiet=True, bootstrap=BOOTSTRAP))
    seconds = time.perf_counter() - t0
    terms = _terms(result)
    rec = recovered(terms)
    noise = noise_in(terms)
    timings = getattr(result, "timings", None) or {}
    return {"n": n, "seed": seed, "task": task, "trees": trees, "recovered": rec,
            "recovery": float(np.mean(list(rec.values()))), "noise": noise, "noise_in": bool(noise),
            "terms": [f"{k}({', '.join(v)})" for k, v in terms], "realised": p.realised,
            "seconds": seconds, "forest_seconds": float(timings.get("forest", float("nan"))),
            "discovery_seconds": float(timings.get("discovery", float("nan")))}


def run_power(quick: bool = False, sizes: tuple[int, ...] | None = None, seeds: tuple[int, ...] | None = None,
              tasks: tuple[str, ...] | None = None, trees: int | None = None, say=None) -> list[dict]:
    """One row per (task, size, seed). Quick: 1,000 rows, one seed, regression, few trees."""
    sizes = sizes or ((1_000,) if quick else FULL_SIZES)
    seeds = seeds or ((0,) if quick else FULL_SEEDS)
    tasks = tasks or (("regression",) if quick else TASKS)
    trees = trees or (QUICK_TREES if quick else FULL_TREES)
    rows = []
    for task in tasks:
        for n in sizes:
            for seed in seeds:
                rows.append(power_one(n, seed, task, trees))
                if say:
                    r = rows[-1]
                    say(f"  {task} {n} seed {seed}: recovery {r['recovery']:.2f}, noise {r['noise'] or '-'}, "
                        f"{r['seconds']:.1f} s")
    return rows


def summarise_power(rows: list[dict]) -> list[dict]:
    out = []
    for task in dict.fromkeys(r["task"] for r in rows):
        for n in sorted({r["n"] for r in rows if r["task"] == task}):
            rs = [r for r in rows if r["task"] == task and r["n"] == n]
            out.append({"task": task, "n": n, "runs": len(rs),
                        "recovery": float(np.mean([r["recovery"] for r in rs])),
                        "parts": {k: float(np.mean([r["recovered"][k] for r in rs])) for k in SHARES},
                        "noise_runs": float(np.mean([r["noise_in"] for r in rs])),
                        "noise_columns": sorted({c for r in rs for c in r["noise"]}),
                        "realised": {k: float(np.mean([r["realised"][k] for r in rs])) for k in SHARES},
                        "seconds": float(np.mean([r["seconds"] for r in rs]))})
    return out


def render_power(rows: list[dict]) -> str:
    summ = summarise_power(rows)
    parts = list(SHARES)
    head = (f"{'task':<15}{'rows':>8}{'runs':>5}{'recovered':>10}" + "".join(f"{PART_LABELS[k]:>14}" for k in parts)
            + f"{'noise runs':>11}{'s/run':>7}  goal")
    lines = ["Power: planted terms recovered in the equation (share over runs; goals: grows with the rows, "
             ">= 95% at 20,000 rows; a noise column in <= 5% of runs at every size)", head, "-" * len(head)]
    for task in dict.fromkeys(s["task"] for s in summ):
        prev = None
        for s in (x for x in summ if x["task"] == task):
            marks = []
            if s["n"] >= 20_000:
                marks.append("recovery " + ("pass" if s["recovery"] >= 0.95 else "SHORT"))
            if prev is not None:
                marks.append("grows" if s["recovery"] >= prev else "FALLS")
            marks.append("noise " + ("pass" if s["noise_runs"] <= 0.05 else "SHORT"))
            prev = s["recovery"]
            lines.append(f"{task:<15}{s['n']:>8,}{s['runs']:>5}{s['recovery']:>10.0%}"
                         + "".join(f"{s['parts'][k]:>14.0%}" for k in parts)
                         + f"{s['noise_runs']:>11.0%}{s['seconds']:>7.1f}  " + ", ".join(marks))
    lines += ["", "Realised share of variance per part (mean over the runs' samples; binomial: latent scale)",
              f"{'task':<15}{'rows':>8}" + "".join(f"{PART_LABELS[k]:>14}" for k in parts)]
    for s in summ:
        lines.append(f"{s['task']:<15}{s['n']:>8,}" + "".join(f"{s['realised'][k]:>14.2%}" for k in parts))
    noisy = [s for s in summ if s["noise_columns"]]
    if noisy:
        lines += ["", "Noise columns that entered: " + "; ".join(
            f"{s['task']} {s['n']:,}: {', '.join(s['noise_columns'])}" for s in noisy)]
    return "\n".join(lines)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    g = parser.add_argument_group("power section (--power)")
    g.add_argument("--power-sizes", help="comma-separated row counts (default 1000,5000,20000,100000; --quick: 1000)")
    g.add_argument("--power-seeds", help="comma-separated seeds (default 0,1,2,3,4; --quick: 0)")
    g.add_argument("--power-tasks", help="regression and/or classification, comma-separated "
                                         "(default both; --quick: regression)")
    g.add_argument("--power-trees", type=int, help=f"forest trees (default {FULL_TREES}; --quick: {QUICK_TREES})")


def options(args: argparse.Namespace) -> dict:
    sizes = int_list(args.power_sizes, "--power-sizes")
    if sizes and min(sizes) < 100:
        raise InputError(f"--power-sizes {args.power_sizes!r}: every size needs at least 100 rows")
    return {"sizes": sizes, "seeds": int_list(args.power_seeds, "--power-seeds"),
            "tasks": name_list(args.power_tasks, TASKS, "--power-tasks"), "trees": args.power_trees}


def power_figures(rows: list[dict]) -> list[Figure]:
    """Judged figures: recovery at 20,000 rows and above, growth with the rows, noise at every size."""
    out = []
    summ = summarise_power(rows)
    for task in dict.fromkeys(s["task"] for s in summ):
        ss = [s for s in summ if s["task"] == task]
        for s in ss:
            judged = s["n"] >= 20_000            # the goal is set from 20,000 rows on
            out.append(Figure(f"power: recovered, {task} {s['n']:,} rows", s["recovery"],
                              ">= 0.95" if judged else "shown", judge(s["recovery"], ">=", 0.95) if judged else None,
                              detail=s, note=", ".join(f"{PART_LABELS[k]} {v:.0%}" for k, v in s["parts"].items())))
            out.append(Figure(f"power: noise runs, {task} {s['n']:,} rows", s["noise_runs"],
                              "<= 0.05", judge(s["noise_runs"], "<=", 0.05),
                              note=", ".join(s["noise_columns"])))
        if len(ss) > 1:
            step = min(b["recovery"] - a["recovery"] for a, b in zip(ss, ss[1:]))
            out.append(Figure(f"power: smallest rise between sizes, {task}", step, ">= 0",
                              judge(step, ">=", 0.0), note=" -> ".join(f"{s['recovery']:.0%}" for s in ss)))
    return out


def run(quick: bool, root: Path, say, sizes: tuple[int, ...] | None = None, seeds: tuple[int, ...] | None = None,
        tasks: tuple[str, ...] | None = None, trees: int | None = None) -> Section:
    """The power section for ``python -m pocketforest.bench --power`` (no files under ``root``)."""
    t0 = time.perf_counter()
    say("power: planted-truth recovery")
    rows = run_power(quick, sizes, seeds, tasks, trees, say=say)
    lines = ["", render_power(rows), f"power wall time {time.perf_counter() - t0:.0f} s"]
    return Section(power_figures(rows), raw={"power": rows}, lines=lines)
