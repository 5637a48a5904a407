"""Accuracy of each model on the test rows, and the surrogates' loss with a bootstrap interval.

Loss is the forest's metric minus the surrogate's on the same test rows (R² for regression,
accuracy for classification): positive means the simple model gives up accuracy. Its interval is
a paired percentile bootstrap over test rows (Efron & Tibshirani 1993, ch. 13).
"""
from __future__ import annotations

import numpy as np
from sklearn.metrics import (accuracy_score, brier_score_loss, log_loss, mean_absolute_error,
                             mean_squared_error, r2_score, roc_auc_score)


def metrics(y: np.ndarray, pred: np.ndarray, task: str, classes: list[str] | None = None) -> dict[str, float]:
    """Regression: r2, rmse, mae. Classification (``pred`` = probabilities): accuracy, log_loss,
    brier (mean over classes of the one-vs-rest Brier score for several classes), auc."""
    if task == "regression":
        return {"r2": float(r2_score(y, pred)), "rmse": float(np.sqrt(mean_squared_error(y, pred))),
                "mae": float(mean_absolute_error(y, pred))}
    codes = np.searchsorted(np.asarray(classes, dtype=object), np.asarray(y, dtype=object))
    k = len(classes)
    proba = np.clip(np.asarray(pred, dtype=float), 0.0, 1.0)
    proba = proba / proba.sum(axis=1, keepdims=True)
    out = {"accuracy": float(accuracy_score(codes, np.argmax(proba, axis=1))),
           "log_loss": float(log_loss(codes, proba, labels=list(range(k))))}
    if k == 2:
        out["brier"] = float(brier_score_loss(codes, proba[:, 1]))
        out["auc"] = float(roc_auc_score(codes, proba[:, 1])) if len(np.unique(codes)) == 2 else float("nan")
    else:
        onehot = np.eye(k)[codes]
        out["brier"] = float(np.mean(np.sum((proba - onehot) ** 2, axis=1)))
        present = len(np.unique(codes)) == k
        out["auc"] = float(roc_auc_score(codes, proba, multi_class="ovr", average="macro",
                                         labels=list(range(k)))) if present else float("nan")
    return out


def loss_metric(task: str) -> str:
    return "r2" if task == "regression" else "accuracy"


def loss_with_interval(y: np.ndarray, forest_pred: np.ndarray, other_pred: np.ndarray, task: str,
                       classes: list[str] | None, *, resamples: int = 1000, seed: int = 0,
                       level: float = 0.95) -> dict[str, float]:
    """Forest metric minus surrogate metric, with a paired percentile bootstrap interval."""
    name = loss_metric(task)

    def score(idx: np.ndarray, pred: np.ndarray) -> float:
        if task == "regression":
            return float(r2_score(y[idx], pred[idx]))
        codes = np.searchsorted(np.asarray(classes, dtype=object), np.asarray(y[idx], dtype=object))
        return float(np.mean(np.argmax(pred[idx], axis=1) == codes))

    all_rows = np.arange(len(y))
    value = score(all_rows, forest_pred) - score(all_rows, other_pred)
    rng = np.random.default_rng(seed)
    diffs = np.empty(resamples)
    for b in range(resamples):
        idx = rng.integers(0, len(y), len(y))
        diffs[b] = score(idx, forest_pred) - score(idx, other_pred)
    alpha = (1.0 - level) / 2.0
    lo, hi = np.quantile(diffs, [alpha, 1.0 - alpha])
    return {"metric": name, "value": float(value), "ci_low": float(lo), "ci_high": float(hi),
            "resamples": resamples, "level": level}
