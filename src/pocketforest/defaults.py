"""Forest size defaults, kept free of heavy imports so the command line can print them in --help
without loading scikit-learn (`score` and `verify` never need it).

Measured choice, see docs/performance.md.
"""
from __future__ import annotations

#: Default number of trees. Under a fixed leaf budget, fewer bigger trees beat many small ones on
#: out-of-bag accuracy (100,000 rows, 32 MB each: 200 x 2,000 leaves r2 0.900, 300 x 1,333 leaves
#: 0.895, 500 x 800 leaves 0.886), and 200 trees still give permutation importance a stable
#: standard error.
TREES = 200
#: Leaves the whole forest may hold by default. forest.onnx stores about 40 bytes per node
#: (regression and two classes; measured) and a tree has 2 x leaves - 1 nodes, so 500,000 leaves
#: keep the file near 40 MB, under the 50 MB a bundle should stay below, however many rows the
#: data have.
LEAF_BUDGET = 500_000


def leaf_cap(trees: int, n_classes: int | None = None) -> int:
    """Most leaves per tree under :data:`LEAF_BUDGET`.

    Each extra class adds a weight per leaf to the ONNX tree ensemble, so with K > 2 classes the
    budget is shared K - 1 ways.
    """
    share = max(1, (n_classes or 2) - 1)
    return max(2, LEAF_BUDGET // (max(1, trees) * share))
