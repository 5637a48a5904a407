"""The shallow surrogate tree, distilled from the forest (Craven & Shavlik 1996; Buciluă et al. 2006).

Regression: a tree fitted to the forest's predictions. Classification: a classification tree
fitted to the forest's class probabilities as soft labels (each row enters once per class,
weighted by the forest's probability), so its leaves carry averaged forest probabilities and it
converts to ONNX with the same label/probability outputs as the forest.

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

from .evaluate import fidelity
from .forest import ForestFit
from .threads import thread_map
from .thresholds import snap_tree_thresholds

DEPTHS = range(1, 9)


@dataclass
class TreeFit:
    pipeline: Pipeline
    depth: int
    leaves: int
    fidelity_by_depth: list[dict]
    chosen_by: str
    synthetic_rows: int = 0

    @property
    def model(self):
        return self.pipeline.named_steps["tree"]


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

    @property
    def model(self):
        return self.pipeline.named_steps["tree"]


def _fit_tree(Xt: np.ndarray, target: np.ndarray, task: str, depth: int, seed: int, min_leaf: int,
              labels: np.ndarray | None = None):
    if task == "regression":
        tree = DecisionTreeRegressor(max_depth=depth, min_samples_leaf=min_leaf, random_state=seed)
        tree.fit(Xt, target)
    else:
        n, k = target.shape
        X_rep = np.repeat(Xt, k, axis=0)
        y_rep = np.tile(labels, n)
        w = target.reshape(-1)
        keep = w > 0
        tree = DecisionTreeClassifier(max_depth=depth, min_samples_leaf=min_leaf, random_state=seed)
        tree.fit(X_rep[keep], y_rep[keep], sample_weight=w[keep])
        if len(tree.classes_) < k:  # a class the forest never predicts: keep the output width
            tree.fit(np.vstack([X_rep[keep], Xt[:1].repeat(k, 0)]),
                     np.concatenate([y_rep[keep], labels]),
                     sample_weight=np.concatenate([w[keep], np.full(k, 1e-12)]))
    snap_tree_thresholds(tree)
    return tree


def _forest_output(forest: ForestFit, Xt: np.ndarray) -> np.ndarray:
    return forest.predict_design(Xt)


def distill_tree(forest: ForestFit, X_fit: pd.DataFrame, X_choose: pd.DataFrame, X_test: pd.DataFrame, *,
                 depth: int | None = None, target_fidelity: float = 0.9, seed: int = 0,
                 min_leaf: int = 5, n_synthetic: int = 0) -> TreeFit:
    """Fit depths 1–8 on ``X_fit`` (discovery rows, plus ``n_synthetic`` rows sampled around
    them: :func:`synthetic_rows`) labelled by the forest.

    The default depth is the smallest whose fidelity on ``X_choose`` (confirmation rows: the
    forest labels them, no outcome is used) reaches ``target_fidelity``; the curve reported is
    on the test rows.
    """
    prep = forest.pipeline.named_steps["prep"]
    if n_synthetic > 0:
        X_fit = pd.concat([X_fit, synthetic_rows(X_fit, n_synthetic, seed)], ignore_index=True)
    Xf, Xc, Xt = (np.asarray(prep.transform(x), dtype=np.float32) for x in (X_fit, X_choose, X_test))
    yf, yc, yt = (_forest_output(forest, x) for x in (Xf, Xc, Xt))
    key = "r2" if forest.task == "regression" else "agreement"
    trees, curve, choose = {}, [], {}
    labels = getattr(forest.model, "classes_", None)
    # The depths are independent fits with their own seed: grow them in parallel threads
    # (scikit-learn's tree builder releases the GIL); results do not depend on the order.
    fitted = thread_map(_fit_tree, [(Xf, yf, forest.task, d, seed, min_leaf, labels) for d in DEPTHS], -1)
    for d, tree in zip(DEPTHS, fitted):
        trees[d] = tree
        pc = tree.predict(Xc) if forest.task == "regression" else tree.predict_proba(Xc)
        pt = tree.predict(Xt) if forest.task == "regression" else tree.predict_proba(Xt)
        choose[d] = fidelity(yc, pc, forest.task)[key]
        curve.append({"depth": d, **fidelity(yt, pt, forest.task), "confirmation_" + key: choose[d]})
    if depth is None:
        ok = [d for d in DEPTHS if choose[d] >= target_fidelity]
        chosen = ok[0] if ok else max(DEPTHS)
        how = f"smallest depth with confirmation-row fidelity {key} >= {target_fidelity}"
        if not ok:
            how = f"no depth up to {max(DEPTHS)} reached {key} >= {target_fidelity}; deepest kept"
    else:
        chosen = depth
        how = "set by --tree-depth"
        if depth not in trees:
            trees[depth] = _fit_tree(Xf, yf, forest.task, depth, seed, min_leaf, getattr(forest.model, "classes_", None))
    tree = trees[chosen]
    pipeline = Pipeline([("prep", prep), ("tree", tree)])
    if n_synthetic > 0:
        how += f"; fitted on the discovery rows plus {n_synthetic} synthetic rows labelled by the forest"
    return TreeFit(pipeline, int(tree.get_depth()), int(tree.get_n_leaves()), curve, how, int(n_synthetic))
