"""The surrogate tree's figures (``--tree``): how faithful a tree a person can draw is, and
whether anything beats greedy growth at that size.

On Friedman #1 (Friedman 1991, via scikit-learn's ``make_friedman1``: 10 uniform columns, noise
sd 1) and on the committed demo data (target ``yield_kg``), over a few seeds of the
discovery / confirmation / test split:

* held-out fidelity (R² of tree against forest on the test rows) of the greedy best-first tree
  (scikit-learn CART with ``max_leaf_nodes``, what ``distill`` grows) at 8 and 12 leaves;
* the same for the searches of :mod:`pocketforest.tree_search` on the same rows: the exact
  optimum of depth ≤ 3 at 8 leaves (MurTree's dynamic programme, Demirović et al. 2022) and
  depth-two lookahead at 8 and 12 leaves, with their cost as a share of the ``distill`` run;
* the greedy tree fitted on the discovery rows plus as many forest-labelled synthetic rows
  (Breiman & Shang 1996), at the same sizes;
* the size the default rule picks.

A search would be kept in ``distill`` only if it beat greedy by at least
:data:`KEEP_GAIN` at equal size on both data sets, at a small share of the ``distill`` time
(:data:`KEEP_SHARE`); synthetic rows become the default only if they raise fidelity by
:data:`KEEP_GAIN` at equal size. The figures below are that test.
"""
from __future__ import annotations

import time
from pathlib import Path

import numpy as np

from .common import Figure, Section, judge

KEEP_GAIN = 0.02    # fidelity R² a search or synthetic rows must add at equal size
KEEP_SHARE = 0.10   # most a search may add to the distill wall time
SIZES = (8, 12)
FULL = {"friedman_rows": 2_000, "demo_rows": None, "trees": None, "seeds": (0, 1, 2), "bins": 32}
QUICK = {"friedman_rows": 300, "demo_rows": 300, "trees": 10, "seeds": (0,), "bins": 4}


def run(quick: bool, root: Path, say) -> Section:
    """Every tree figure (no files needed under ``root``)."""
    cfg = QUICK if quick else FULL
    rows, figures, lines = {}, [], ["", "surrogate tree fidelity (R² to the forest, test rows; mean over "
                                        f"{len(cfg['seeds'])} split seed(s)):"]
    for name in ("friedman1", "demo"):
        say(f"tree figures: {name}")
        rows[name] = measure(name, cfg)
    lines += _table(rows)
    for label in ("friedman1", "demo"):
        r = rows[label]
        m = r["mean"]
        figures.append(Figure(f"tree default leaves ({label})", float(max(r["chosen_leaves"])), "<= 12",
                              judge(max(r["chosen_leaves"]), "<=", 12), detail={"per_seed": r["chosen_leaves"]}))
        for key, what in (("optimal_8", "exact at 8 leaves"), ("lookahead_8", "lookahead at 8 leaves"),
                          ("lookahead_12", "lookahead at 12 leaves"), ("synthetic_8", "synthetic rows at 8"),
                          ("synthetic_12", "synthetic rows at 12")):
            base = m["greedy_" + key.split("_")[1]]
            gain = m[key] - base
            figures.append(Figure(f"tree r² gain, {what} ({label})", gain, f">= {KEEP_GAIN}",
                                  judge(gain, ">=", KEEP_GAIN), detail={"greedy": base, "other": m[key]},
                                  note=f"greedy best-first {base:.3f}, this {m[key]:.3f}"))
        share = r["seconds"]["optimal_8"] / r["distill_seconds"]
        figures.append(Figure(f"tree exact search time / distill time ({label})", share, f"<= {KEEP_SHARE}",
                              judge(share, "<=", KEEP_SHARE),
                              detail={"search_seconds": r["seconds"]["optimal_8"], "distill_seconds": r["distill_seconds"],
                                      "lookahead_12_seconds": r["seconds"]["lookahead_12"],
                                      "greedy_12_seconds": r["seconds"]["greedy_12"]},
                              note=f"lookahead at 12 leaves {r['seconds']['lookahead_12']:.2f} s, greedy "
                                   f"{r['seconds']['greedy_12']:.3f} s, distill {r['distill_seconds']:.1f} s"))
    return Section(figures, raw={"tree": rows}, sizes={"tree": {k: v for k, v in cfg.items() if k != "seeds"}},
                   lines=lines)


def _data_set(name: str, cfg: dict, seed: int):
    """The data set's table, cut to its benchmark size."""
    import pandas as pd
    from sklearn.datasets import make_friedman1

    from ..cli import DEMO_DATA, DEMO_TARGET
    from ..intake import load, prepare
    if name == "friedman1":
        X, y = make_friedman1(n_samples=cfg["friedman_rows"], n_features=10, noise=1.0, random_state=seed)
        df = pd.DataFrame(X, columns=[f"x{i + 1}" for i in range(10)])
        df["y"] = y
        return prepare(df, "y", source="friedman1.csv")
    table = load(str(DEMO_DATA), DEMO_TARGET, ignore=["marketable"])
    if cfg["demo_rows"]:
        table = prepare(table.data.iloc[: cfg["demo_rows"]].reset_index(drop=True), DEMO_TARGET,
                        source="greenhouse_trial.csv", task=table.task)
    return table


def measure(name: str, cfg: dict) -> dict:
    """Fidelity of every tree on the same rows, per seed, with the time each took."""
    import pandas as pd
    from sklearn.metrics import r2_score

    from ..defaults import TREES
    from ..design import make_preprocessor, model_frame
    from ..forest import fit_forest
    from ..pipeline import Settings, distill
    from ..split import make_splits
    from ..surrogate import distill_tree, fit_tree, synthetic_rows
    from ..tree_search import bin_design, lookahead_tree, optimal_tree, predict_codes

    trees = cfg["trees"] or TREES
    per_seed, seconds, chosen = [], {}, []
    distill_seconds = None
    for seed in cfg["seeds"]:
        table = _data_set(name, cfg, seed)
        data = table.data
        splits = make_splits(len(data), (0.5, 0.25, 0.25), seed, None)
        disc, conf, test = (data.iloc[i].reset_index(drop=True) for i in (splits.discovery, splits.confirmation,
                                                                          splits.test))
        prep, cols = make_preprocessor(table.features, data)
        Xd, Xc, Xt = (model_frame(x, table.features) for x in (disc, conf, test))
        forest = fit_forest(Xd, disc[table.target].to_numpy(float), prep, cols, "regression", trees=trees,
                            seed=seed, quiet=True)
        Df, Dt = (np.asarray(prep.transform(x), dtype=np.float32) for x in (Xd, Xt))
        yf, yt = forest.predict_design(Df), forest.predict_design(Dt)
        out: dict[str, float] = {}

        def timed(key, fn):
            t0 = time.perf_counter()
            pred = fn()
            seconds.setdefault(key, []).append(time.perf_counter() - t0)
            out[key] = float(r2_score(yt, pred))

        binned = bin_design(Df, cfg["bins"])
        codes_t = binned.code(Dt)
        Y = yf.reshape(-1, 1)
        synth = pd.concat([Xd, synthetic_rows(Xd, len(Xd), seed)], ignore_index=True)
        Ds = np.asarray(prep.transform(synth), dtype=np.float32)
        ys = forest.predict_design(Ds)
        for k in SIZES:
            timed(f"greedy_{k}", lambda: fit_tree(Df, yf, "regression", seed=seed, min_leaf=5,
                                                  max_leaf_nodes=k).predict(Dt))
            timed(f"lookahead_{k}", lambda: predict_codes(lookahead_tree(binned, Y, k, 5), codes_t, Y)[:, 0])
            timed(f"synthetic_{k}", lambda: fit_tree(Ds, ys, "regression", seed=seed, min_leaf=5,
                                                     max_leaf_nodes=k).predict(Dt))
        timed("optimal_8", lambda: predict_codes(optimal_tree(binned, Y, 8, 5), codes_t, Y)[:, 0])
        fit = distill_tree(forest, Xd, Xc, Xt, seed=seed)
        chosen.append(fit.leaves)
        out["chosen"] = float(next(r["held_out"]["r2"] for r in fit.frontier if r["leaves"] == fit.leaves))
        per_seed.append(out)
        if distill_seconds is None:   # the whole job once, for the cost share
            t0 = time.perf_counter()
            distill(table, Settings(trees=trees, seed=seed, quiet=True, bootstrap=200 if cfg["trees"] else 1000))
            distill_seconds = time.perf_counter() - t0
    keys = per_seed[0].keys()
    return {"per_seed": per_seed, "mean": {k: float(np.mean([s[k] for s in per_seed])) for k in keys},
            "seconds": {k: float(np.mean(v)) for k, v in seconds.items()}, "distill_seconds": distill_seconds,
            "chosen_leaves": chosen, "rows": int(len(data)), "trees": trees, "bins": cfg["bins"]}


def _table(rows: dict) -> list[str]:
    head = f"  {'data':<10} {'leaves':>6} {'greedy':>8} {'exact<=3':>9} {'lookahead':>10} {'+synthetic':>11}"
    out = [head]
    for name, r in rows.items():
        m = r["mean"]
        for k in SIZES:
            exact = f"{m['optimal_8']:.3f}" if k == 8 else "–"
            out.append(f"  {name:<10} {k:>6} {m[f'greedy_{k}']:>8.3f} {exact:>9} {m[f'lookahead_{k}']:>10.3f} "
                       f"{m[f'synthetic_{k}']:>11.3f}")
        out.append(f"  {name:<10} default: {r['chosen_leaves']} leaves, R² {m['chosen']:.3f}; search seconds: "
                   f"exact(8) {r['seconds']['optimal_8']:.2f}, lookahead(12) {r['seconds']['lookahead_12']:.2f}, "
                   f"greedy(12) {r['seconds']['greedy_12']:.3f}; distill {r['distill_seconds']:.1f}")
    return out
