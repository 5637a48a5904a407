"""Forest size defaults, kept free of heavy imports so the command line can print them in --help
without loading scikit-learn (`score` and `verify` never need it).

Measured choice (docs/performance.md): a forest's cost everywhere downstream grows with its node
count, not its row count. forest.onnx stores about 40 bytes per node (regression and two classes),
and an onnxruntime session holding it takes about nine times the file size in memory, so the leaf
budget below is what keeps a bundle small and `score` under 400 MB at any row count.
"""
from __future__ import annotations

#: Default number of trees. Under a fixed leaf budget, fewer bigger trees beat many small ones on
#: out-of-bag accuracy (100,000 rows, same total size: 200 x 2,000 leaves r2 0.900, 300 x 1,333
#: leaves 0.895, 500 x 800 leaves 0.886; 100 x 2,000 leaves 0.899), and 150 trees still give
#: permutation importance a standard error over many trees.
TREES = 150
#: Leaves the whole forest may hold by default: 200,000 leaves are about 400,000 nodes, a
#: forest.onnx near 16 MB (target < 50 MB) and an onnxruntime session near 190 MB, which keeps
#: `score` under its 400 MB target (at 300,000 leaves the session alone took 284 MB).
LEAF_BUDGET = 200_000


def leaf_cap(trees: int, n_classes: int | None = None) -> int:
    """Most leaves per tree under :data:`LEAF_BUDGET`.

    Each extra class adds a weight per leaf to the ONNX tree ensemble, so with K > 2 classes the
    budget is shared K - 1 ways.
    """
    share = max(1, (n_classes or 2) - 1)
    return max(2, LEAF_BUDGET // (max(1, trees) * share))

#: The surrogate tree's default leaf cap: a tree a person can draw on a slide. Measured while
#: planning (best-first trees fitted to the forest, held-out fidelity r²): Friedman #1 gives 0.75
#: at 8 leaves, 0.80 at 12 and 0.87 at 32; the demo 0.53, 0.62 and 0.71 (docs/performance.md).
TREE_LEAVES = 12
#: The size rule's margin: the smallest tree whose confirmation-row fidelity is within this much
#: (R², of values or of class probabilities) of the most faithful tree under the cap.
TREE_MARGIN = 0.02
#: The size/fidelity frontier runs from 2 leaves to this many (or to the cap, if larger).
FRONTIER_LEAVES = 64

#: Small-data plan: repeats of the nested cross-validation behind the loss interval (each repeat
#: refits the whole pipeline K (K - 1) / 2 = 10 times at 5 folds). ``bench --small`` measures the
#: interval's coverage with it (docs/performance.md, "Small data").
NESTED_REPEATS = 4
