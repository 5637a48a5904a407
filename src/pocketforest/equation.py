"""The confirmatory GLM: terms chosen on discovery rows, estimated and tested on confirmation rows.

Because the rows that estimate and test were never used to choose the terms, the p-values and
intervals keep their nominal meaning (Cox 1975, Biometrika 62:441-444); p-values computed on the
rows that chose the terms are too small (Berk, Brown, Buja, Zhang & Zhao 2013, Ann Stat
41:802-837; :mod:`pocketforest.simulate` measures both). Families follow McCullagh & Nelder
(1989): Gaussian/identity, binomial/logit, multinomial logit, Poisson/log for counts.

The equation's size follows what the rows support (:mod:`pocketforest.sizing`, after Riley et
al. 2020): where the suggested terms need more coefficients than the confirmation rows carry at an
expected shrinkage of 0.9, logistic and multinomial fits are penalised (Firth 1993) instead of
cut; terms are dropped only when the rows cannot estimate them at all. Separated classes are
fitted by Firth's penalised likelihood (:mod:`pocketforest.separation`) too.

The coefficients *exported for scoring* are the same terms re-estimated on the discovery and
confirmation rows together (:func:`refit_for_scoring`): more rows, better predictions, while the
inferential table stays that of the confirmation rows alone. Where those rows do not support the
terms either, the Gaussian refit is a ridge regression with its penalty chosen by generalised
cross-validation, and the logistic refit is Firth's.
"""
from __future__ import annotations

import dataclasses
import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import statsmodels.api as sm
import statsmodels.formula.api as smf
from scipy import stats

from .errors import InputError
from .expr import evaluate
from .separation import firth_fit, is_separated, restricted_penalised_llf
from .sizing import estimable_coefficients, supported_coefficients
from .terms import Column, Term, design_columns, formula, resolve_levels, term_columns

FAMILIES = ("gaussian", "binomial", "multinomial", "poisson", "negative_binomial")
LINKS = {"gaussian": "identity", "binomial": "logit", "multinomial": "logit", "poisson": "log",
         "negative_binomial": "log"}
#: A whole-number outcome with at least this share of zeros is fitted as counts by default
#: (Cameron & Trivedi 2013, Regression Analysis of Count Data, ch. 3: a Gaussian model for such
#: outcomes predicts negative values and misstates the variance; the cut itself is common practice).
COUNT_ZERO_SHARE = 0.10
#: Pearson chi-square / residual df above which a Poisson fit's variance is too small and a
#: negative binomial is suggested (common practice: 1 means no overdispersion).
OVERDISPERSION = 2.0
#: Skewness from which a whole-number outcome with few zeros (kept Gaussian by default) gets a note
#: suggesting a count family: 1 is the usual line for "highly skewed" (common practice). On R
#: COUNT's medpar (length of stay, skewness 3.7, no zeros) the Poisson equation's test R² was
#: 0.124 and 0.063 against the Gaussian's 0.109 and 0.055 (seeds 1 and 2; seed 0 equal).
SKEWED_COUNT = 1.0
LP_MAX_ROWS = 20_000        # separation checked up front below this many rows x (K - 1)


@dataclass
class EquationFit:
    task: str
    family: str
    link: str
    target: str
    terms: list[Term]
    columns: list[Column]
    classes: list[str] | None
    coef: np.ndarray            # [1 + p] or [1 + p, K - 1]; intercept first
    table: list[dict]           # coefficient rows for the manifest
    formula: str
    fit_on: str
    n: int
    block_test: dict | None = None
    notes: list[str] = field(default_factory=list)      # statements for the reader of the equation
    warnings: list[str] = field(default_factory=list)   # the subset the user must see at once
    method: str = "maximum likelihood"
    dropped_terms: list[Term] = field(default_factory=list)
    summary_text: str = ""
    #: The confirmation-row fit whose table, p-values and block test are for the paper, when these
    #: coefficients were re-estimated on more rows for scoring (None: this fit is both).
    inference: "EquationFit | None" = None
    #: How the coefficients were estimated when penalised: {"method", "penalty", ...}.
    tuning: dict = field(default_factory=dict)

    @property
    def note(self) -> str:
        """The notes as one paragraph (the manifest's ``equation.note``)."""
        return " ".join(self.notes)

    @property
    def source_line(self) -> str:
        """Which rows estimated these coefficients, for every export's header."""
        line = f"coefficients estimated on the {self.fit_on} rows (n = {self.n}, {self.method})"
        if self.inference is not None:
            line += f"; p-values and intervals for a paper: the {self.inference.fit_on}-row fit in the report"
        return line

    def design(self, data: pd.DataFrame) -> np.ndarray:
        cols = [np.ones(len(data))] + [evaluate(c.node, data) for c in self.columns]
        return np.column_stack(cols)

    def linear_predictor(self, data: pd.DataFrame) -> np.ndarray:
        return self.design(data) @ self.coef

    def predict(self, data: pd.DataFrame) -> np.ndarray:
        """Regression: values. Classification: probabilities [n, K] in ``classes`` order."""
        return self.predict_design(self.design(data))

    def predict_design(self, X: np.ndarray, coef: np.ndarray | None = None) -> np.ndarray:
        """:meth:`predict` from a design matrix, with these coefficients or ``coef`` (refits).

        An exponent past a double's range is the right limit here (a mean of infinity, which
        every form reports as no prediction; a probability of 0), so numpy's overflow warning
        is silenced rather than shown to the user.
        """
        eta = X @ (self.coef if coef is None else coef)
        if self.task == "regression":
            if self.link == "identity":
                return eta
            with np.errstate(over="ignore"):
                return np.exp(eta)
        if len(self.classes) == 2:
            with np.errstate(over="ignore"):
                p1 = 1.0 / (1.0 + np.exp(-eta))
            return np.column_stack([1.0 - p1, p1])
        full = np.column_stack([np.zeros(len(X)), eta])
        full -= full.max(axis=1, keepdims=True)
        e = np.exp(full)
        return e / e.sum(axis=1, keepdims=True)


def _impute(data: pd.DataFrame, fills: dict, kinds: dict) -> pd.DataFrame:
    out = data.copy()
    for name, kind in kinds.items():
        if kind == "numeric":
            out[name] = pd.to_numeric(out[name], errors="coerce").fillna(fills[name]).astype(float)
        else:
            out[name] = out[name].fillna("").astype(str)
    return out


def check_family(family: str | None, task: str, classes: list[str] | None, y: np.ndarray, target: str) -> str:
    """The family to fit, or one-line InputError when it does not suit the outcome."""
    if family is None:
        return default_family(task, classes, y)
    if family not in FAMILIES:
        raise InputError(f"--family {family!r} is unknown: choose one of {', '.join(FAMILIES)}")
    if task == "classification":
        if family in ("gaussian", "poisson", "negative_binomial"):
            raise InputError(f"--family {family} needs a numeric outcome, but {target!r} is treated as classes: "
                             "use --family binomial/multinomial or --task regression")
        if family == "binomial" and len(classes) != 2:
            raise InputError(f"--family binomial needs two classes, but {target!r} has {len(classes)}: "
                             "use --family multinomial")
        return family
    if family in ("binomial", "multinomial"):
        raise InputError(f"--family {family} needs classes, but {target!r} is treated as a number: "
                         "pass --task classification")
    if family in ("poisson", "negative_binomial"):
        v = np.asarray(y, dtype=float)
        bad = _not_counts(v)
        if bad.any():
            raise InputError(f"--family {family} needs counts, but {target!r} has the value "
                             f"{float(v[np.argmax(bad)])!r}: give a non-negative whole-number outcome or drop --family {family}")
    return family


def _not_counts(v: np.ndarray) -> np.ndarray:
    """Which values cannot be counts: not finite, negative or not whole."""
    with np.errstate(invalid="ignore"):
        return ~np.isfinite(v) | (v < 0) | (v != np.round(v))


def is_count(y: np.ndarray) -> bool:
    """A non-negative whole-number outcome with many zeros (see :data:`COUNT_ZERO_SHARE`)."""
    v = np.asarray(y, dtype=float)
    if len(v) == 0 or _not_counts(v).any():
        return False
    return bool(np.mean(v == 0) >= COUNT_ZERO_SHARE and len(np.unique(v)) >= 3)


def skewed_count(y: np.ndarray) -> float | None:
    """The skewness of a whole-number outcome from zero up that :func:`is_count` leaves Gaussian
    (few zeros), when it is at least :data:`SKEWED_COUNT`; otherwise None. Lengths of stay or
    visit counts that start at 1 are counts all the same, and a Gaussian equation misses their
    long tail."""
    v = np.asarray(y, dtype=float)
    if len(v) < 3 or _not_counts(v).any() or is_count(v) or len(np.unique(v)) < 3:
        return None
    g = float(stats.skew(v))
    return g if g >= SKEWED_COUNT else None


def default_family(task: str, classes: list[str] | None, y: np.ndarray | None = None) -> str:
    if task == "regression":
        return "poisson" if y is not None and is_count(y) else "gaussian"
    return "binomial" if len(classes) == 2 else "multinomial"


def _response(y: np.ndarray, task: str, classes: list[str] | None) -> np.ndarray:
    if task == "regression":
        return np.asarray(y, dtype=float)
    codes = np.searchsorted(np.asarray(classes, dtype=object), np.asarray(y, dtype=object))
    return codes.astype(float)


def _key(t: Term) -> tuple:
    return (t.kind, tuple(t.variables))


def _main_of(t: Term, kinds: dict) -> list[tuple]:
    """Keys of the main effects a term needs for hierarchy (none for a main effect itself)."""
    if t.kind in ("linear", "categorical") and len(t.variables) == 1:
        return []
    return [("linear" if kinds[v] == "numeric" else "categorical", (v,)) for v in t.variables]


def strength_order(terms: list[Term]) -> list[int]:
    """Positions strongest first: by ``evidence['rank']`` (1 = strongest) when every term has
    one, else the order given (discovery lists terms strongest first)."""
    ranks = [t.evidence.get("rank") if isinstance(t.evidence, dict) else None for t in terms]
    if terms and all(isinstance(r, (int, float)) for r in ranks):
        return sorted(range(len(terms)), key=lambda i: (ranks[i], i))
    return list(range(len(terms)))


def cap_terms(terms: list[Term], budget: int, fills: dict, kinds: dict) -> tuple[list[Term], list[Term]]:
    """Keep the strongest terms whose coefficients fit ``budget`` (per equation), with hierarchy.

    A term enters with the main effects of its variables (when those are among the terms); a
    term that does not fit is dropped and weaker ones are still tried. Returns (kept, dropped),
    both in the original order.
    """
    by_key = {_key(t): i for i, t in enumerate(terms)}
    size = [len(term_columns(i, t, fills, kinds)) for i, t in enumerate(terms)]
    kept: set[int] = set()
    used = 0
    for i in strength_order(terms):
        if i in kept:
            continue
        need = [by_key[k] for k in _main_of(terms[i], kinds) if k in by_key and by_key[k] not in kept]
        need = list(dict.fromkeys(need + [i]))
        cost = sum(size[j] for j in need)
        if used + cost <= budget:
            kept.update(need)
            used += cost
    if not kept and terms:  # even the strongest term alone is over the rule of thumb: keep it
        first = strength_order(terms)[0]
        kept = {first} | {by_key[k] for k in _main_of(terms[first], kinds) if k in by_key}
    return ([t for i, t in enumerate(terms) if i in kept], [t for i, t in enumerate(terms) if i not in kept])


def coefficient_budget(y_codes: np.ndarray, family: str, n_classes: int) -> tuple[int, str]:
    """Coefficients per equation (besides the intercept) the rows can estimate at all."""
    n = len(y_codes)
    if family in ("binomial", "multinomial"):
        counts = np.bincount(y_codes.astype(int), minlength=n_classes)
        events = int(counts.min())
        return estimable_coefficients(n, events), f"{events} rows of the rarest class"
    return estimable_coefficients(n), f"{n} rows"


def fit_equation(terms: list[Term], data: pd.DataFrame, y: np.ndarray, *, task: str, target: str,
                 fills: dict, kinds: dict, classes: list[str] | None, family: str | None = None,
                 robust: bool = False, fit_on: str = "confirmation",
                 baseline: list[Term] | None = None, cap: bool = False,
                 anticipated_r2: float | None = None) -> EquationFit:
    """Fit the formula on ``data`` (the confirmation rows) and map coefficients to terms.

    ``baseline`` (the main effects) defines the block test: one test of every suggested term
    beyond the baseline, on the same rows. ``cap`` drops the weakest terms only when the rows
    cannot estimate them at all; ``anticipated_r2`` (the forest's out-of-bag figure) switches a
    logistic fit to Firth's penalty when the terms need more coefficients than the rows support
    (:mod:`pocketforest.sizing`).
    """
    family = check_family(family, task, classes, y, target)
    notes: list[str] = []
    warn: list[str] = []
    terms = resolve_levels(terms, data, kinds)
    empty = [t for i, t in enumerate(terms) if not term_columns(i, t, fills, kinds)]
    if empty:   # per-level products whose levels these rows lack
        terms = [t for t in terms if t not in empty]
        notes.append(f"{len(empty)} term(s) have no rows of their levels among the {fit_on} rows and were left out: "
                     + ", ".join(_describe(t) for t in empty) + ".")
    frame = _impute(data[[k for k in kinds]], fills, kinds)
    response = "__response__"
    frame[response] = _response(y, task, classes)
    if task == "classification":
        present = np.bincount(frame[response].to_numpy().astype(int), minlength=len(classes))
        if (present == 0).any():
            missing = [c for c, m in zip(classes, present) if m == 0]
            raise InputError(f"class(es) {missing} of {target!r} have no {fit_on} rows: add rows of those "
                             "classes or change --split")
    dropped: list[Term] = []
    if cap:
        budget, basis = coefficient_budget(frame[response].to_numpy(), family, len(classes or [0, 1]))
        need = len(design_columns(terms, fills, kinds))
        if need > budget:
            terms, dropped = cap_terms(terms, budget, fills, kinds)
            msg = (f"The {fit_on} rows ({basis}) can estimate at most about {budget} coefficient(s) per equation "
                   f"even with a penalty, the suggested terms need {need}: dropped the {len(dropped)} weakest, "
                   "keeping hierarchy: "
                   + ", ".join(_describe(t) for t in dropped) + ".")
            notes.append(msg)
            warn.append(msg)
    terms, aliased = _estimable_terms(terms, frame, fills, kinds)
    if aliased:
        msg = (f"{len(aliased)} term(s) are exact linear combinations of earlier ones on the {fit_on} rows "
               "(their coefficients cannot be told apart) and were left out: "
               + ", ".join(_describe(t) for t in aliased) + ".")
        notes.append(msg)
        warn.append(msg)
        dropped = dropped + aliased
    cols = design_columns(terms, fills, kinds)
    form = formula(target, terms, fills, kinds)
    X = np.column_stack([np.ones(len(frame))] + [evaluate(c.node, frame) for c in cols])
    labels = ["Intercept"] + [c.label for c in cols]
    method = "maximum likelihood"
    codes = frame[response].to_numpy().astype(int) if task == "classification" else None
    logit = family in ("binomial", "multinomial")
    result = None
    # The separation check is a linear programme over rows x (K - 1) constraints: run it up front
    # on small confirmation sets (where separation happens), else only when the ordinary fit
    # looks like it ran off to infinity.
    separated = logit and len(X) * (len(classes) - 1) <= LP_MAX_ROWS and is_separated(X, codes, len(classes))
    k1 = (len(classes) - 1) if logit else 1
    supported = supported_coefficients(len(X), anticipated_r2) if anticipated_r2 is not None else np.inf
    overfit = logit and not separated and (X.shape[1] - 1) * k1 > supported
    if logit and not separated and not overfit:
        result = _fit(response + " ~ " + form.split(" ~ ", 1)[1], frame, family, robust)
        separated = _runaway(result, X) and is_separated(X, codes, len(classes))
    if separated or overfit:
        fit = firth_fit(X, codes, len(classes))
        method = "Firth penalised likelihood"
        coef, bse, pvalues, ci = fit.params, fit.bse, fit.pvalues, fit.ci
        summary = ""
    if overfit:
        notes.append(f"The terms need {(X.shape[1] - 1) * k1} coefficients, more than the {len(X)} {fit_on} rows support "
                     f"at an expected shrinkage of 0.9 (about {supported:.1f}; Riley et al. 2020, with the forest's "
                     "out-of-bag R² as the anticipated value): fitted by Firth's penalised likelihood (Firth 1993), "
                     "which shrinks the estimates towards zero instead of dropping terms.")
        if robust:
            notes.append("--robust does not apply to the penalised fit; model-based standard errors are shown.")
    elif separated:
        msg = (f"The classes of {target!r} are separated on the {fit_on} rows (some combination of the terms "
               "predicts them perfectly), so ordinary estimates would be infinite: fitted by Firth's penalised "
               "likelihood (Firth 1993) with Wald intervals; read large coefficients as 'very strong', not as sizes.")
        notes.append(msg)
        warn.append(msg)
        if robust:
            notes.append("--robust does not apply to the penalised fit; model-based standard errors are shown.")
    if not (separated or overfit):
        if result is None:
            result = _fit(response + " ~ " + form.split(" ~ ", 1)[1], frame, family, robust)
        order = _match_columns(np.asarray(result.model.exog), list(result.model.exog_names), frame, cols)
        params, bse_all, p_all = (np.asarray(a) for a in (result.params, result.bse, result.pvalues))
        ci_all = np.asarray(result.conf_int(alpha=0.05))
        if family == "multinomial":
            k1 = params.shape[1]
            ci_all = ci_all.reshape(k1, params.shape[0], 2).transpose(1, 0, 2)   # [p, K-1, 2]
        coef, bse, pvalues, ci = params[order], bse_all[order], p_all[order], ci_all[order]
        summary = str(result.summary())
        if robust:
            notes.append("Standard errors are robust (sandwich: HC3 for the GLM, HC0 for the multinomial model); "
                         "the block test uses the model-based likelihood.")
    if family == "multinomial":
        table = [_row(labels[j], coef[j, k], bse[j, k], ci[j, k], pvalues[j, k], classes[k + 1])
                 for k in range(coef.shape[1]) for j in range(len(labels))]
    else:
        table = [_row(labels[j], coef[j], bse[j], ci[j], pvalues[j]) for j in range(len(labels))]
    eq = EquationFit(task, family, LINKS[family], target, terms, cols, classes, np.asarray(coef, float), table,
                     form, fit_on, len(frame), notes=notes, warnings=warn, method=method,
                     dropped_terms=dropped, summary_text=summary)
    if family == "poisson" and result is not None:
        dispersion = float(result.pearson_chi2 / max(1.0, result.df_resid))
        eq.tuning["pearson_dispersion"] = dispersion
        if dispersion > OVERDISPERSION:
            msg = (f"The counts vary {dispersion:.1f} times as much as a Poisson model allows (Pearson chi-square / df "
                   f"on the {fit_on} rows), so its standard errors are too small: consider --family negative_binomial "
                   "(Cameron & Trivedi 2013) or --robust.")
            notes.append(msg)
            warn.append(msg)
    if baseline is not None:
        base_keys = {_key(t) for t in baseline}
        base_cols = [j + 1 for j, c in enumerate(cols) if _key(terms[c.term]) in base_keys]
        if len(base_cols) < len(cols):
            eq.block_test = block_test(X, X[:, [0] + base_cols], frame[response].to_numpy(), family,
                                       penalised=separated or overfit, n_classes=len(classes) if classes else None)
    if baseline is not None and eq.block_test is None:
        notes.append("No terms beyond the main effects were suggested (or kept), so there is no block test.")
    if fit_on == "confirmation":
        what = "p-values and intervals" + (" and the block test" if eq.block_test else "")
        notes.insert(0, f"The terms were chosen on the discovery rows; the {what} come from the {eq.n} "
                        "confirmation rows, which played no part in that choice, so they keep their nominal "
                        "meaning (data splitting, Cox 1975). Tested on the rows that chose the terms they would "
                        "be too small (Berk et al. 2013).")
    return eq


def _estimable_terms(terms: list[Term], frame: pd.DataFrame, fills: dict, kinds: dict) -> tuple[list[Term], list[Term]]:
    """Terms in order, leaving out any whose columns add nothing to the rank of those before it
    (a level that coincides with another column on these rows, say), and any term that needs a
    term left out (hierarchy). No fit, penalised or not, can estimate aliased columns."""
    kept: list[Term] = []
    left: list[Term] = []
    X = np.ones((len(frame), 1))
    rank = 1
    for t in terms:
        if any(_key(m) in {_key(x) for x in left} for m in [Term(k[0], list(k[1])) for k in _main_of(t, kinds)]):
            left.append(t)
            continue
        block = [evaluate(c.node, frame) for c in term_columns(0, t, fills, kinds)]
        trial = np.column_stack([X] + block)
        r = np.linalg.matrix_rank(trial)
        if r < rank + len(block):
            left.append(t)
            continue
        kept.append(t)
        X, rank = trial, r
    return kept, left


def _runaway(result, X: np.ndarray) -> bool:
    """Signs that a logit fit diverged: no convergence, non-finite errors, or a coefficient whose
    effect across one standard deviation of its column exceeds 25 on the log-odds scale."""
    retvals = getattr(result, "mle_retvals", None) or {}
    converged = retvals.get("converged", getattr(result, "converged", True))
    params = np.asarray(result.params, dtype=float).reshape(X.shape[1], -1)
    bse = np.asarray(result.bse, dtype=float)
    spread = np.r_[0.0, X[:, 1:].std(axis=0)] if X.shape[1] > 1 else np.zeros(1)
    return (not converged) or not np.all(np.isfinite(bse)) or bool(np.max(np.abs(params) * spread[:, None]) > 25)


def _describe(t: Term) -> str:
    return f"{t.kind}({', '.join(t.variables)})"


def _row(term: str, est, se, ci, p, cls: str | None = None) -> dict:
    row = {"term": term, "estimate": float(est), "std_error": float(se), "ci_low": float(ci[0]),
           "ci_high": float(ci[1]), "p_value": float(p)}
    if cls is not None:
        row["class"] = cls
    return row


def _fit(form: str, frame: pd.DataFrame, family: str, robust: bool):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            if family == "multinomial":
                return smf.mnlogit(form, frame).fit(disp=0, maxiter=200, **({"cov_type": "HC0"} if robust else {}))
            if family == "negative_binomial":
                # NB2 (Cameron & Trivedi 2013, ch. 3): its dispersion by maximum likelihood, then the
                # GLM at that dispersion so the table reads like the other families'.
                alpha = float(smf.negativebinomial(form, frame).fit(disp=0, maxiter=200).params["alpha"])
                fam = sm.families.NegativeBinomial(alpha=max(alpha, 1e-8))
            else:
                fam = {"gaussian": sm.families.Gaussian(), "binomial": sm.families.Binomial(),
                       "poisson": sm.families.Poisson()}[family]
            return smf.glm(form, frame, family=fam).fit(use_t=(family == "gaussian"),
                                                        **({"cov_type": "HC3"} if robust else {}))
        except np.linalg.LinAlgError as exc:
            raise InputError(f"the equation could not be fitted on the confirmation rows ({exc}); "
                             "use fewer terms or more rows") from None


def _match_columns(exog: np.ndarray, names: list[str], frame: pd.DataFrame, cols: list[Column]) -> list[int]:
    """Position in statsmodels' design of our intercept and each of our columns.

    Matching by values rather than by printed names keeps the exports tied to what was fitted.
    """
    ours = [np.ones(len(frame))] + [evaluate(c.node, frame) for c in cols]
    used: set[int] = set()
    order = []
    for j, col in enumerate(ours):
        scale = max(1.0, float(np.abs(col).max()))
        hits = [i for i in range(exog.shape[1]) if i not in used
                and np.allclose(exog[:, i], col, rtol=1e-9, atol=1e-9 * scale)]
        if not hits:
            label = "Intercept" if j == 0 else cols[j - 1].label
            raise RuntimeError(f"design column {label!r} not found among statsmodels columns {names}")
        used.add(hits[0])
        order.append(hits[0])
    if len(used) != exog.shape[1]:
        raise RuntimeError(f"statsmodels built columns the term model does not know: {names}")
    return order


def _loglik(X: np.ndarray, y: np.ndarray, family: str, penalised: bool, n_classes: int | None) -> tuple[float, int]:
    """Maximised (penalised) log-likelihood and the number of estimated coefficients."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if family in ("binomial", "multinomial"):
            codes = y.astype(int)
            k = (n_classes or int(codes.max()) + 1) if family == "multinomial" else 2
            if penalised:
                return firth_fit(X, codes, k).penalised_llf, X.shape[1] * (k - 1)
            if family == "multinomial":
                res = sm.MNLogit(codes, X).fit(disp=0, maxiter=200)
                return float(res.llf), X.shape[1] * (k - 1)
            return float(sm.GLM(codes, X, family=sm.families.Binomial()).fit().llf), X.shape[1]
        if family == "negative_binomial":   # the dispersion is estimated in both models alike
            return float(sm.NegativeBinomial(y, X).fit(disp=0, maxiter=200).llf), X.shape[1]
        return float(sm.GLM(y, X, family=sm.families.Poisson()).fit().llf), X.shape[1]


def _nested_columns(X_full: np.ndarray, X_reduced: np.ndarray) -> list[int]:
    """Positions in ``X_full`` of the columns of ``X_reduced`` (the reduced design is a subset of
    the full design's columns, copied exactly)."""
    keep: list[int] = []
    for i in range(X_reduced.shape[1]):
        hit = next((j for j in range(X_full.shape[1]) if j not in keep and np.array_equal(X_full[:, j], X_reduced[:, i])),
                   None)
        if hit is None:
            raise ValueError("the reduced design of a penalised likelihood-ratio test must be columns of the full design")
        keep.append(hit)
    return keep


def block_test(X_full: np.ndarray, X_reduced: np.ndarray, y: np.ndarray, family: str, *,
               penalised: bool = False, n_classes: int | None = None) -> dict | None:
    """One test of all suggested terms beyond the main effects, on one set of rows.

    Gaussian: the exact F test of the nested least-squares models. Binomial, Poisson and
    multinomial: the likelihood-ratio chi-square test with df = extra coefficients, which for
    the multinomial model is extra columns x (K - 1) (McCullagh & Nelder 1989, ch. 4-5). After a
    Firth fit it is the penalised likelihood-ratio test (Heinze & Schemper 2002): both maxima
    under the full design's penalty, the reduced one with the extra coefficients held at zero.
    """
    y = np.asarray(y, dtype=float)
    if family == "gaussian":
        n = len(y)
        rank_f, rank_r = (np.linalg.matrix_rank(X_full), np.linalg.matrix_rank(X_reduced))
        df = int(rank_f - rank_r)
        if df <= 0:
            return None
        rss1 = float(np.sum((y - X_full @ np.linalg.lstsq(X_full, y, rcond=None)[0]) ** 2))
        rss0 = float(np.sum((y - X_reduced @ np.linalg.lstsq(X_reduced, y, rcond=None)[0]) ** 2))
        dof = float(n - rank_f)
        stat = ((rss0 - rss1) / df) / (rss1 / dof)
        return {"test": "F", "statistic": float(stat), "df": df, "df_resid": dof,
                "p_value": float(stats.f.sf(stat, df, dof))}
    ll1, k1 = _loglik(X_full, y, family, penalised, n_classes)
    if penalised:   # the reduced model under the full model's penalty (Heinze & Schemper 2002)
        keep = _nested_columns(X_full, X_reduced)
        k = (n_classes or int(y.max()) + 1) if family == "multinomial" else 2
        k0 = len(keep) * (k - 1)
        if k1 - k0 <= 0:
            return None
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ll0 = restricted_penalised_llf(X_full, y.astype(int), k, keep)
    else:
        ll0, k0 = _loglik(X_reduced, y, family, penalised, n_classes)
    df = int(k1 - k0)
    if df <= 0:
        return None
    stat = 2.0 * (ll1 - ll0)
    name = "penalised likelihood ratio" if penalised else "likelihood ratio"
    return {"test": name, "statistic": float(stat), "df": df,
            "p_value": float(stats.chi2.sf(max(stat, 0.0), df))}


# ---------------------------------------------------------------- coefficients for scoring

#: Ridge penalties tried by generalised cross-validation, relative to the standardised design.
RIDGE_ALPHAS = tuple(float(a) for a in np.logspace(-3, 4, 36))


def refit_for_scoring(inference: EquationFit, data: pd.DataFrame, y: np.ndarray, *, fills: dict, kinds: dict,
                      fit_on: str, anticipated_r2: float | None) -> EquationFit:
    """The same terms and design columns as ``inference``, re-estimated on ``data`` for prediction.

    Maximum likelihood where the rows support the coefficients (:mod:`pocketforest.sizing`);
    otherwise ridge (Gaussian, penalty by generalised cross-validation, Golub, Heath & Wahba 1979)
    or Firth (logistic, multinomial). Poisson and negative binomial refits are maximum likelihood.
    The result's ``inference`` is the confirmation fit, whose table is the one to report.
    """
    X = design_of(inference, data, fills, kinds)
    coef, method, tuning = refit_coefficients(inference, X, y, anticipated_r2)
    return _scoring_fit(inference, inference, coef, method, tuning, fit_on, len(X))


def design_of(eq: EquationFit, data: pd.DataFrame, fills: dict, kinds: dict) -> np.ndarray:
    """The equation's design matrix (intercept first) on ``data``, missing inputs filled as in training."""
    return eq.design(_impute(data[[k for k in kinds]], fills, kinds))


def refit_coefficients(eq: EquationFit, X: np.ndarray, y: np.ndarray,
                       anticipated_r2: float | None) -> tuple[np.ndarray, str, dict]:
    """Coefficients of ``eq``'s design ``X`` on these rows, the method the row count calls for, and
    its tuning (:func:`refit_for_scoring`); NaN coefficients and "failed" when no fit exists."""
    logit = eq.family in ("binomial", "multinomial")
    k1 = len(eq.classes) - 1 if logit else 1
    need = (X.shape[1] - 1) * k1
    supported = supported_coefficients(len(X), anticipated_r2) if anticipated_r2 is not None else np.inf
    tuning: dict = {"rows": int(len(X)), "coefficients": int(need), "supported_at_shrinkage_0.9": float(supported)}
    try:
        coef, method = _refit(eq, X, y, need, supported, tuning)
    except (np.linalg.LinAlgError, ValueError):
        coef, method = np.full(eq.coef.shape, np.nan), "failed"
    return coef, method, tuning


def _refit(eq: EquationFit, X: np.ndarray, y: np.ndarray, need: int, supported: float,
           tuning: dict) -> tuple[np.ndarray, str]:
    family = eq.family
    logit = family in ("binomial", "multinomial")
    k1 = len(eq.classes) - 1 if logit else 1
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if family == "gaussian":
            yv = np.asarray(y, dtype=float)
            if need > supported and X.shape[1] > 1:
                coef, tuning_r = _ridge(X, yv)
                tuning.update(tuning_r)
                method = "ridge (penalty by generalised cross-validation)"
            else:
                coef = np.linalg.lstsq(X, yv, rcond=None)[0]
                method = "least squares"
        elif logit:
            codes = _response(y, eq.task, eq.classes).astype(int)
            separated = len(X) * k1 <= LP_MAX_ROWS and is_separated(X, codes, len(eq.classes))
            if separated or need > supported:
                coef = _firth_or_nan(X, codes, len(eq.classes))
                method = "Firth penalised likelihood"
                tuning["reason"] = "separated classes" if separated else "more coefficients than the rows support"
            else:
                res = (sm.MNLogit(codes, X).fit(disp=0, maxiter=200) if family == "multinomial"
                       else sm.GLM(codes, X, family=sm.families.Binomial()).fit())
                coef = np.asarray(res.params)
                method = "maximum likelihood"
                if _runaway(res, X):
                    coef = _firth_or_nan(X, codes, len(eq.classes))
                    method = "Firth penalised likelihood"
                    tuning["reason"] = "the ordinary fit ran off to infinity"
        else:
            yv = np.asarray(y, dtype=float)
            if family == "negative_binomial":
                alpha = float(sm.NegativeBinomial(yv, X).fit(disp=0, maxiter=200).params[-1])
                fam = sm.families.NegativeBinomial(alpha=max(alpha, 1e-8))
                tuning["alpha"] = alpha
            else:
                fam = sm.families.Poisson()
            coef = np.asarray(sm.GLM(yv, X, family=fam).fit().params)
            method = "maximum likelihood"
    return np.asarray(coef, dtype=float).reshape(eq.coef.shape), method


def _scoring_fit(eq: EquationFit, inference: EquationFit, coef: np.ndarray, method: str, tuning: dict,
                 fit_on: str, n: int) -> EquationFit:
    notes = []
    if not np.all(np.isfinite(coef)):
        # never export a broken refit: keep the confirmation estimates and say so
        notes.append(f"The refit on the {fit_on} rows did not give finite estimates; the confirmation-row "
                     "coefficients are exported instead.")
        return dataclasses.replace(eq, inference=None, notes=eq.notes + notes)
    labels = ["Intercept"] + [c.label for c in eq.columns]
    if coef.ndim == 2:
        table = [{"term": labels[j], "estimate": float(coef[j, k]), "class": eq.classes[k + 1]}
                 for k in range(coef.shape[1]) for j in range(len(labels))]
    else:
        table = [{"term": labels[j], "estimate": float(coef[j])} for j in range(len(labels))]
    tuning["method"] = method
    return dataclasses.replace(eq, coef=coef, table=table, fit_on=fit_on, n=int(n), method=method,
                               inference=inference, tuning=tuning, summary_text="",
                               notes=list(eq.notes) + notes)


def _firth_or_nan(X: np.ndarray, codes: np.ndarray, k: int) -> np.ndarray:
    """Firth's estimates, or NaN (the caller then keeps the confirmation estimates) when the
    information matrix is singular on these rows."""
    try:
        return firth_fit(X, codes, k).params
    except np.linalg.LinAlgError:
        return np.full((X.shape[1],) if k == 2 else (X.shape[1], k - 1), np.nan)


def _ridge(X: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, dict]:
    """Ridge on standardised columns (intercept unpenalised), back on the columns' own scale."""
    from sklearn.linear_model import RidgeCV
    Z = X[:, 1:]
    mean, sd = Z.mean(axis=0), Z.std(axis=0)
    sd = np.where(sd > 0, sd, 1.0)
    model = RidgeCV(alphas=RIDGE_ALPHAS, fit_intercept=True).fit((Z - mean) / sd, y)
    slopes = model.coef_ / sd
    intercept = float(model.intercept_ - np.sum(slopes * mean))
    Zs = (Z - mean) / sd
    d = np.linalg.svd(Zs - Zs.mean(axis=0), compute_uv=False)
    dof = float(np.sum(d ** 2 / (d ** 2 + model.alpha_)))
    return np.r_[intercept, slopes], {"penalty": float(model.alpha_), "effective_df": dof,
                                      "penalty_rule": "generalised cross-validation over "
                                                      f"{len(RIDGE_ALPHAS)} penalties, standardised columns"}
