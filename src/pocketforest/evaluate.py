"""Judging the models: accuracy of each on the test rows, the surrogates' fidelity to the forest,
and their loss with a bootstrap interval. Metrics and fidelity live together here, computed by
scikit-learn's metrics (the reference library, METHODS.md), for distill and compare alike.

Loss is the forest's metric minus the surrogate's on the same test rows (R² for regression,
accuracy for classification): positive means the simple model gives up accuracy. Its interval is
a paired percentile bootstrap over test rows (Efron & Tibshirani 1993, An Introduction to the
Bootstrap, ch. 13): each resample draws test rows with replacement and scores both models on the
same draw, so the interval reflects the correlation between their errors.

The bootstrap is vectorised: a block of resamples becomes a matrix of row counts, and every
metric that is a sum over rows (R², RMSE, MAE, accuracy, log loss, Brier) is a matrix-vector
product, so 1,000 resamples of 25,000 rows take well under a second.
"""
from __future__ import annotations

import numpy as np
from sklearn.metrics import (accuracy_score, brier_score_loss, cohen_kappa_score, log_loss, mean_absolute_error,
                             mean_squared_error, r2_score, roc_auc_score)

LOG_LOSS_EPS = np.finfo(float).eps   # the clipping scikit-learn's log_loss applies (float64)


def metrics(y: np.ndarray, pred: np.ndarray, task: str, classes: list[str] | None = None, *,
            auc: bool = True) -> dict[str, float]:
    """Regression: r2, rmse, mae. Classification (``pred`` = probabilities): accuracy, log_loss,
    brier (mean over rows of the summed squared error over classes for several classes), auc
    (macro one-vs-rest for several classes)."""
    if task == "regression":
        return {"r2": float(r2_score(y, pred)), "rmse": float(np.sqrt(mean_squared_error(y, pred))),
                "mae": float(mean_absolute_error(y, pred))}
    codes = _codes(y, classes)
    k = len(classes)
    proba = _proba(pred)
    out = {"accuracy": float(accuracy_score(codes, np.argmax(proba, axis=1))),
           "log_loss": float(log_loss(codes, proba, labels=list(range(k))))}
    if k == 2:
        out["brier"] = float(brier_score_loss(codes, proba[:, 1]))
        if auc:
            out["auc"] = float(roc_auc_score(codes, proba[:, 1])) if len(np.unique(codes)) == 2 else float("nan")
    else:
        out["brier"] = float(brier_score_loss(codes, proba, labels=list(range(k))))
        present = len(np.unique(codes)) == k
        if auc:
            out["auc"] = float(roc_auc_score(codes, proba, multi_class="ovr", average="macro",
                                             labels=list(range(k)))) if present else float("nan")
    return out


def fidelity(forest_pred: np.ndarray, tree_pred: np.ndarray, task: str) -> dict[str, float]:
    """How closely a surrogate reproduces the forest on the same rows.

    Regression: R² of the surrogate's predictions against the forest's. Classification:
    ``probability_r2``, the R² of the class probabilities pooled over classes (scikit-learn's
    variance-weighted R²: one minus the summed squared distance to the forest's probabilities
    over the summed variance of those probabilities). It is the Brier distance to the forest
    scaled by that of a constant tree, so a constant tree scores about 0 whatever the class
    balance, and it is on the same scale as the regression R², so one size rule serves both
    tasks. For two classes it equals the R² of the probability of either class. Label
    ``agreement`` and Cohen's ``kappa`` are reported beside it; agreement alone favours a
    constant tree on an imbalanced outcome.
    """
    if task == "regression":
        return {"r2": float(r2_score(forest_pred, tree_pred))}
    a, b = np.argmax(forest_pred, axis=1), np.argmax(tree_pred, axis=1)
    kappa = cohen_kappa_score(a, b) if len(np.unique(np.concatenate([a, b]))) > 1 else 1.0
    prob = r2_score(forest_pred, tree_pred, multioutput="variance_weighted")
    return {"probability_r2": float(prob), "agreement": float(np.mean(a == b)), "kappa": float(kappa)}


def _codes(y: np.ndarray, classes: list[str]) -> np.ndarray:
    return np.searchsorted(np.asarray(classes, dtype=object), np.asarray(y, dtype=object))


def _proba(pred: np.ndarray) -> np.ndarray:
    proba = np.clip(np.asarray(pred, dtype=float), 0.0, 1.0)
    return proba / proba.sum(axis=1, keepdims=True)


def outcome_values(y: np.ndarray, task: str) -> np.ndarray:
    """The outcome as every metric here reads it: floats, or class labels as text."""
    return y.astype(float) if task == "regression" else y.astype(str).astype(object)


def loss_metric(task: str) -> str:
    return "r2" if task == "regression" else "accuracy"


def _row_terms(y: np.ndarray, pred: np.ndarray, task: str, classes: list[str] | None) -> dict[str, np.ndarray]:
    """Per-row pieces whose (weighted) sums give each metric."""
    if task == "regression":
        e = np.asarray(y, float) - np.asarray(pred, float)
        return {"se": e ** 2, "ae": np.abs(e)}
    codes = _codes(y, classes)
    proba = _proba(pred)
    k = len(classes)
    p_true = proba[np.arange(len(codes)), codes]
    if k == 2:  # scikit-learn's binary Brier score: squared error of the positive-class probability
        brier = (proba[:, 1] - (codes == 1)) ** 2
    else:
        brier = np.sum((proba - np.eye(k)[codes]) ** 2, axis=1)
    return {"correct": (np.argmax(proba, axis=1) == codes).astype(float),
            "logloss": -np.log(np.clip(p_true, LOG_LOSS_EPS, 1.0)), "brier": brier}


def _scores(sums: dict[str, np.ndarray], n: int, task: str, who: str) -> dict[str, np.ndarray]:
    """Each metric for every resample, from the weighted row sums of one model (``who``)."""
    if task == "regression":
        sst = sums["yy"] - sums["y"] ** 2 / n
        with np.errstate(divide="ignore", invalid="ignore"):
            r2 = 1.0 - sums[who + "se"] / sst
        return {"r2": r2, "rmse": np.sqrt(sums[who + "se"] / n), "mae": sums[who + "ae"] / n}
    return {"accuracy": sums[who + "correct"] / n, "log_loss": sums[who + "logloss"] / n,
            "brier": sums[who + "brier"] / n}


HIGHER_IS_BETTER = {"r2": True, "accuracy": True, "rmse": False, "mae": False, "log_loss": False, "brier": False}


def paired_bootstrap(y: np.ndarray, forest_pred: np.ndarray, other_pred: np.ndarray, task: str,
                     classes: list[str] | None, *, resamples: int, seed: int, block: int = 100,
                     groups: np.ndarray | None = None) -> tuple[dict, dict, dict[str, np.ndarray]]:
    """Both models' metrics on all rows (from per-row sums) and, per metric, the ``resamples``
    bootstrap values of the forest-minus-other difference (signed as :func:`loss_with_interval`
    reports it). Rows are drawn with replacement, the same rows for both models; ``groups`` as
    there. The one resampling loop behind the loss intervals and the anchor's gap spread."""
    n = len(y)
    parts = {"f" + k: v for k, v in _row_terms(y, forest_pred, task, classes).items()}
    parts.update({"o" + k: v for k, v in _row_terms(y, other_pred, task, classes).items()})
    if task == "regression":
        yv = np.asarray(y, dtype=float)
        parts.update({"y": yv, "yy": yv * yv})
    names = list(parts)
    V = np.column_stack([parts[k] for k in names])          # n x m: every per-row piece

    def metrics_of(W: np.ndarray) -> tuple[dict, dict]:
        S = W @ V                                           # one matrix product per block
        sums = {k: S[:, j] for j, k in enumerate(names)}
        return _scores(sums, n, task, "f"), _scores(sums, n, task, "o")

    f0, o0 = metrics_of(np.ones((1, n)))
    rng = np.random.default_rng(seed)
    diffs: dict[str, list] = {m: [] for m in f0}
    for start in range(0, resamples, block):
        b = min(block, resamples - start)
        m = n if groups is None else int(groups.max()) + 1
        idx = rng.integers(0, m, (b, m))
        idx += (np.arange(b) * m)[:, None]
        W = np.bincount(idx.ravel(), minlength=b * m).reshape(b, m).astype(float)
        if groups is not None:
            W = W[:, groups]
        fs, os_ = metrics_of(W)
        # a resample whose outcomes are all equal has no r2 (inf - inf): NaN, which the
        # percentiles (and spreads) of the callers skip, without a RuntimeWarning on the user's terminal
        with np.errstate(invalid="ignore"):
            for m in f0:
                diffs[m].append(_signed(m, fs[m], os_[m]))
    return f0, o0, {m: np.concatenate(v) for m, v in diffs.items()}


def loss_with_interval(y: np.ndarray, forest_pred: np.ndarray, other_pred: np.ndarray, task: str,
                       classes: list[str] | None, *, resamples: int = 1000, seed: int = 0,
                       level: float = 0.95, block: int = 100, reference_values: bool = True,
                       groups: np.ndarray | None = None) -> dict:
    """Forest metric minus surrogate metric, with a paired percentile bootstrap interval.

    The headline is R² (regression) or accuracy (classification); ``also`` holds the same for the
    other additive metrics, signed so that positive always means the surrogate is worse
    (surrogate minus forest for RMSE, MAE, log loss and Brier). AUC has no interval here: it is
    not a sum over rows. ``reference_values=False`` takes the point values from the same sums as
    the bootstrap (equal to scikit-learn's to rounding) and skips its input checks, for
    simulations that call this thousands of times. ``groups`` (a row's original position when
    the rows are out-of-fold predictions stacked over cross-validation repeats) makes the
    bootstrap draw original rows, each with all its repeats, so repeats do not pass for new rows.
    """
    f0, o0, diffs = paired_bootstrap(y, forest_pred, other_pred, task, classes, resamples=resamples, seed=seed,
                                     block=block, groups=groups)
    alpha = (1.0 - level) / 2.0
    # point estimates from the reference library; the bootstrap sums reproduce them to rounding
    if reference_values:
        ref_f, ref_o = (metrics(y, p, task, classes, auc=False) for p in (forest_pred, other_pred))
    else:
        ref_f, ref_o = ({m: float(v[0]) for m, v in d.items()} for d in (f0, o0))
    out_all = {}
    for m in f0:
        d = diffs[m]
        lo, hi = np.nanquantile(d, [alpha, 1.0 - alpha])
        out_all[m] = {"value": float(_signed(m, ref_f[m], ref_o[m])), "ci_low": float(lo), "ci_high": float(hi)}
    name = loss_metric(task)
    head = out_all.pop(name)
    return {"metric": name, **head, "resamples": resamples, "level": level, "method": "paired percentile bootstrap",
            "also": out_all}


def _signed(metric: str, forest, other):
    return forest - other if HIGHER_IS_BETTER[metric] else other - forest


#: What a loss interval is about. On test rows: the bundle's own models. Under cross-validation the
#: headline is about the expected loss of the modelling procedure at this many rows, which is what
#: cross-validation estimates (Bates, Hastie & Tibshirani 2024, J Am Stat Assoc); the loss of the
#: bundle's own models is judged on the confirmation rows beside it (:mod:`pocketforest.own_loss`,
#: the entry's ``bundle_models``). Coverage of both: ``bench --small``, docs/performance.md.
ESTIMAND_TEST = "loss of the bundle's models"
ESTIMAND_CV = "expected loss of the modelling procedure at this many rows"


NESTED_METHOD = "nested cross-validation (Bates, Hastie & Tibshirani 2024)"


def _row_loss(y: np.ndarray, forest_pred: np.ndarray, other_pred: np.ndarray, task: str,
              classes: list[str] | None, scale: float) -> np.ndarray:
    """Each row's share of the headline loss: its mean over rows is forest metric − surrogate
    metric (accuracy), or the R² difference when ``scale`` is the outcome's variance."""
    f, o = _row_terms(y, forest_pred, task, classes), _row_terms(y, other_pred, task, classes)
    if task == "regression":
        return (o["se"] - f["se"]) / scale
    return f["correct"] - o["correct"]


def nested_cv_interval(y: np.ndarray, forest_pairs: np.ndarray, other_pairs: np.ndarray, folds: np.ndarray,
                       cv_forest: np.ndarray, cv_other: np.ndarray, task: str, classes: list[str] | None, *,
                       level: float = 0.95, seed: int = 0) -> dict | None:
    """Interval for the loss of the models fitted on all rows, by nested cross-validation.

    Why: the paired bootstrap over out-of-fold rows holds the fold refits fixed, so it misses the
    correlation between folds that share training rows and is too narrow (Bates, Hastie &
    Tibshirani 2024, J Am Stat Assoc 119:1434-1445). Their remedy, written here from the paper
    with two choices of the authors' R package (nestedcv): the holdout model leaves out one more
    fold, so every fit serves two folds, and the ceiling below. For every repeat r and outer fold
    k, compare the inner cross-validation estimate ē_in on the rows outside fold k (each inner fold
    predicted by the pipeline fitted without it and without k) with a holdout estimate ē_out on
    fold k (the pipeline fitted without k and one other fold, drawn at random). E[(ē_in − ē_out)²] is the inner estimate's mean
    squared error for its own models' loss plus var(ē_out), and the second part is estimated by
    each fold's row variance over its size: their difference estimates the first. Scaled from
    (K − 1) / K of the rows to all of them (mean squared error ∝ 1 / rows), it is held between the
    naive standard error (rows as independent) and √K times it (K folds perfectly correlated).

    The interval is centred on the ordinary cross-validation estimate. The paper also corrects the
    centre for training on fewer rows, from the gap between the inner loops' estimate (at (K − 2) / K
    of the rows, recorded as ``inner_estimate``) and the ordinary one; measured at 150 rows
    (``bench --small``, docs/performance.md) that correction added more noise than it removed
    bias and lowered coverage in both tasks, so it is not applied.

    ``forest_pairs`` / ``other_pairs``: [repeats, K, n, ...] from :func:`resample.pair_predictions`;
    ``cv_forest`` / ``cv_other``: the ordinary cross-validation's out-of-fold predictions stacked
    over its repeats (rows in the order of ``np.tile(y, repeats)``).
    """
    from scipy.stats import norm
    y = np.asarray(y)
    repeats, n = folds.shape
    k_folds = forest_pairs.shape[1]
    scale = float(np.var(np.asarray(y, dtype=float))) if task == "regression" else 1.0
    if scale <= 0.0:
        return None
    rng = np.random.default_rng([seed, 9])
    a_terms, b_terms, inner_sum, inner_rows = [], [], 0.0, 0
    for r in range(repeats):
        for k in range(k_folds):
            inside, held = np.flatnonzero(folds[r] != k), np.flatnonzero(folds[r] == k)
            e_in = _row_loss(y[inside], forest_pairs[r, k, inside], other_pairs[r, k, inside], task, classes, scale)
            j = int(rng.choice([i for i in range(k_folds) if i != k]))
            e_out = _row_loss(y[held], forest_pairs[r, j, held], other_pairs[r, j, held], task, classes, scale)
            a_terms.append((e_in.mean() - e_out.mean()) ** 2)
            b_terms.append(e_out.var(ddof=1) / len(held))
            inner_sum += float(e_in.sum())
            inner_rows += len(e_in)
    mse_inner = float(np.mean(a_terms) - np.mean(b_terms))
    d_cv = _row_loss(np.tile(y, len(cv_forest) // n), cv_forest, cv_other, task, classes, scale)
    err_cv, err_ncv = float(d_cv.mean()), inner_sum / inner_rows
    naive = float(d_cv.std(ddof=1) / np.sqrt(n))
    raw = float(np.sqrt(max(mse_inner, 0.0) * (k_folds - 1) / k_folds))
    se = min(max(raw, naive), np.sqrt(k_folds) * naive)
    centre = err_cv
    if not all(np.isfinite(v) for v in (se, centre)):
        return None   # e.g. an outcome without variance: the caller keeps the bootstrap interval
    z = float(norm.ppf(0.5 + level / 2.0))
    return {"ci_low": centre - z * se, "ci_high": centre + z * se, "method": NESTED_METHOD,
            "nested": {"repeats": int(repeats), "folds": int(k_folds), "fits": int(repeats * k_folds * (k_folds - 1) // 2),
                       "inner_estimate": err_ncv, "standard_error": se, "naive_standard_error": naive,
                       "unclipped_standard_error": raw,
                       "held_at": "naive" if raw < naive else "sqrt(K) x naive" if raw > np.sqrt(k_folds) * naive else None}}
