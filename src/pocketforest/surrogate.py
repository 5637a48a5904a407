"""The small surrogate tree, distilled from the forest (Craven & Shavlik 1996; Buciluă et al. 2006).

Regression: a tree fitted to the forest's predictions. Classification: a classification tree
fitted to the forest's class probabilities as soft labels (each row enters once per class,
weighted by the forest's probability), so its leaves carry averaged forest probabilities and it
converts to ONNX with the same label/probability outputs as the forest.

The tree is for a person to read, so its size is chosen on a size/fidelity frontier. One tree is
grown best-first (scikit-learn ``max_leaf_nodes``: the split that most reduces the error to the
forest goes first) to :data:`~pocketforest.defaults.FRONTIER_LEAVES` leaves; because best-first
growth adds one split at a time, the tree of k leaves is the first k - 1 splits of that tree, so
the whole frontier costs one fit. The default is the smallest tree whose fidelity on the
confirmation rows (the forest labels them; no outcome is used) is within a margin of the most
faithful tree under the leaf cap. A deeper tree is one option away (``--tree-leaves``).

Fidelity for classes is measured on the class probabilities (:func:`pocketforest.evaluate.fidelity`): label agreement
rewards a constant tree on an imbalanced outcome.

Optionally the discovery rows are joined by synthetic rows sampled around them and labelled by
the forest ("born again trees", Breiman & Shang 1996): more rows near the data let a tree copy
the forest's surface more closely without asking for more measured outcomes.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from sklearn.pipeline import Pipeline
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor

from .defaults import FRONTIER_LEAVES, TREE_LEAVES, TREE_MARGIN
from .evaluate import fidelity
from .forest import ForestFit
from .threads import thread_map
from .thresholds import snap_tree_thresholds

DEPTHS = range(1, 9)
MEASURE_NAMES = {"r2": "R²", "probability_r2": "R² of the class probabilities"}


@dataclass
class TreeFit:
    """The chosen tree, the rule that chose it, and the curves it was chosen from.

    ``frontier`` and ``fidelity_by_depth`` rows hold ``confirmation`` fidelity (the rows the size
    was chosen on) and ``held_out`` fidelity (rows named by ``held_out_on``; None until measured).
    """
    pipeline: Pipeline
    depth: int
    leaves: int
    chosen_by: dict
    frontier: list[dict]
    fidelity_by_depth: list[dict]
    grown: DecisionTreeRegressor | DecisionTreeClassifier   # the frontier's trees are its prefixes
    deep: DecisionTreeRegressor | DecisionTreeClassifier | None = None    # depth-first to max(DEPTHS)
    synthetic_rows: int = 0
    held_out_on: str | None = None

    @property
    def model(self):
        return self.pipeline.named_steps["tree"]

    def record_held_out(self, frontier: list[dict], by_depth: list[dict] | None, on: str) -> None:
        """Fill in the ``held_out`` figures measured elsewhere (e.g. averaged over cross-validation
        folds with :func:`mean_frontier` of :func:`frontier_fidelity` results), matched by size
        and depth; ``on`` names those rows for the manifest and the report."""
        def fill(rows: list[dict], found: list[dict], key: str) -> None:
            by = {r[key]: {k: v for k, v in r.items() if k not in ("leaves", "depth")} for r in found}
            for row in rows:
                row["held_out"] = by.get(row[key])
        fill(self.frontier, frontier, "leaves")
        if by_depth is not None:
            fill(self.fidelity_by_depth, by_depth, "depth")
        self.held_out_on = on

    def to_dict(self) -> dict:
        """The manifest's ``tree`` section."""
        return {"depth": self.depth, "leaves": self.leaves, "chosen_by": self.chosen_by,
                "frontier": self.frontier, "frontier_held_out": self.held_out_on,
                "fidelity_by_depth": self.fidelity_by_depth, "synthetic_rows": self.synthetic_rows}


def synthetic_rows(X: pd.DataFrame, n: int, seed: int, *, spread: float = 0.25,
                   swap: float = 0.25) -> pd.DataFrame:
    """``n`` rows sampled around the rows of ``X`` (a model frame: raw inputs by ONNX name).

    Each synthetic row starts from a randomly drawn real row. A number moves by a normal step of
    ``spread`` times the column's standard deviation and is clipped to the column's observed
    range (the data envelope); a missing number stays missing. A category is replaced, with
    probability ``swap``, by a level drawn from the column's observed levels and frequencies.
    Perturbing real rows keeps the joint structure that independent sampling of each column
    would destroy, while still filling in the gaps between rows.
    """
    rng = np.random.default_rng(seed)
    base = rng.integers(0, len(X), n)
    out = {}
    for name in X.columns:
        col = X[name]
        if pd.api.types.is_numeric_dtype(col):
            v = col.to_numpy(dtype=float)
            ok = v[np.isfinite(v)]
            sd = float(np.std(ok)) if len(ok) > 1 else 0.0
            new = v[base] + rng.normal(0.0, spread * sd, n)
            if len(ok):
                new = np.clip(new, ok.min(), ok.max())
            out[name] = new
        else:
            v = col.to_numpy(dtype=object)
            new = v[base].copy()
            flip = rng.uniform(size=n) < swap
            new[flip] = v[rng.integers(0, len(v), int(flip.sum()))]
            out[name] = new
    return pd.DataFrame(out, columns=X.columns)


def fit_tree(Xt: np.ndarray, target: np.ndarray, task: str, *, seed: int, min_leaf: int,
             labels: np.ndarray | None = None, max_depth: int | None = None,
             max_leaf_nodes: int | None = None):
    """One surrogate tree on an encoded design labelled by the forest (values or probabilities).

    With ``max_leaf_nodes`` scikit-learn grows best-first; without it, depth-first to ``max_depth``.
    """
    if task == "regression":
        tree = DecisionTreeRegressor(max_depth=max_depth, max_leaf_nodes=max_leaf_nodes,
                                     min_samples_leaf=min_leaf, random_state=seed)
        tree.fit(Xt, target)
    else:
        n, k = target.shape
        X_rep = np.repeat(Xt, k, axis=0)
        y_rep = np.tile(labels, n)
        w = target.reshape(-1)
        keep = w > 0
        tree = DecisionTreeClassifier(max_depth=max_depth, max_leaf_nodes=max_leaf_nodes,
                                      min_samples_leaf=min_leaf, random_state=seed)
        tree.fit(X_rep[keep], y_rep[keep], sample_weight=w[keep])
        if len(tree.classes_) < k:  # a class the forest never predicts: keep the output width
            tree.fit(np.vstack([X_rep[keep], Xt[:1].repeat(k, 0)]),
                     np.concatenate([y_rep[keep], labels]),
                     sample_weight=np.concatenate([w[keep], np.full(k, 1e-12)]))
    snap_tree_thresholds(tree)
    return tree


def measure(task: str) -> str:
    """The fidelity figure the size rule compares."""
    return "r2" if task == "regression" else "probability_r2"


# ---------------------------------------------------------------------------- the frontier

def _split_order(tree) -> np.ndarray:
    """Rank of each internal node among the splits of a best-first tree (leaves: a huge rank).

    scikit-learn's best-first builder numbers nodes as it creates them, and each split creates
    its two children at once, so the j-th split (from 0) made nodes 2j + 1 and 2j + 2.
    """
    t = tree.tree_
    return np.where(t.children_left >= 0, (t.children_left - 1) // 2, np.iinfo(np.int64).max)


def frontier_sizes(tree) -> list[int]:
    """Leaf counts 2..n of the prefixes of a best-first tree of n leaves."""
    return list(range(2, int(tree.get_n_leaves()) + 1))


def _paths(tree, Xt: np.ndarray) -> np.ndarray:
    """[rows, max_depth + 1]: the node each row is at after 0, 1, ... steps (it stays at its leaf)."""
    t = tree.tree_
    X = np.asarray(Xt, dtype=np.float32)
    rows = np.arange(len(X))
    node = np.zeros(len(X), dtype=np.int64)
    path = [node]
    for _ in range(int(t.max_depth)):
        leaf = t.children_left[node] < 0
        go_left = X[rows, np.maximum(t.feature[node], 0)] <= t.threshold[node]
        node = np.where(leaf, node, np.where(go_left, t.children_left[node], t.children_right[node]))
        path.append(node)
    return np.stack(path, axis=1)


def _node_outputs(tree, nodes: np.ndarray, task: str) -> np.ndarray:
    """Each node's output as if it were a leaf: the mean of its rows' values, or their class
    fractions (what predict_proba returns, scikit-learn >= 1.4)."""
    values = tree.tree_.value[:, 0, :]
    return values[nodes, 0] if task == "regression" else values[nodes]


def _prefix_outputs(tree, Xt: np.ndarray, sizes: list[int], task: str) -> dict[int, np.ndarray]:
    """Each k-leaf prefix's output on ``Xt``: a row stops at the first node on its path that is a
    leaf of the prefix, i.e. whose split rank is k - 1 or more (ranks grow along any path)."""
    path = _paths(tree, Xt)
    rank = _split_order(tree)[path]
    rows = np.arange(len(path))
    return {k: _node_outputs(tree, path[rows, (rank < k - 1).sum(axis=1)], task) for k in sizes}


def _node_depths(tree) -> np.ndarray:
    t = tree.tree_
    depth = np.zeros(t.node_count, dtype=np.int64)
    for i in range(t.node_count):   # parents come before children in scikit-learn's numbering
        if t.children_left[i] >= 0:
            depth[t.children_left[i]] = depth[t.children_right[i]] = depth[i] + 1
    return depth


def _prefix_depths(tree, sizes: list[int]) -> dict[int, int]:
    depth = _node_depths(tree)
    order = _split_order(tree)
    internal = tree.tree_.children_left >= 0
    return {k: int(depth[internal & (order < k - 1)].max() + 1) if k > 1 else 0 for k in sizes}


def _depth_curve(tree, Xt: np.ndarray, forest_out: np.ndarray, task: str) -> list[dict]:
    """Fidelity of the depth-first tree cut at each depth of :data:`DEPTHS`.

    Depth-first growth splits a node on its own rows alone, so the tree grown to depth d is the
    deepest tree cut at depth d: one fit gives the whole curve (node values agree with a fit to
    depth d to the last bits of their sums; tests/test_surrogate.py checks the curve).
    """
    path = _paths(tree, Xt)
    t = tree.tree_
    depth = _node_depths(tree)
    leaf = t.children_left < 0
    out = []
    for d in DEPTHS:
        nodes = path[:, min(d, path.shape[1] - 1)]
        leaves = int(((depth == d) | (leaf & (depth < d))).sum())
        out.append({"depth": d, "leaves": leaves, **fidelity(forest_out, _node_outputs(tree, nodes, task), task)})
    return out


def _frontier(tree, Xt: np.ndarray, forest_out: np.ndarray, task: str) -> list[dict]:
    sizes = frontier_sizes(tree)
    outs = _prefix_outputs(tree, Xt, sizes, task)
    depths = _prefix_depths(tree, sizes)
    return [{"leaves": k, "depth": depths[k], **fidelity(forest_out, outs[k], task)} for k in sizes]


def frontier_fidelity(fit: TreeFit, forest: ForestFit, X: pd.DataFrame) -> list[dict]:
    """Fidelity of every tree on the frontier on the rows ``X``, one entry per size.

    ``X`` is a model frame (``design.model_frame(rows, table.features)``) of rows neither the
    forest nor the tree was fitted on. Entries: ``{"leaves", "depth", **fidelity(...)}``, in the
    order of ``fit.frontier``. For cross-validation: call it on each fold's held-out rows with
    that fold's fit and forest, and average with :func:`mean_frontier`.
    """
    Xt = np.asarray(forest.pipeline.named_steps["prep"].transform(X), dtype=np.float32)
    return _frontier(fit.grown, Xt, forest.predict_design(Xt), forest.task)


def mean_frontier(runs: list[list[dict]], key: str = "leaves") -> list[dict]:
    """Average of several :func:`frontier_fidelity` results, per size present in every run
    (``key="depth"``: of several :func:`depth_fidelity` results, per depth)."""
    other = "depth" if key == "leaves" else "leaves"
    common = set.intersection(*({row[key] for row in run} for run in runs)) if runs else set()
    out = []
    for k in sorted(common):
        rows = [next(r for r in run if r[key] == k) for run in runs]
        keys = [name for name in rows[0] if name not in ("leaves", "depth")]
        out.append({key: k, other: max(r[other] for r in rows),
                    **{name: float(np.mean([r[name] for r in rows])) for name in keys}})
    return out


def choose_leaves(frontier: list[dict], cap: int, margin: float, key: str) -> tuple[int | None, dict | None, dict | None]:
    """The smallest size whose confirmation fidelity is within ``margin`` of the best size up to
    ``cap``: (leaves, chosen row, best row); (None, None, None) when the frontier is empty."""
    within = [row for row in frontier if row["leaves"] <= cap]
    if not within:
        return None, None, None
    score = lambda row: row["confirmation"][key]  # noqa: E731
    best = max(within, key=lambda row: (score(row), -row["leaves"]))
    chosen = next(row for row in within if score(row) >= score(best) - margin)
    return chosen["leaves"], chosen, best


# ---------------------------------------------------------------------------- the stage

def distill_tree(forest: ForestFit, X_fit: pd.DataFrame, X_choose: pd.DataFrame, X_test: pd.DataFrame | None, *,
                 leaves: int | None = None, depth: int | None = None, margin: float = TREE_MARGIN,
                 seed: int = 0, min_leaf: int = 5, n_synthetic: int = 0) -> TreeFit:
    """Grow the frontier and the depth curve on ``X_fit`` (discovery rows, plus ``n_synthetic``
    rows sampled around them: :func:`synthetic_rows`) labelled by the forest, and choose the tree.

    * default (``leaves`` and ``depth`` None): the frontier rule with a cap of
      :data:`~pocketforest.defaults.TREE_LEAVES` leaves;
    * ``leaves=N``: the same rule with a cap of N; with ``depth`` too, every tree is at most that deep;
    * ``depth=D`` alone: the tree grown depth-first to depth D, no leaf cap.

    ``X_choose`` (confirmation rows) chooses the size. ``X_test`` (test rows) gives the
    ``held_out`` figures; None when there are no test rows (the caller may fill them in from
    cross-validation with :func:`frontier_fidelity`).
    """
    task = forest.task
    prep = forest.pipeline.named_steps["prep"]
    if n_synthetic > 0:
        X_fit = pd.concat([X_fit, synthetic_rows(X_fit, n_synthetic, seed)], ignore_index=True)
    Xf, Xc = (np.asarray(prep.transform(x), dtype=np.float32) for x in (X_fit, X_choose))
    Xt = np.asarray(prep.transform(X_test), dtype=np.float32) if X_test is not None else None
    yf, yc = forest.predict_design(Xf), forest.predict_design(Xc)
    yt = forest.predict_design(Xt) if Xt is not None else None
    labels = getattr(forest.model, "classes_", None)
    key = measure(task)
    rule_frontier = leaves is not None or depth is None
    cap = int(leaves) if leaves is not None else TREE_LEAVES
    frontier_depth = depth if rule_frontier else None

    # The frontier's best-first tree and the depth-first tree of the depth curve are independent
    # fits with their own seed: grow them in parallel threads (the tree builder releases the GIL).
    jobs = [dict(max_leaf_nodes=max(FRONTIER_LEAVES, cap), max_depth=frontier_depth), dict(max_depth=max(DEPTHS))]
    if not rule_frontier and depth != max(DEPTHS):
        jobs.append(dict(max_depth=depth))
    fitted = thread_map(lambda kw: fit_tree(Xf, yf, task, seed=seed, min_leaf=min_leaf, labels=labels, **kw),
                        jobs, -1)
    grown, deep = fitted[0], fitted[1]

    frontier = [{"leaves": c["leaves"], "depth": c["depth"], "confirmation": _only_fidelity(c),
                 "held_out": None} for c in _frontier(grown, Xc, yc, task)]
    if yt is not None:
        for row, h in zip(frontier, _frontier(grown, Xt, yt, task)):
            row["held_out"] = _only_fidelity(h)
    curve = [{"depth": c["depth"], "leaves": c["leaves"], "confirmation": _only_fidelity(c), "held_out": None}
             for c in _depth_curve(deep, Xc, yc, task)]
    if yt is not None:
        for row, h in zip(curve, _depth_curve(deep, Xt, yt, task)):
            row["held_out"] = _only_fidelity(h)

    if rule_frontier:
        k, chosen_row, best = choose_leaves(frontier, cap, margin, key)
        tree = fit_tree(Xf, yf, task, seed=seed, min_leaf=min_leaf, labels=labels,
                        max_leaf_nodes=max(2, k or 2), max_depth=frontier_depth)
        chosen_by = _frontier_rule(key, cap, margin, depth, chosen_row, best)
    else:
        tree = fitted[-1]
        chosen_by = {"rule": "depth", "max_depth": int(depth), "cap": None, "margin": None, "measure": key,
                     "rows": None, "text": f"set by --tree-depth {depth}: grown depth-first to depth {depth}, "
                                           "no leaf cap"}
    if n_synthetic > 0:
        chosen_by["text"] += f"; fitted on the discovery rows plus {n_synthetic} synthetic rows labelled by the forest"
    pipeline = Pipeline([("prep", prep), ("tree", tree)])
    return TreeFit(pipeline, int(tree.get_depth()), int(tree.get_n_leaves()), chosen_by, frontier, curve,
                   grown, deep, int(n_synthetic), "test" if yt is not None else None)


def _only_fidelity(row: dict) -> dict:
    return {k: v for k, v in row.items() if k not in ("leaves", "depth")}


def depth_fidelity(fit: TreeFit, forest: ForestFit, X: pd.DataFrame) -> list[dict]:
    """Like :func:`frontier_fidelity`, for the depth curve: ``{"depth", "leaves", **fidelity}``
    per depth of :data:`DEPTHS`, in the order of ``fit.fidelity_by_depth``."""
    Xt = np.asarray(forest.pipeline.named_steps["prep"].transform(X), dtype=np.float32)
    return _depth_curve(fit.deep, Xt, forest.predict_design(Xt), forest.task)


def _frontier_rule(key: str, cap: int, margin: float, depth: int | None, chosen: dict | None,
                   best: dict | None) -> dict:
    """The size rule as typed fields plus one sentence."""
    out = {"rule": "frontier", "measure": key, "rows": "confirmation", "cap": int(cap), "margin": float(margin),
           "max_depth": int(depth) if depth is not None else None,
           "best": None if best is None else {"leaves": best["leaves"], "value": best["confirmation"][key]},
           "chosen": None if chosen is None else {"leaves": chosen["leaves"], "value": chosen["confirmation"][key]}}
    name = MEASURE_NAMES[key]
    limit = f"at most {cap} leaves" + (f" and depth {depth}" if depth is not None else "")
    if chosen is None:
        out["text"] = "no split of the discovery rows leaves enough rows on both sides: the tree is one leaf"
        return out
    out["text"] = (f"the smallest tree whose fidelity ({name}) on the confirmation rows is within {margin:g} of "
                   f"the most faithful tree with {limit} ({best['leaves']} leaves, {best['confirmation'][key]:.3f}): "
                   f"{chosen['leaves']} leaves, {chosen['confirmation'][key]:.3f}")
    return out
