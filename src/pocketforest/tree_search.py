"""Small trees found by search over binned thresholds, to measure against greedy growth.

Greedy growth (CART, best-first) picks each split for its own gain and never looks further. Two
searches look further, both over at most ``bins`` candidate thresholds per design column:

* :func:`optimal_tree` — the exact optimum (least squared error to the forest's output) among
  trees of depth at most three with at most ``leaves`` leaves (≤ 8). Depth-two subtrees are
  solved exactly from cumulative pair histograms, the specialised depth-two step of MurTree
  (Demirović, E. et al. 2022, "MurTree: optimal decision trees via dynamic programming and
  search", JMLR 23(26):1–47), carried over from misclassification counts to sums of squares;
  depth three is the dynamic programme over the root split on top of it.
* :func:`lookahead_tree` — best-first growth to any leaf budget where each node's split is the
  root of the exact optimal depth-two subtree of its rows (one level of lookahead).

Squared error covers both tasks: regression fits the forest's prediction; classification fits
its class-probability vector, and the summed squared error of probability vectors ranks splits
exactly as the Gini impurity of the soft labels the greedy classification tree is grown on.
Every leaf must hold ``min_leaf`` rows, as for the greedy tree.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .thresholds import snap_down_f32


@dataclass(frozen=True)
class Binned:
    """Design columns coded by candidate threshold: ``code <= b`` exactly when ``x <= edges[j][b]``."""
    codes: np.ndarray          # [n, p] small ints
    edges: list[np.ndarray]    # per column: float32-exact thresholds, ascending
    width: int                 # codes run from 0 to width - 1

    def code(self, X: np.ndarray) -> np.ndarray:
        """Codes of other rows (same columns) against these thresholds, compared as float32."""
        X = np.asarray(X, dtype=np.float32).astype(np.float64)
        return np.stack([np.searchsorted(t, X[:, j], side="left") for j, t in enumerate(self.edges)], axis=1)


def bin_design(X: np.ndarray, bins: int = 16) -> Binned:
    """Candidate thresholds per column: midpoints between neighbouring distinct values at
    ``bins`` quantile positions, snapped down to float32 so that a fitted scikit-learn tree, its
    ONNX graph and the printed code compare the same way (see :mod:`pocketforest.thresholds`)."""
    X = np.asarray(X, dtype=np.float32)
    edges = []
    for j in range(X.shape[1]):
        u = np.unique(X[:, j]).astype(np.float64)
        mids = (u[:-1] + u[1:]) / 2.0
        if len(mids) > bins:
            pick = np.quantile(X[:, j].astype(np.float64), np.arange(1, bins + 1) / (bins + 1))
            at = np.unique(np.clip(np.searchsorted(u, pick, side="right") - 1, 0, len(mids) - 1))
            mids = mids[at]
        t = np.unique(snap_down_f32(mids))
        edges.append(t)
    width = 1 + max((len(t) for t in edges), default=0)
    codes = np.stack([np.searchsorted(t, X[:, j].astype(np.float64), side="left") for j, t in enumerate(edges)],
                     axis=1) if edges else np.zeros((len(X), 0), dtype=np.int64)
    return Binned(codes, edges, width)


# ----------------------------------------------------------------------------- tree structure

@dataclass
class Node:
    """A leaf (``column`` None) or a split ``code <= bin`` (left) / ``> bin`` (right)."""
    rows: np.ndarray
    column: int | None = None
    bin: int | None = None
    left: "Node | None" = None
    right: "Node | None" = None

    def leaves(self) -> int:
        return 1 if self.column is None else self.left.leaves() + self.right.leaves()

    def depth(self) -> int:
        return 0 if self.column is None else 1 + max(self.left.depth(), self.right.depth())


def _sse(Y: np.ndarray) -> float:
    return float(((Y - Y.mean(axis=0)) ** 2).sum()) if len(Y) else 0.0


def tree_sse(node: Node, Y: np.ndarray) -> float:
    if node.column is None:
        return _sse(Y[node.rows])
    return tree_sse(node.left, Y) + tree_sse(node.right, Y)


def predict_codes(node: Node, codes: np.ndarray, Y_fit: np.ndarray) -> np.ndarray:
    """Leaf means (of ``Y_fit`` over each leaf's fitting rows) for rows given by their codes."""
    out = np.empty((len(codes), Y_fit.shape[1]))

    def walk(n: Node, idx: np.ndarray) -> None:
        if n.column is None:
            out[idx] = Y_fit[n.rows].mean(axis=0)
            return
        go_left = codes[idx, n.column] <= n.bin
        walk(n.left, idx[go_left])
        walk(n.right, idx[~go_left])

    walk(node, np.arange(len(codes)))
    return out


# ----------------------------------------------------------------------------- depth two, exactly

@dataclass
class DepthTwo:
    """Least squared error of a tree of depth ≤ 2 with k = 1..4 leaves, and the root split of each."""
    cost: np.ndarray                    # [5]: index k; inf where no such tree meets min_leaf
    root: list[tuple[int, int] | None]  # (column, bin) of the root split per k; None for k = 1
    used: np.ndarray                    # [5]: leaves of the best tree allowed k leaves (a budget allows fewer)


def _stats(N: np.ndarray, S: np.ndarray, Q: np.ndarray) -> np.ndarray:
    """Sum of squares about the mean from count, sums (last axis: outputs) and sum of squares."""
    with np.errstate(invalid="ignore", divide="ignore"):
        out = Q - (S ** 2).sum(axis=-1) / N
    out[N == 0] = 0.0
    return np.maximum(out, 0.0)


def depth_two(codes: np.ndarray, Y: np.ndarray, width: int, min_leaf: int) -> DepthTwo:
    """Exact optimal depth-≤2 trees on these rows from cumulative pair histograms.

    For every pair of columns (f, g) the rows are counted into a width × width grid of their
    codes, with sums and sums of squares of the outputs; cumulative sums then give, for a root
    split ``f <= a`` and a child split ``g <= b``, the four leaves' statistics in constant time.
    """
    n, p = codes.shape
    q = Y.shape[1]
    M = width
    inf = np.inf
    cost = np.full(5, inf)
    root: list = [None] * 5
    used = np.array([0, 1, 1, 1, 1])
    cost[1] = _sse(Y)
    if n < 2 * min_leaf or p == 0:
        cost[2:] = cost[1]
        return DepthTwo(cost, root, used)
    cell = codes[:, :, None] * M + codes[:, None, :] + (np.arange(p * p).reshape(p, p) * M * M)[None]
    flat = cell.ravel()
    size = p * p * M * M
    N = np.bincount(flat, minlength=size).astype(np.float64).reshape(p, p, M, M)
    S = np.stack([np.bincount(flat, weights=np.repeat(Y[:, k], p * p), minlength=size) for k in range(q)],
                 axis=-1).reshape(p, p, M, M, q)
    Q = np.bincount(flat, weights=np.repeat((Y ** 2).sum(axis=1), p * p), minlength=size).reshape(p, p, M, M)
    for arr in (N, S, Q):
        np.cumsum(arr, axis=2, out=arr)
        np.cumsum(arr, axis=3, out=arr)
    tN, tS, tQ = float(n), Y.sum(axis=0), float((Y ** 2).sum())
    # Root split f <= a: left totals from the (f, f) grid; a = M - 1 sends every row left.
    ar = np.arange(p)
    lN, lS, lQ = N[ar, ar, :, M - 1], S[ar, ar, :, M - 1], Q[ar, ar, :, M - 1]        # [p, M]
    rN, rS, rQ = tN - lN, tS - lS, tQ - lQ
    ok_l, ok_r = lN >= min_leaf, rN >= min_leaf
    leafL, leafR = _stats(lN, lS, lQ), _stats(rN, rS, rQ)
    # Quadrants for root (f, a) and child (g, b): arrays [f, g, a, b].
    LL = (N, S, Q)
    LR = (lN[:, None, :, None] - N, lS[:, None, :, None, :] - S, lQ[:, None, :, None] - Q)
    colN, colS, colQ = N[:, :, M - 1:M, :], S[:, :, M - 1:M, :, :], Q[:, :, M - 1:M, :]   # g <= b, all rows
    RL = (colN - N, colS - S, colQ - Q)
    RR = (rN[:, None, :, None] - RL[0], rS[:, None, :, None, :] - RL[1], rQ[:, None, :, None] - RL[2])

    def best_child(A, B):
        c = _stats(*A) + _stats(*B)
        c[(A[0] < min_leaf) | (B[0] < min_leaf)] = inf
        c = c.transpose(0, 2, 1, 3).reshape(p, M, p * M)            # [f, a, (g, b)]
        return c.min(axis=2)

    splitL = best_child(LL, LR)
    splitR = best_child(RL, RR)
    valid = ok_l & ok_r
    options = {2: leafL + leafR, 3: np.minimum(splitL + leafR, leafL + splitR), 4: splitL + splitR}
    for k, c in options.items():
        c = np.where(valid, c, inf)
        i = int(np.argmin(c))
        if np.isfinite(c.flat[i]):
            cost[k] = float(c.flat[i])
            root[k] = (i // M, i % M)
            used[k] = k
    for k in range(2, 5):   # a budget of k leaves allows fewer
        if cost[k - 1] <= cost[k]:
            cost[k], root[k], used[k] = cost[k - 1], root[k - 1], used[k - 1]
    return DepthTwo(cost, root, used)


def _split(rows: np.ndarray, codes: np.ndarray, col: int, b: int) -> tuple[np.ndarray, np.ndarray]:
    go_left = codes[rows, col] <= b
    return rows[go_left], rows[~go_left]


def _one_split(codes: np.ndarray, Y: np.ndarray, rows: np.ndarray, width: int, min_leaf: int) -> Node:
    """These rows split once by the best single split (a leaf when none meets ``min_leaf``)."""
    d2 = depth_two(codes[rows], Y[rows], width, min_leaf)
    if d2.root[2] is None or d2.used[2] < 2:
        return Node(rows)
    left, right = _split(rows, codes, *d2.root[2])
    return Node(rows, *d2.root[2], Node(left), Node(right))


def _grow_depth_two(codes: np.ndarray, Y: np.ndarray, rows: np.ndarray, width: int, min_leaf: int, k: int) -> Node:
    """The optimal depth-≤2 tree with at most k leaves on these rows, as nodes.

    The optimum decomposes: given its root split, each side is a leaf or its own best single
    split, so the children are rebuilt from the root alone.
    """
    d2 = depth_two(codes[rows], Y[rows], width, min_leaf)
    k = int(min(k, 4))
    used = int(d2.used[k])
    if used < 2:
        return Node(rows)
    left, right = _split(rows, codes, *d2.root[k])
    nl, nr = Node(left), Node(right)
    if used >= 3:
        sl, sr = _one_split(codes, Y, left, width, min_leaf), _one_split(codes, Y, right, width, min_leaf)
        if used == 4:
            nl, nr = sl, sr
        elif _sse(Y[left]) - tree_sse(sl, Y) >= _sse(Y[right]) - tree_sse(sr, Y):
            nl = sl
        else:
            nr = sr
    return Node(rows, *d2.root[k], nl, nr)


# ----------------------------------------------------------------------------- depth three, exactly

def optimal_tree(binned: Binned, Y: np.ndarray, leaves: int, min_leaf: int) -> Node:
    """The least-squared-error tree of depth ≤ 3 with at most ``leaves`` (≤ 8) leaves.

    Dynamic programme over the root split: for each candidate root, the best depth-≤2 subtree on
    each side for every leaf budget (:func:`depth_two`), combined over budgets that sum to at
    most ``leaves``. Exact over the binned thresholds.
    """
    if not 1 <= leaves <= 8:
        raise ValueError("optimal_tree searches depth ≤ 3: leaves must be 1 to 8")
    codes, M = binned.codes, binned.width
    Y = np.asarray(Y, dtype=np.float64).reshape(len(codes), -1)
    rows = np.arange(len(codes))
    if leaves <= 4:
        return _grow_depth_two(codes, Y, rows, M, min_leaf, leaves)
    best = (_sse(Y), None)
    for col in range(codes.shape[1]):
        for b in range(len(binned.edges[col])):
            left, right = _split(rows, codes, col, b)
            if len(left) < min_leaf or len(right) < min_leaf:
                continue
            cl = depth_two(codes[left], Y[left], M, min_leaf).cost
            cr = depth_two(codes[right], Y[right], M, min_leaf).cost
            for kl in range(1, 5):
                kr = min(4, leaves - kl)
                if kr < 1:
                    continue
                c = cl[kl] + cr[kr]
                if c < best[0]:
                    best = (c, (col, b, kl, kr))
    if best[1] is None:
        return _grow_depth_two(codes, Y, rows, M, min_leaf, leaves)
    col, b, kl, kr = best[1]
    left, right = _split(rows, codes, col, b)
    return Node(rows, col, b, _grow_depth_two(codes, Y, left, M, min_leaf, kl),
                _grow_depth_two(codes, Y, right, M, min_leaf, kr))


# ----------------------------------------------------------------------------- lookahead, any size

def lookahead_tree(binned: Binned, Y: np.ndarray, leaves: int, min_leaf: int) -> Node:
    """Best-first growth to ``leaves`` leaves; each node splits on the root of the optimal
    depth-≤2 subtree of its rows, and the node whose split gains most is expanded next."""
    codes, M = binned.codes, binned.width
    Y = np.asarray(Y, dtype=np.float64).reshape(len(codes), -1)
    root = Node(np.arange(len(codes)))

    def candidate(node: Node):
        d2 = depth_two(codes[node.rows], Y[node.rows], M, min_leaf)
        split = d2.root[4]
        if split is None or d2.used[4] < 2:
            return None
        left, right = _split(node.rows, codes, *split)
        gain = _sse(Y[node.rows]) - _sse(Y[left]) - _sse(Y[right])
        return gain, split, left, right

    frontier = [(root, candidate(root))]
    n_leaves = 1
    while n_leaves < leaves:
        frontier = [(nd, c) for nd, c in frontier if c is not None]
        if not frontier:
            break
        i = max(range(len(frontier)), key=lambda j: frontier[j][1][0])
        node, (gain, (col, b), left, right) = frontier.pop(i)
        node.column, node.bin = col, b
        node.left, node.right = Node(left), Node(right)
        frontier += [(node.left, candidate(node.left)), (node.right, candidate(node.right))]
        n_leaves += 1
    return root
