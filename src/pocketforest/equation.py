"""The confirmatory GLM: terms chosen on discovery rows, estimated and tested on confirmation rows.

Because the rows that estimate and test were never used to choose the terms, the p-values and
intervals keep their nominal meaning (Cox 1975; Berk et al. 2013). Families follow McCullagh &
Nelder (1989): Gaussian/identity, binomial/logit, multinomial logit.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import statsmodels.api as sm
import statsmodels.formula.api as smf
from scipy import stats

from .errors import InputError
from .expr import evaluate
from .terms import Column, Term, design_columns, formula, resolve_levels


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
    notes: list[str] = field(default_factory=list)
    summary_text: str = ""

    def design(self, data: pd.DataFrame) -> np.ndarray:
        cols = [np.ones(len(data))] + [evaluate(c.node, data) for c in self.columns]
        return np.column_stack(cols)

    def linear_predictor(self, data: pd.DataFrame) -> np.ndarray:
        return self.design(data) @ self.coef

    def predict(self, data: pd.DataFrame) -> np.ndarray:
        """Regression: values. Classification: probabilities [n, K] in ``classes`` order."""
        eta = self.linear_predictor(data)
        if self.task == "regression":
            return eta if self.link == "identity" else np.exp(eta)
        if len(self.classes) == 2:
            p1 = 1.0 / (1.0 + np.exp(-eta))
            return np.column_stack([1.0 - p1, p1])
        full = np.column_stack([np.zeros(len(data)), eta])
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


def fit_equation(terms: list[Term], data: pd.DataFrame, y: np.ndarray, *, task: str, target: str,
                 fills: dict, kinds: dict, classes: list[str] | None, family: str | None = None,
                 robust: bool = False, fit_on: str = "confirmation",
                 baseline: list[Term] | None = None) -> EquationFit:
    """Fit the formula on ``data`` (the confirmation rows) and map coefficients to terms."""
    terms = resolve_levels(terms, data, kinds)
    cols = design_columns(terms, fills, kinds)
    frame = _impute(data[[k for k in kinds]], fills, kinds)
    response = "__response__"
    frame[response] = _response(y, task, classes)
    form = formula(target, terms, fills, kinds)
    fit_form = response + " ~ " + form.split(" ~ ", 1)[1]
    family = family or _default_family(task, classes)
    result = _fit(fit_form, frame, family, robust)
    exog_names = list(result.model.exog_names)
    exog = np.asarray(result.model.exog)
    order = _match_columns(exog, exog_names, frame, cols)
    params = np.asarray(result.params)
    bse = np.asarray(result.bse)
    pvalues = np.asarray(result.pvalues)
    ci = np.asarray(result.conf_int(alpha=0.05)) if family != "multinomial" else None
    labels = ["Intercept"] + [c.label for c in cols]
    if family == "multinomial":
        coef = params[order]
        table = []
        ci_all = result.conf_int(alpha=0.05)
        for k in range(params.shape[1]):
            cls = classes[k + 1]
            ci_k = np.asarray(ci_all.loc[ci_all.index.get_level_values(0) == ci_all.index.get_level_values(0).unique()[k]])
            for pos, src in enumerate(order):
                table.append(_row(labels[pos], params[src, k], bse[src, k], ci_k[src], pvalues[src, k], cls))
    else:
        coef = params[order]
        table = [_row(labels[pos], params[src], bse[src], ci[src], pvalues[src]) for pos, src in enumerate(order)]
    link = {"gaussian": "identity", "binomial": "logit", "multinomial": "logit", "poisson": "log"}[family]
    fit = EquationFit(task, family, link, target, terms, cols, classes, coef, table, form, fit_on,
                      len(frame), summary_text=str(result.summary()))
    if baseline is not None and len(baseline) < len(terms):
        fit.block_test = block_test(result, baseline, frame, response, family, fills, kinds, target, robust)
    return fit


def _row(term: str, est, se, ci, p, cls: str | None = None) -> dict:
    row = {"term": term, "estimate": float(est), "std_error": float(se), "ci_low": float(ci[0]),
           "ci_high": float(ci[1]), "p_value": float(p)}
    if cls is not None:
        row["class"] = cls
    return row


def _default_family(task: str, classes: list[str] | None) -> str:
    if task == "regression":
        return "gaussian"
    return "binomial" if len(classes) == 2 else "multinomial"


def _response(y: np.ndarray, task: str, classes: list[str] | None) -> np.ndarray:
    if task == "regression":
        return np.asarray(y, dtype=float)
    codes = np.searchsorted(np.asarray(classes, dtype=object), np.asarray(y, dtype=object))
    return codes.astype(float)


def _fit(form: str, frame: pd.DataFrame, family: str, robust: bool):
    cov = {"cov_type": "HC3"} if robust else {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            if family == "multinomial":
                return smf.mnlogit(form, frame).fit(disp=0, maxiter=200, **({"cov_type": "HC0"} if robust else {}))
            fam = {"gaussian": sm.families.Gaussian(), "binomial": sm.families.Binomial(),
                   "poisson": sm.families.Poisson()}[family]
            return smf.glm(form, frame, family=fam).fit(use_t=(family == "gaussian"), **cov)
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


def block_test(full, baseline: list[Term], frame: pd.DataFrame, response: str, family: str,
               fills: dict, kinds: dict, target: str, robust: bool) -> dict:
    """One test of all suggested terms beyond the main effects, on the same confirmation rows.

    Gaussian: the exact F test of the nested models; other families: the likelihood-ratio
    chi-square test.
    """
    base_terms = resolve_levels(baseline, frame, kinds)
    form = response + " ~ " + formula(target, base_terms, fills, kinds).split(" ~ ", 1)[1]
    reduced = _fit(form, frame, family, False)
    full_plain = full if not robust else _fit(full.model.formula, frame, family, False)
    df = int(np.size(full_plain.params) - np.size(reduced.params))
    if family == "multinomial":
        df = int(full_plain.params.shape[0] - reduced.params.shape[0]) * full_plain.params.shape[1]
    if df <= 0:
        return None
    if family == "gaussian":
        rss1, rss0 = float(np.sum(full_plain.resid_response ** 2)), float(np.sum(reduced.resid_response ** 2))
        dof = float(full_plain.df_resid)
        stat = ((rss0 - rss1) / df) / (rss1 / dof)
        return {"test": "F", "statistic": float(stat), "df": df, "df_resid": dof,
                "p_value": float(stats.f.sf(stat, df, dof))}
    stat = 2.0 * (float(full_plain.llf) - float(reduced.llf))
    return {"test": "likelihood ratio", "statistic": stat, "df": df,
            "p_value": float(stats.chi2.sf(max(stat, 0.0), df))}
