"""The forest's trees as ONNX-ML's ``TreeEnsemble`` operator (ai.onnx.ml opset 5).

skl2onnx 1.20 writes a regression forest as ``TreeEnsembleRegressor`` (ai.onnx.ml opset 3). The
opset-5 operator encodes the same trees with interior nodes and leaves in separate arrays and no
per-node tree and node ids. This module moves skl2onnx's node attributes into that layout; it
reads the converter's output, never the scikit-learn trees, so the conversion stays skl2onnx's.

Measured on the benchmark's 150-tree forest (onnxruntime 1.32, 2 shared cores; numbers in
docs/performance.md): the same predictions bit for bit, forest.onnx 5.0 MB instead of 12.8 MB,
an onnxruntime session of 125 MB instead of 177 MB, and one single-threaded call 1.3-1.9x faster.

Classifiers stay on opset 3: a ``TreeEnsemble`` leaf adds to ONE target, so K class
probabilities per leaf would need K copies of every tree.
"""
from __future__ import annotations

import numpy as np
import onnx
from onnx import helper, numpy_helper

ML_DOMAIN = "ai.onnx.ml"


def _attrs(node: onnx.NodeProto) -> dict:
    return {a.name: helper.get_attribute_value(a) for a in node.attribute}


def _convertible(a: dict) -> bool:
    """Only what this mapping reproduces exactly: one target, summed leaves, no transform, no
    base value, "<=" splits, no missing-value routing."""
    modes = set(a.get("nodes_modes", []))
    return (int(a.get("n_targets", 1)) == 1 and a.get("aggregate_function", b"SUM") == b"SUM"
            and a.get("post_transform", b"NONE") == b"NONE" and not any(a.get("base_values", []))
            and modes <= {b"BRANCH_LEQ", b"LEAF"} and not any(a.get("nodes_missing_value_tracks_true", []))
            and "target_weights_as_tensor" not in a and "nodes_values_as_tensor" not in a)


def tree_ensemble_node(node: onnx.NodeProto) -> onnx.NodeProto | None:
    """The opset-5 node computing what a TreeEnsembleRegressor node computes, or None when the
    node uses a feature this mapping does not carry over."""
    a = _attrs(node)
    if node.op_type != "TreeEnsembleRegressor" or not _convertible(a):
        return None
    tree = np.asarray(a["nodes_treeids"], dtype=np.int64)
    nid = np.asarray(a["nodes_nodeids"], dtype=np.int64)
    leaf = np.asarray([m == b"LEAF" for m in a["nodes_modes"]])
    width = int(nid.max()) + 1
    key = tree * width + nid
    order = np.argsort(key, kind="stable")
    sorted_key = key[order]

    def position(t: np.ndarray, n: np.ndarray) -> np.ndarray:
        k = t * width + n
        pos = np.searchsorted(sorted_key, k)
        if np.any(pos >= len(sorted_key)) or np.any(sorted_key[np.minimum(pos, len(sorted_key) - 1)] != k):
            raise ValueError("a tree refers to a node it does not have")
        return order[pos]

    inner_id = np.cumsum(~leaf) - 1          # index among interior nodes, in skl2onnx's order
    leaf_id = np.cumsum(leaf) - 1            # index among leaves
    inner = np.flatnonzero(~leaf)
    feat = np.asarray(a["nodes_featureids"], dtype=np.int64)[inner]
    split = np.asarray(a["nodes_values"], dtype=np.float32)[inner]
    true_pos = position(tree[inner], np.asarray(a["nodes_truenodeids"], dtype=np.int64)[inner])
    false_pos = position(tree[inner], np.asarray(a["nodes_falsenodeids"], dtype=np.int64)[inner])
    true_leaf, false_leaf = leaf[true_pos], leaf[false_pos]
    true_ids = np.where(true_leaf, leaf_id[true_pos], inner_id[true_pos])
    false_ids = np.where(false_leaf, leaf_id[false_pos], inner_id[false_pos])

    weights = np.zeros(int(leaf.sum()), dtype=np.float32)
    wpos = position(np.asarray(a["target_treeids"], dtype=np.int64), np.asarray(a["target_nodeids"], dtype=np.int64))
    if not leaf[wpos].all() or len(np.unique(wpos)) != len(wpos):
        raise ValueError("a weight is not on a leaf, or a leaf has two")
    weights[leaf_id[wpos]] = np.asarray(a["target_weights"], dtype=np.float32)

    trees = np.unique(tree)
    root_pos = position(trees, np.zeros(len(trees), dtype=np.int64))
    roots = inner_id[root_pos].copy()
    # a tree that is one leaf gets an interior node whose two branches both reach that leaf
    lone = np.flatnonzero(leaf[root_pos])
    if len(lone):
        base = len(feat)
        roots[lone] = base + np.arange(len(lone))
        feat = np.concatenate([feat, np.zeros(len(lone), np.int64)])
        split = np.concatenate([split, np.zeros(len(lone), np.float32)])
        ids = leaf_id[root_pos[lone]]
        true_ids, false_ids = np.concatenate([true_ids, ids]), np.concatenate([false_ids, ids])
        true_leaf = np.concatenate([true_leaf, np.ones(len(lone), bool)])
        false_leaf = np.concatenate([false_leaf, np.ones(len(lone), bool)])
    return helper.make_node(
        "TreeEnsemble", list(node.input), list(node.output), name=node.name or "forest", domain=ML_DOMAIN,
        n_targets=1, aggregate_function=1, post_transform=0,
        tree_roots=roots.tolist(), nodes_featureids=feat.tolist(),
        nodes_modes=numpy_helper.from_array(np.zeros(len(feat), np.uint8), "nodes_modes"),  # 0 = BRANCH_LEQ
        nodes_splits=numpy_helper.from_array(split, "nodes_splits"),
        nodes_truenodeids=true_ids.tolist(), nodes_trueleafs=true_leaf.astype(np.int64).tolist(),
        nodes_falsenodeids=false_ids.tolist(), nodes_falseleafs=false_leaf.astype(np.int64).tolist(),
        leaf_targetids=[0] * len(weights), leaf_weights=numpy_helper.from_array(weights, "leaf_weights"))


def upgrade(model: onnx.ModelProto) -> bool:
    """Replace every convertible TreeEnsembleRegressor in ``model`` (in place); True if any was.
    The model then imports ai.onnx.ml opset 5 (its other ONNX-ML operators are unchanged there)."""
    changed = False
    for i, node in enumerate(model.graph.node):
        if node.domain == ML_DOMAIN and node.op_type == "TreeEnsembleRegressor":
            new = tree_ensemble_node(node)
            if new is not None:
                model.graph.node[i].CopyFrom(new)
                changed = True
    if changed:
        for op in model.opset_import:
            if op.domain == ML_DOMAIN:
                op.version = max(op.version, 5)
    return changed
