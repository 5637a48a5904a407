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

No equation at all (:func:`equation_support`): when the estimation (confirmation) rows cannot give
even the smallest model with one slope :data:`MIN_ROWS_PER_COEFFICIENT` rows per parameter, no
equation is fitted and the bundle carries the forest and the tree only. The smallest such model
has 2 parameters for a numeric outcome (intercept and slope) and 2 (K - 1) for K classes (K - 1
intercepts and K - 1 slopes of the multinomial logit; 2 for two classes). For classes the rows
counted are the rarest class's confirmation rows, as in events per parameter (Peduzzi et al. 1996
count the rarer outcome; Riley et al. 2020 state their criteria in events too; de Jong et al. 2019,
Stat Med 38:1601, count every parameter of a multinomial model — the last from memory). The
threshold of 3 per parameter is far below any sample-size recommendation on purpose: it only
marks the point where an estimate would be little more than the rows themselves (common
practice); above it the shrinkage criterion and the penalised fits take over. The rows that would
be needed are the smallest table, with the counted rows' share unchanged, whose confirmation part
under the plan that size would get (:func:`pocketforest.resample.choose_plan`) expects that many
of them; a stratified split rounds, hence "about".
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

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


def one_slope_parameters(n_classes: int | None) -> int:
    """Parameters of the smallest model with one slope: intercept and slope per equation, one
    equation for a number, K - 1 for K classes."""
    return 2 if not n_classes else 2 * (n_classes - 1)


@dataclass(frozen=True)
class NoEquation:
    """The decision that the estimation rows cannot support an honest equation (typed, so every
    reader decides on these fields, never on the wording of :attr:`reason`)."""
    counted: str          # "rows" | "rows of the rarest class"
    rarest: str | None    # that class (classes only)
    have: int             # confirmation rows counted now
    need: int             # the least the rule accepts
    parameters: int       # of the smallest one-slope model
    rows: int             # table rows now
    rows_needed: int      # table rows that would give ``need``, at the split shares then in force

    @property
    def reason(self) -> str:
        what = "confirmation rows" if self.rarest is None else f"confirmation rows of the rarest class {self.rarest!r}"
        return (f"the {self.have} {what} are too few to estimate even one slope honestly: the smallest model "
                f"with one slope has {self.parameters} parameters and needs {MIN_ROWS_PER_COEFFICIENT} rows per "
                f"parameter, {self.need} rows; about {self.rows_needed} rows in the table (now {self.rows}) "
                "would be needed")

    @property
    def warning(self) -> str:
        """The line the user sees at once (terminal, report notes)."""
        return f"No equation: {self.reason}. The forest and the tree are still delivered."

    def to_dict(self) -> dict:
        """The manifest's ``equation`` when there is none."""
        return {"absent": True, "reason": self.reason, "rows_needed": self.rows_needed,
                "rule": {"counted": self.counted, "class": self.rarest, "have": self.have, "need": self.need,
                         "parameters": self.parameters, "rows_per_parameter": MIN_ROWS_PER_COEFFICIENT,
                         "rows": self.rows}}


def equation_support(have: int, *, n_classes: int | None, rows: int, share: float,
                     confirmation_share: Callable[[int], float], rarest: str | None = None) -> NoEquation | None:
    """None when ``have`` confirmation rows (the rarest class's, for classes) can estimate a
    one-slope model at :data:`MIN_ROWS_PER_COEFFICIENT` rows per parameter, else the decision.

    ``share``: the counted rows' share of the table (1 for a number, the rarest class's share for
    classes); ``confirmation_share(n)``: the confirmation share a table of ``n`` rows would get
    (it changes with the plan), for the table size that would be needed."""
    parameters = one_slope_parameters(n_classes)
    need = MIN_ROWS_PER_COEFFICIENT * parameters
    if have >= need:
        return None
    n = rows + 1   # more than now, even where the split's rounding alone left ``have`` short
    slack = 1e-9   # the product of two shares rounds in its last bits; a count is whole
    while n * share * confirmation_share(n) < need - slack:   # the shares in force at n rows; few steps
        n = max(n + 1, int(np.ceil(need / (share * confirmation_share(n)) - slack)))
    return NoEquation("rows" if rarest is None else "rows of the rarest class", rarest, int(have), need,
                      parameters, int(rows), int(n))
