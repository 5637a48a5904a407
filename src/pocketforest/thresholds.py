"""Split thresholds that compare the same way in float32 and in float64.

scikit-learn compares float32(x) <= t with a float64 threshold t; ONNX stores t as float32, and
SQL, Python and JavaScript compare doubles. Snapping t down to the largest float32 not above it
keeps every scikit-learn prediction (for a float32 x, x <= t exactly when x <= snapped t) and makes
the ONNX threshold exact. For code that sees a double x, :func:`double_split` gives the comparison
that agrees with float32 rounding on every representable input.
"""
from __future__ import annotations

import numpy as np


def snap_down_f32(t: np.ndarray) -> np.ndarray:
    """Largest float32 value not above each t (as float64)."""
    t = np.asarray(t, dtype=np.float64)
    f = t.astype(np.float32)
    too_big = f.astype(np.float64) > t
    f[too_big] = np.nextafter(f[too_big], np.float32(-np.inf))
    return f.astype(np.float64)


def snap_tree_thresholds(estimator) -> None:
    """Rewrite a fitted scikit-learn tree's thresholds in place (predictions unchanged)."""
    tree = estimator.tree_
    internal = tree.children_left != -1
    thr = tree.threshold
    thr[internal] = snap_down_f32(thr[internal])


def double_split(t32: float) -> tuple[str, float]:
    """(operator, bound) such that ``x op bound`` on a double x equals float32(x) <= t32.

    float32(x) <= t32 holds for every x below the midpoint m between t32 and the next float32;
    at m itself round-to-nearest-even decides, so the operator is "<=" when t32 is the even one.
    """
    t = np.float32(t32)
    if np.isinf(t):
        return ("<=", float(t))
    nxt = np.nextafter(t, np.float32(np.inf))
    m = (float(t) + float(nxt)) / 2.0  # exact in double
    even = (int(np.array(t, dtype=np.float32).view(np.uint32)) & 1) == 0
    return ("<=" if even else "<", m)
