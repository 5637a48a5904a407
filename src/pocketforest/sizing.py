"""How many coefficients a set of rows supports, and the R² to expect: the equation's size rule.

Instead of a fixed ten rows per coefficient (Peduzzi et al. 1996, a rule of thumb with no firm
basis: van Smeden et al. 2016, BMC Med Res Methodol 16:163), the first criterion of Riley et al.
(2020, BMJ 368:m441; and 2019, Stat Med 38:1262/1276 for continuous and binary outcomes): the rows
must keep the expected uniform shrinkage of the coefficients at S = 0.9 or more, which holds while

    p ≤ n (S − 1) ln(1 − R²/S)        (S = 0.9)

with R² the anticipated Cox–Snell R² of the model (for a continuous outcome, its R²). We take the
anticipated R² from the forest's out-of-bag predictions, an honest figure of what the variables
can explain. Where the suggested terms need more coefficients than that, the fit is penalised
(ridge for Gaussian, Firth for logistic and multinomial) rather than cut; terms are dropped only
when there are too few rows to estimate them at all (:data:`MIN_ROWS_PER_COEFFICIENT`).
(Formula written from memory of Riley et al.; confirm against the paper before relying on digits.)
"""
from __future__ import annotations

import numpy as np

SHRINKAGE = 0.9
#: Fewer rows than this per coefficient and even a penalised fit mostly reproduces the rows it was
#: fitted on (common practice; the residual degrees of freedom would be almost gone).
MIN_ROWS_PER_COEFFICIENT = 3
#: The anticipated R² is kept inside this range: a forest that explains nothing out of bag still
#: leaves room for a few coefficients, and a near-perfect one does not make the budget unbounded.
R2_RANGE = (0.02, 0.85)


def supported_coefficients(n: int, r2: float, shrinkage: float = SHRINKAGE) -> float:
    """Coefficients (besides the intercept) that ``n`` rows carry at expected shrinkage ``shrinkage``."""
    r2 = float(np.clip(r2, *R2_RANGE))
    r2 = min(r2, 0.99 * shrinkage)
    return float(n * (shrinkage - 1.0) * np.log(1.0 - r2 / shrinkage))


def estimable_coefficients(n: int, events: int | None = None) -> int:
    """Most coefficients that can be estimated at all (rarest class's rows for classes)."""
    rows = n if events is None else events
    return max(1, rows // MIN_ROWS_PER_COEFFICIENT)


def anticipated_r2(task: str, y: np.ndarray, oob: np.ndarray, classes: list[str] | None = None) -> float:
    """R² (regression) or Cox–Snell R² (classes) of the forest's out-of-bag predictions.

    Cox–Snell: 1 − exp(−LR/n), LR = 2 (log-likelihood of the out-of-bag probabilities − that of
    the class shares). Rows without an out-of-bag prediction are left out.
    """
    if task == "regression":
        yv = np.asarray(y, dtype=float)
        p = np.asarray(oob, dtype=float)
        ok = np.isfinite(p)
        if ok.sum() < 3:
            return R2_RANGE[0]
        sst = float(np.sum((yv[ok] - yv[ok].mean()) ** 2))
        return float(1.0 - np.sum((yv[ok] - p[ok]) ** 2) / sst) if sst > 0 else R2_RANGE[0]
    codes = np.searchsorted(np.asarray(classes, dtype=object), np.asarray(y, dtype=object))
    proba = np.asarray(oob, dtype=float)
    ok = np.all(np.isfinite(proba), axis=1)
    if ok.sum() < 3:
        return R2_RANGE[0]
    codes, proba = codes[ok], proba[ok]
    n = len(codes)
    p_true = np.clip(proba[np.arange(n), codes], 1e-6, 1.0)
    shares = np.bincount(codes, minlength=proba.shape[1]) / n
    ll_model = float(np.sum(np.log(p_true)))
    ll_null = float(np.sum(np.log(np.clip(shares[codes], 1e-12, 1.0))))
    lr = max(0.0, 2.0 * (ll_model - ll_null))
    return float(1.0 - np.exp(-lr / n))
