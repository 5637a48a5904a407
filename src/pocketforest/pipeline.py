"""The whole job in one call: table → splits → forest → discovery → equation and tree → numbers.

Each stage receives only the rows it may see: the forest, importance and term choice see the
discovery rows; the equation is estimated and tested on the confirmation rows; every accuracy,
fidelity and loss figure comes from the test rows.
"""
from __future__ import annotations

import dataclasses
import sys
import time
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from . import __version__
from .defaults import TREE_MARGIN, TREES
from .design import fill_values, make_preprocessor, model_frame
from .discovery import Discovery, Requests, discover
from .equation import EquationFit, check_family, coefficient_budget, fit_equation, refit_for_scoring, skewed_count
from .evaluate import ESTIMAND_CV, ESTIMAND_TEST, fidelity, loss_with_interval, metrics, nested_cv_interval, outcome_values
from .forest import ForestFit, fit_forest
from .importance import Importance, oob_increases, summarise
from .own_loss import own_loss
from .resample import NESTED_REPEATS, Plan, choose_plan, fold_assignments, out_of_fold, pair_predictions
from .sizing import NoEquation, anticipated_r2, equation_support
from .features import Table
from .split import Splits, make_splits
from .surrogate import TreeFit, distill_tree, mean_frontier
from .terms import main_effects


@dataclass
class Settings:
    trees: int = TREES
    min_samples_leaf: int = 5
    max_leaves: int | None = None  # per tree; None = forest.leaf_cap (size budget), 0 = no cap
    tree_depth: int | None = None
    tree_leaves: int | None = None   # leaf cap of the surrogate tree; None = TREE_LEAVES unless tree_depth is set
    tree_margin: float = TREE_MARGIN  # size rule: smallest tree within this fidelity of the best under the cap
    seed: int = 0
    #: None: automatic (cross-validation below resample.SMALL_DATA_ROWS rows, else 0.5/0.25/0.25);
    #: a tuple forces that discovery / confirmation / test split.
    split: tuple[float, float, float] | None = None
    family: str | None = None
    robust: bool = False
    bootstrap: int = 1000
    #: Small-data plan: repeats of the nested cross-validation behind the loss interval; 0 keeps the
    #: paired bootstrap over out-of-fold rows (faster; about the procedure's expected loss only).
    nested_repeats: int = NESTED_REPEATS
    quiet: bool = False
    synthetic_rows: int = 0          # extra forest-labelled rows for the surrogate tree (Breiman & Shang 1996)
    cap_terms: bool = True           # drop terms the confirmation rows cannot estimate at all
    refit: bool = True               # export coefficients re-estimated on discovery + confirmation rows
    max_terms: int | None = None
    keep_vars: tuple[str, ...] = ()
    drop_vars: tuple[str, ...] = ()


@dataclass
class Distillation:
    """Everything one run found; :meth:`write` turns it into a bundle."""
    table: Table
    settings: Settings
    splits: Splits
    forest: ForestFit
    importance: list[Importance]
    discovery: Discovery
    #: None when the confirmation rows cannot support an honest equation (see ``no_equation``)
    equation: EquationFit | None
    tree: TreeFit
    fills: dict
    evaluation: dict
    fidelity: dict
    loss: dict
    warnings: list[str] = field(default_factory=list)
    plan: Plan | None = None
    #: Cross-validation only: the fold of every row in every repeat ([repeats, rows]).
    fold_assignment: np.ndarray | None = None
    nested_assignment: np.ndarray | None = None   # the nested cross-validation's folds (loss intervals)

    @property
    def folds(self) -> list[tuple[np.ndarray, np.ndarray]] | None:
        """Cross-validation only: (fitted rows, held-out rows) of every fold of every repeat."""
        a = self.fold_assignment
        if a is None:
            return None
        return [(np.flatnonzero(a[r] != k), np.flatnonzero(a[r] == k))
                for r in range(a.shape[0]) for k in np.unique(a[r])]
    #: Wall seconds per stage (split, forest, importance, discovery, equation, tree, judge); read by
    #: the benchmark so each stage's share of the run is measured, not guessed.
    timings: dict[str, float] = field(default_factory=dict)
    #: `distill --sample`: the sample design and the check on left-out rows (manifest "sample")
    sample: dict | None = None
    #: Why there is no equation, and the table rows that would be needed (None: there is one)
    no_equation: NoEquation | None = None

    @property
    def models(self) -> tuple[str, ...]:
        """The models this run delivers: the forest and the tree always, the equation when fitted."""
        return ("forest", "tree") if self.equation is None else ("forest", "tree", "equation")

    @property
    def kinds(self) -> dict[str, str]:
        return {f.name: f.kind for f in self.table.features}

    @property
    def classes(self) -> list[str] | None:
        return self.forest.classes

    def predict(self, data: pd.DataFrame, model: str = "forest") -> np.ndarray:
        """Python-side predictions (regression values, or class probabilities)."""
        if model == "equation":
            if self.equation is None:
                raise ValueError(f"this result has no equation: {self.no_equation.reason}; predict with "
                                 "model='forest' or model='tree'")
            return self.equation.predict(data)
        X = model_frame(data, self.table.features)
        if model == "forest":  # same numbers as the pipeline's predict, on both cores
            return self.forest.predict_design(self.forest.pipeline.named_steps["prep"].transform(X))
        pipe = self.tree.pipeline
        return pipe.predict(X) if self.table.task == "regression" else pipe.predict_proba(X)

    def summary(self) -> str:
        """The scoreboard, the formula and the coefficient table as text (like a statsmodels summary)."""
        from .summary import result_text
        return result_text(self)

    def __repr__(self) -> str:  # one short line, not the dataclass dump
        from .summary import result_line
        return result_line(self)

    def write(self, out: str, *, force: bool = False) -> str:
        from .bundle import write_bundle
        return write_bundle(self, out, force=force)


def _say(settings: Settings, text: str) -> None:
    if not settings.quiet:
        print(text, file=sys.stderr, flush=True)


def distill(table: Table, settings: Settings | None = None, *, plan: Plan | None = None) -> Distillation:
    """The whole job: fit every model once, then judge them on the test rows, or by
    cross-validating the whole pipeline when the table is small (:mod:`pocketforest.resample`).

    ``plan`` overrides the plan the row count chooses; the benchmark's threshold simulation
    (``bench/small.py``) runs both plans on the same tables with it."""
    s = settings or Settings()
    y_all = table.data[table.target].to_numpy()
    check_family(s.family, table.task, table.classes, y_all, table.target)   # fail before any fitting
    plan = plan or choose_plan(len(table.data), s.split)
    _say(s, f"plan: {plan.reason}")
    result = _fit_models(table, s, plan.split)
    result.plan = plan
    clock = _Clock()
    if plan.kind == "cross-validation":
        _say(s, f"judging by {plan.repeats} x {plan.folds}-fold cross-validation of the whole pipeline")
        _judge_by_cross_validation(result, plan)
    else:
        test = table.data.iloc[result.splits.test].reset_index(drop=True)
        _judge(result, test, outcome_values(test[table.target].to_numpy(), table.task))
    clock.lap("judge")
    result.timings.update(clock.laps)
    return result


def _fit_models(table: Table, s: Settings, fractions: tuple[float, float, float],
                equation: bool | None = None) -> Distillation:
    """Forest, importance, discovery, equation and tree, each on the rows it may see.

    ``equation``: None decides by :func:`sizing.equation_support` whether the confirmation rows
    can carry an equation; True / False fit one or not regardless (the cross-validation folds
    follow the bundle's decision, so they judge the models the bundle holds)."""
    clock = _Clock()
    data, target, task = table.data, table.target, table.task
    y_all = data[target].to_numpy()
    strata = y_all if task == "classification" else None
    splits = make_splits(len(data), fractions, s.seed, strata)
    disc, conf, test = (data.iloc[i].reset_index(drop=True) for i in (splits.discovery, splits.confirmation, splits.test))
    y_d, y_c, y_t = (d[target].to_numpy() for d in (disc, conf, test))
    if task == "regression":
        y_d, y_c, y_t = (v.astype(float) for v in (y_d, y_c, y_t))
    else:
        y_d, y_c, y_t = (v.astype(str).astype(object) for v in (y_d, y_c, y_t))

    _say(s, f"rows: {splits.sizes()} (discovery / confirmation / test)")
    clock.lap("split")
    prep, columns = make_preprocessor(table.features, data)
    Xd = model_frame(disc, table.features)
    forest = fit_forest(Xd, y_d, prep, columns, task, trees=s.trees, min_samples_leaf=s.min_samples_leaf,
                        max_leaves=s.max_leaves, seed=s.seed, quiet=s.quiet)
    fills = fill_values(prep, table.features)
    kinds = {f.name: f.kind for f in table.features}
    clock.lap("forest")

    _say(s, "ranking variables (out-of-bag permutation importance)")
    Xt_d = prep.transform(Xd)
    names = [f.name for f in table.features]
    increases = oob_increases(forest, Xt_d, y_d, names, s.seed)
    importance = summarise(increases.per_tree, names)
    clock.lap("importance")

    family = check_family(s.family, task, forest.classes, y_all, target)
    r2_hint = anticipated_r2(task, y_d, forest.oob_prediction, forest.classes)
    budget, _ = coefficient_budget(_codes(y_c, task, forest.classes), family, len(forest.classes or [0, 1]))
    _say(s, "looking for bends and interactions")
    requests = Requests(seed=s.seed, quiet=s.quiet, max_terms=s.max_terms, keep=tuple(s.keep_vars),
                        drop=tuple(s.drop_vars), min_samples_leaf=s.min_samples_leaf,
                        budget=budget if s.cap_terms else None, estimation_rows=len(conf), family=family)
    discovery = discover(forest, table.features, task, disc, y_d, importance, increases, fills, requests)
    clock.lap("discovery")

    absent = _equation_decision(y_all, y_c, task, forest.classes, s) if equation is None else None
    if equation is False:
        absent = None   # a cross-validation fold of a bundle without an equation: nothing to judge
        eq = None
    elif absent is not None:
        _say(s, absent.warning)
        eq = None
    else:
        _say(s, "fitting the equation on the confirmation rows")
        eq = _fit_equation(discovery, table, conf, y_c, disc, y_d, s, family, fills, kinds, forest.classes, r2_hint)
    clock.lap("equation")

    _say(s, "distilling the surrogate tree")
    # without a test split (small-data plan) the held-out figures come from the cross-validation
    tree = distill_tree(forest, Xd, model_frame(conf, table.features),
                        model_frame(test, table.features) if len(test) else None,
                        leaves=s.tree_leaves, depth=s.tree_depth, margin=s.tree_margin, seed=s.seed,
                        min_leaf=s.min_samples_leaf, n_synthetic=s.synthetic_rows)
    clock.lap("tree")

    result = Distillation(table, s, splits, forest, importance, discovery, eq, tree, fills,
                          {}, {}, {}, list(table.notes) + list(discovery.notes)
                          + (list(eq.warnings) if eq is not None else [absent.warning] if absent is not None else []))
    result.no_equation = absent
    result.timings = clock.laps
    return result


def _equation_decision(y_all: np.ndarray, y_c: np.ndarray, task: str, classes: list[str] | None,
                       s: Settings) -> NoEquation | None:
    """Can the confirmation rows estimate one slope? (:func:`sizing.equation_support`)."""
    n = len(y_all)

    def share_at(rows: int) -> float:   # the confirmation share a table of `rows` rows would get
        return choose_plan(rows, s.split).split[1]

    if task == "regression":
        return equation_support(len(y_c), n_classes=None, rows=n, share=1.0, confirmation_share=share_at)
    counts = np.bincount(_codes(y_c, task, classes), minlength=len(classes))
    k = int(np.argmin(counts))
    share = float(np.mean(np.asarray(y_all, dtype=str) == classes[k]))
    return equation_support(int(counts[k]), n_classes=len(classes), rows=n, share=share,
                            confirmation_share=share_at, rarest=classes[k])


def _fit_equation(discovery: Discovery, table: Table, conf: pd.DataFrame, y_c: np.ndarray, disc: pd.DataFrame,
                  y_d: np.ndarray, s: Settings, family: str, fills: dict, kinds: dict, classes: list[str] | None,
                  r2_hint: float) -> EquationFit:
    """The GLM on the confirmation rows, its coefficients re-estimated for scoring (``s.refit``)."""
    target, task = table.target, table.task
    baseline = main_effects([f for f in table.features if f.name in discovery.main_variables])
    equation = fit_equation(discovery.terms, conf, y_c, task=task, target=target, fills=fills, kinds=kinds,
                            classes=classes, family=family, robust=s.robust, baseline=baseline,
                            cap=s.cap_terms, anticipated_r2=r2_hint)
    if s.family is None and family in ("poisson",) and task == "regression":
        equation.notes.append(f"{target!r} holds whole numbers from zero up with many zeros, so the equation is a "
                              "Poisson GLM with a log link by default (pass --family gaussian to override).")
    elif s.family is None and family == "gaussian" and task == "regression":
        g = skewed_count(np.concatenate([y_d, y_c]))
        if g is not None:   # advice to act on: among the run's warnings too, like the overdispersion one
            msg = (f"{target!r} holds whole numbers from zero up, skewed to the right (skewness {g:.1f}) with few "
                   "zeros, and the equation is Gaussian by default: a count model may follow its long tail better; "
                   "try --family poisson (or negative_binomial).")
            equation.notes.append(msg)
            equation.warnings.append(msg)
    if s.refit:
        both = pd.concat([disc, conf], ignore_index=True)
        equation = refit_for_scoring(equation, both, np.concatenate([y_d, y_c]), fills=fills, kinds=kinds,
                                     fit_on="discovery+confirmation", anticipated_r2=r2_hint)
    return equation


def _codes(y: np.ndarray, task: str, classes: list[str] | None) -> np.ndarray:
    if task == "regression":
        return np.zeros(len(y), dtype=int)
    return np.searchsorted(np.asarray(classes, dtype=object), np.asarray(y, dtype=object))


class _Clock:
    """Wall time per stage, for ``Distillation.timings``."""

    def __init__(self) -> None:
        self.laps: dict[str, float] = {}
        self._last = time.perf_counter()

    def lap(self, stage: str) -> None:
        now = time.perf_counter()
        self.laps[stage] = self.laps.get(stage, 0.0) + now - self._last
        self._last = now


def _judge_by_cross_validation(r: Distillation, plan: Plan) -> None:
    """Out-of-fold predictions of the whole pipeline refitted per fold, pooled over repeats; the
    loss interval's bootstrap draws original rows with all their repeats."""
    table, task, classes = r.table, r.table.task, r.classes
    y = outcome_values(table.data[table.target].to_numpy(), task)
    r.fold_assignment = fold_assignments(y, task, plan, r.settings.seed)
    inner = dataclasses.replace(r.settings, split=plan.split)
    curves: list = []
    models = r.models

    def refit(t: Table, st: Settings) -> Distillation:   # every refit fits what the bundle holds
        return _fit_models(t, st, plan.split, equation="equation" in models)

    oof = out_of_fold(table, inner, r.fold_assignment, refit, curves, models)
    if curves:   # the tree's size/fidelity frontier, averaged over the folds' held-out rows
        r.tree.record_held_out(mean_frontier([c[0] for c in curves]), mean_frontier([c[1] for c in curves], key="depth"),
                               on="cross-validation")
    repeats, n = r.fold_assignment.shape
    folds = int(r.fold_assignment.max()) + 1
    stacked = {m: p.reshape((repeats * n,) + p.shape[2:]) for m, p in oof.items()}
    y_s = np.tile(y, repeats)
    groups = np.tile(np.arange(n), repeats)
    apparent = {m: metrics(y, r.predict(table.data, m), task, classes) for m in models}
    r.evaluation = {"on": "cross-validation", "folds": folds, "repeats": int(repeats),
                    "n": int(n), "method": "repeated k-fold cross-validation of the whole pipeline "
                                           "(forest, discovery, equation and tree refitted in every fold)",
                    **{m: metrics(y_s, p, task, classes) for m, p in stacked.items()},
                    "apparent": apparent}
    r.fidelity = {m: fidelity(stacked["forest"], stacked[m], task) for m in models[1:]}
    r.loss = {m: {**loss_with_interval(y_s, stacked["forest"], stacked[m], task, classes,
                                       resamples=r.settings.bootstrap, seed=r.settings.seed, groups=groups),
                  "estimand": ESTIMAND_CV}
              for m in models[1:]}
    if r.settings.nested_repeats > 0 and folds >= 4:   # 3 folds would leave the inner fits a third of the rows
        _nested_intervals(r, plan, y, stacked, folds, inner, refit)
    s = r.settings
    _say(s, f"judging the bundle's own models on its {len(r.splits.confirmation)} confirmation rows")
    for m, entry in own_loss(r, level=r.loss[models[1]]["level"], resamples=s.bootstrap, seed=s.seed).items():
        r.loss[m]["bundle_models"] = entry


def _nested_intervals(r: Distillation, plan: Plan, y: np.ndarray, stacked: dict, folds: int, inner: Settings,
                      refit) -> None:
    """Replace each headline loss interval by nested cross-validation's (:func:`evaluate.nested_cv_interval`),
    which covers the procedure's expected loss far better than the bootstrap over out-of-fold rows
    (0.97 against 0.86 for the numeric outcome at 150 rows: docs/performance.md); the other metrics
    keep the bootstrap's."""
    s = r.settings
    nested = dataclasses.replace(plan, folds=folds, repeats=s.nested_repeats)
    _say(s, f"loss intervals by nested cross-validation: {s.nested_repeats} x {folds * (folds - 1) // 2} refits")
    r.nested_assignment = fold_assignments(y, r.table.task, nested, s.seed + 500)
    models = r.models
    pairs = pair_predictions(r.table, inner, r.nested_assignment, refit, models)
    for m in models[1:]:
        iv = nested_cv_interval(y, pairs["forest"], pairs[m], r.nested_assignment, stacked["forest"], stacked[m],
                                r.table.task, r.classes, level=r.loss[m]["level"], seed=s.seed)
        if iv is not None:
            r.loss[m].update(iv, also_method="paired percentile bootstrap")


def _judge(r: Distillation, test: pd.DataFrame, y_t: np.ndarray) -> None:
    """Accuracy, fidelity and loss on the test rows only."""
    task, classes = r.table.task, r.classes
    preds = {m: r.predict(test, m) for m in r.models}
    r.evaluation = {"on": "test", "n": int(len(test)),
                    **{m: metrics(y_t, p, task, classes) for m, p in preds.items()}}
    r.fidelity = {m: fidelity(preds["forest"], preds[m], task) for m in r.models[1:]}
    r.loss = {m: {**loss_with_interval(y_t, preds["forest"], preds[m], task, classes,
                                       resamples=r.settings.bootstrap, seed=r.settings.seed),
                  "estimand": ESTIMAND_TEST}
              for m in r.models[1:]}


__all__ = ["Distillation", "Settings", "distill", "__version__"]
