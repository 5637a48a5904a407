"""The surrogate tree as plain data, read once from scikit-learn, printed by every tree export.

A split on a numeric column is ``x <= t`` (t a float32 value; see :mod:`pocketforest.thresholds`);
a split on a category indicator is "column equals level" (indicator > 0.5 goes right).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..design import DesignColumn


@dataclass(frozen=True)
class TreeNode:
    id: int
    samples: int                      # discovery rows reaching the node
    value: list[float]                # regression: [prediction]; classification: class probabilities
    feature: str | None = None        # None at a leaf
    level: str | None = None          # categorical split: rows equal to level go RIGHT
    threshold: float | None = None    # numeric split: x <= threshold goes LEFT
    fill: float | None = None         # numeric: value a missing x takes
    left: int | None = None
    right: int | None = None

    @property
    def is_leaf(self) -> bool:
        return self.feature is None


def tree_nodes(tree, columns: list[DesignColumn], fills: dict, task: str, counts: np.ndarray) -> list[TreeNode]:
    """Nodes in scikit-learn's order (0 is the root); ``counts`` = discovery rows per node."""
    t = tree.tree_
    out = []
    for i in range(t.node_count):
        raw = np.asarray(t.value[i]).reshape(-1) if task == "regression" else np.asarray(t.value[i][0])
        if task == "classification":
            raw = raw / raw.sum() if raw.sum() > 0 else raw
        samples = int(counts[i])
        value = [float(v) for v in raw]
        if t.children_left[i] == -1:
            out.append(TreeNode(i, samples, value))
            continue
        col = columns[t.feature[i]]
        if col.level is None:
            out.append(TreeNode(i, samples, value, feature=col.feature, threshold=float(np.float32(t.threshold[i])),
                                fill=float(fills[col.feature]), left=int(t.children_left[i]),
                                right=int(t.children_right[i])))
        else:
            out.append(TreeNode(i, samples, value, feature=col.feature, level=col.level,
                                left=int(t.children_left[i]), right=int(t.children_right[i])))
    return out
