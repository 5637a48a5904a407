"""From candidate terms to the suggested equation: selection on the discovery rows.

The selection starts where a statistician's hand-built model starts — a main effect for every
material variable — and then lets the forest add to it (and the GLM add main effects the forest's
importance test missed): bends, products of numbers, a number's
slope that differs by category level (per level where it lives in some levels only), and
category × category cells. A candidate enters only if it lowers the extended Bayesian information
criterion of the GLM on the discovery rows: BIC (Schwarz 1978) plus 2·log(candidates of its kind)
per entered term (extended BIC with γ = 1, Chen & Chen 2008, Biometrika 95:759-771), so trying many
pairs does not let chance products in. For counts a bend's coefficients cost 2 each (Akaike)
instead of log n (``COUNT_BEND_COST``). A backward pass then removes what later entries made
redundant and, given enough rows, main effects the GLM finds empty (a stand-in for a correlated
variable passes the forest's importance test too), unless a bend or product needs them
(hierarchy) or the user asked for them.

Form complexity is sized to the rows that will estimate the equation: bends and products stop
entering once the design would exceed the coefficient budget those rows support, two hinges on
one variable are offered only with enough rows, and at most one variable of a strongly correlated
cluster may bend.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import log_loss

from ..expr import evaluate
from ..terms import Term, design_columns, resolve_levels
from .context import Context

SELECT_ROWS = {"regression": 20000, "classification": 4000}
#: Two hinges cost one more coefficient than one bend and are easily fitted to noise: offered only
#: when the estimation rows reach this many (common practice: tens of rows per coefficient).
TWO_HINGE_ROWS = 400
#: Per-cell category × category candidates only when the pair has at most this many cells.
MAX_CELLS = 12
#: Counts: the charge per coefficient of a bend (Akaike's 2, instead of BIC's log n; the extended
#: BIC's 2·log(bend candidates) still applies). A bend is offered only for a variable the forest
#: found material and whose curve a line misses, so the discovery rows are asked which form, not
#: whether the variable matters. On overdispersed counts the rows carry little information each
#: (NB2 weights μ/(1 + αμ) stop growing at 1/α) and BIC's log n kept out bends worth about 0.01 of
#: held-out R² (randhie); the noise measured on planted counts is in docs/discovery.md. Gaussian and
#: logistic selection keep BIC's charge.
COUNT_BEND_COST = 2.0


@dataclass
class Candidate:
    key: str
    terms: list[Term]
    pool: str                                            # "main", "bend" or "pair": its extended-BIC family
    conflicts: frozenset[str] = field(default_factory=frozenset)   # at most one chosen per key
    #: Variables whose main effect the candidate needs (hierarchy) and brings in with it when the
    #: model lacks it: a category × category pattern with no margins (its cells cancel along both
    #: categories) has no main effect to enter first.
    brings: tuple[str, ...] = ()


def _columns(terms: list[Term], data: pd.DataFrame, fills: dict, kinds: dict) -> np.ndarray:
    resolved = resolve_levels(terms, data, kinds)
    cols = design_columns(resolved, fills, kinds)
    if not cols:
        return np.empty((len(data), 0))
    return np.column_stack([evaluate(c.node, data) for c in cols])


COUNT_FAMILIES = ("poisson", "negative_binomial")
#: A block direction whose information, once the current design is accounted for, is below this
#: share of the block's own information is taken to lie in the design's span (rounding: the
#: residual information of an exactly collinear column is ~1e-16 of its own in float64).
COLLINEAR = 1e-8


class Criterion:
    """BIC of the GLM with the given design columns: Gaussian, multinomial/binomial logit, or, for
    count outcomes, a negative binomial (log link) whose dispersion is fixed from the main effects.

    Counts: least squares on a skewed count lets its long tail swamp real effects (on a 5,000-row
    sample of the RAND health insurance data it removed three variables the forest rated 9–11
    standard errors above zero), and a Poisson likelihood on overdispersed counts lets noise in.
    The negative binomial NB2 (variance μ + αμ², Cameron & Trivedi 2013, Regression Analysis of
    Count Data, 2nd ed., §3.3) with α estimated once by maximum likelihood on the main-effects
    model (statsmodels ``NegativeBinomial``) and then held fixed judges every term on one scale;
    with α near zero it is the Poisson likelihood.
    """

    def __init__(self, y: np.ndarray, task: str, classes: list[str] | None, family: str | None = None):
        self.task = task
        self.n = len(y)
        self.count = task == "regression" and family in COUNT_FAMILIES
        self.alpha = 0.0                      # NB2 dispersion of the count likelihood (0: Poisson)
        self.alpha_ml: float | None = None    # its two estimates (set_dispersion)
        self.alpha_moment: float | None = None
        if task == "regression":
            self.y = np.asarray(y, dtype=float)
        else:
            self.labels = np.searchsorted(np.asarray(classes, dtype=object), np.asarray(y, dtype=object))
            self.k = len(classes)

    def set_dispersion(self, X: np.ndarray) -> None:
        """Counts: estimate α on the reference (main-effects) model, so every comparison uses one α.

        Maximum likelihood, capped at the moment estimate from the Poisson fit's residuals (the
        auxiliary regression (y − μ)² − y = αμ² + error of Cameron & Trivedi 1990, Journal of
        Econometrics 46:347–364; from memory). On counts the two agree or the cap is above the ML
        estimate (randhie 1.2 by ML, 1.5 by moments; rwm1984 2.2 and 3.0), which is then kept. An
        outcome with more zeros than the NB2 shape allows pushes the ML α up to fit the zeros
        alone: yearly hours of work (26% zeros, mean 1,135) gave 4.0 against 0.43 from the
        residuals, every row then carried almost no information, and the selection dropped the
        slopes the forest ranked high (the equation fell 0.05 R² behind a main-effects Poisson GLM).
        """
        if not self.count:
            return
        import warnings

        import statsmodels.api as sm
        D = self._with_intercept(X)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")   # α at the boundary (Poisson data): the estimate is still usable
            try:
                res = sm.NegativeBinomial(self.y, D).fit(disp=0, maxiter=200)
                alpha = float(np.asarray(res.params)[-1])
            except (np.linalg.LinAlgError, ValueError):
                alpha = 0.0
        self.alpha = 0.0
        mu = self._count_mean(D)              # the Poisson fit (α = 0)
        moment = float(np.sum((self.y - mu) ** 2 - self.y) / np.sum(mu ** 2))
        self.alpha_ml, self.alpha_moment = alpha, moment
        alpha = min(alpha, moment) if np.isfinite(alpha) else moment
        self.alpha = alpha if np.isfinite(alpha) and alpha > 1e-8 else 0.0

    def _with_intercept(self, X: np.ndarray) -> np.ndarray:
        return np.column_stack([np.ones(self.n), X]) if X.size else np.ones((self.n, 1))

    def _count_mean(self, D: np.ndarray) -> np.ndarray:
        import warnings

        import statsmodels.api as sm
        family = (sm.families.NegativeBinomial(alpha=self.alpha) if self.alpha > 0 else sm.families.Poisson())
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")     # near-collinear candidate columns: the fit is still the MLE
            res = sm.GLM(self.y, D, family=family).fit(maxiter=100)
        return np.clip(np.asarray(res.fittedvalues, dtype=float), 1e-10, None)

    def _count_minus_2ll(self, mu: np.ndarray) -> float:
        """−2 log-likelihood of the count fit (Poisson without its constant Σ log y! when α = 0)."""
        y = self.y
        if self.alpha == 0.0:
            return float(-2.0 * np.sum(y * np.log(mu) - mu))
        from scipy.special import gammaln
        r = 1.0 / self.alpha
        ll = gammaln(y + r) - gammaln(r) + r * np.log(r / (r + mu)) + y * np.log(mu / (r + mu))
        return float(-2.0 * np.sum(ll))

    def __call__(self, X: np.ndarray) -> float:
        n = self.n
        D = np.column_stack([np.ones(n), X]) if X.size else np.ones((n, 1))
        if self.count:
            return self._count_minus_2ll(self._count_mean(D)) + D.shape[1] * np.log(n)
        if self.task == "regression":
            coef, *_ = np.linalg.lstsq(D, self.y, rcond=None)
            rss = float(np.sum((self.y - D @ coef) ** 2))
            return n * np.log(max(rss, 1e-300) / n) + D.shape[1] * np.log(n)
        if X.size:
            sd = X.std(axis=0)
            Z = (X - X.mean(axis=0)) / np.where(sd > 0, sd, 1.0)
            model = LogisticRegression(C=np.inf, max_iter=1000).fit(Z, self.labels)
            proba = model.predict_proba(Z)
        else:
            counts = np.bincount(self.labels, minlength=self.k) / n
            proba = np.tile(counts, (n, 1))
        ll = -log_loss(self.labels, proba, labels=np.arange(self.k), normalize=False)
        return -2.0 * ll + D.shape[1] * (self.k - 1) * np.log(n)

    def extended(self, X: np.ndarray, blocks: list[np.ndarray]) -> list[float]:
        """The criterion of ``X`` with each block of columns added, one block at a time.

        Least squares: one QR of the current design, then each block's reduction of the residual
        sum of squares from its part orthogonal to that design (the same numbers as refitting,
        to rounding, at a fraction of the cost). Logit: one fit of the current model, then each
        block's Rao score statistic (Rao 1948), the first-order drop in −2 log-likelihood that
        adding it would bring — the usual device of forward selection in logistic regression.
        """
        if self.task != "regression":
            return self._score_tests(X, blocks)
        if self.count:
            return self._count_score_tests(X, blocks)
        n = self.n
        D = np.column_stack([np.ones(n), X]) if X.size else np.ones((n, 1))
        Q, _ = np.linalg.qr(D)
        resid = self.y - Q @ (Q.T @ self.y)
        rss0 = float(resid @ resid)
        out = []
        for b in blocks:
            R = b - Q @ (Q.T @ b)
            u, sv, _ = np.linalg.svd(R, full_matrices=False)
            keep = sv > 1e-10 * max(1.0, float(sv.max()) if sv.size else 1.0)
            g = u[:, keep].T @ resid
            rss = max(rss0 - float(g @ g), 1e-300)
            out.append(n * np.log(rss / n) + (D.shape[1] + b.shape[1]) * np.log(n))
        return out


    def _count_score_tests(self, X: np.ndarray, blocks: list[np.ndarray]) -> list[float]:
        """Rao score statistic of each block from one fit of the current count model (log link,
        NB2 with α fixed): U = Bᵀ(y − μ)/(1 + αμ), information BᵀWB − BᵀWD(DᵀWD)⁻¹DᵀWB with
        W = μ/(1 + αμ) (Poisson: α = 0).

        Directions of a block that the current design already spans (a product of two indicators
        that never meet, centred, is a sum of its main effects) carry no information: their
        information is rounding noise, and inverting it gave χ² in the hundreds for a column that
        changes nothing fitted (randhie, ``hlthg × hlthf``), and the forward pass took it and then
        judged every removal against that false criterion. Such directions are left out, as the
        least-squares branch leaves them out by its singular values; the block still pays for all
        its columns, so a block with nothing new never enters."""
        D = self._with_intercept(X)
        mu = self._count_mean(D)
        base = self._count_minus_2ll(mu)
        w = mu / (1.0 + self.alpha * mu)
        WD = D * w[:, None]
        inv = np.linalg.pinv(D.T @ WD)
        r = (self.y - mu) / (1.0 + self.alpha * mu)
        out = []
        for b in blocks:
            U = b.T @ r
            cross = WD.T @ b
            own = (b * w[:, None]).T @ b
            info = own - cross.T @ inv @ cross
            lam, vec = np.linalg.eigh((info + info.T) / 2.0)
            keep = lam > COLLINEAR * max(float(np.max(np.diag(own), initial=0.0)), 1e-300)
            proj = vec[:, keep].T @ U
            chi2 = float(np.sum(proj ** 2 / lam[keep]))
            out.append(base - max(chi2, 0.0) + (D.shape[1] + b.shape[1]) * np.log(self.n))
        return out

    def _score_tests(self, X: np.ndarray, blocks: list[np.ndarray]) -> list[float]:
        n, k = self.n, self.k
        D = np.column_stack([np.ones(n), X]) if X.size else np.ones((n, 1))
        if X.size:
            sd = X.std(axis=0)
            Zs = (X - X.mean(axis=0)) / np.where(sd > 0, sd, 1.0)
            proba = LogisticRegression(C=np.inf, max_iter=1000).fit(Zs, self.labels).predict_proba(Zs)
        else:
            proba = np.tile(np.bincount(self.labels, minlength=k) / n, (n, 1))
        ll = -log_loss(self.labels, proba, labels=np.arange(k), normalize=False)
        P = proba[:, 1:]                                  # classes 1..K-1 against class 0
        R = np.eye(k)[self.labels][:, 1:] - P             # score residuals
        W = -P[:, :, None] * P[:, None, :]
        idx = np.arange(k - 1)
        W[:, idx, idx] += P

        def info(A, B):
            m = np.einsum("ia,ib,ikl->kalb", A, B, W, optimize=True)
            return m.reshape(A.shape[1] * (k - 1), B.shape[1] * (k - 1))

        Idd = info(D, D)
        Idd_inv = np.linalg.pinv(Idd)
        out = []
        for b in blocks:
            U = (b.T @ R).T.reshape(-1)                   # class-major, as info() orders
            Idz = info(D, b)
            Izz = info(b, b) - Idz.T @ Idd_inv @ Idz
            chi2 = float(U @ np.linalg.pinv(Izz) @ U)
            out.append(-2.0 * ll - max(chi2, 0.0) + (D.shape[1] + b.shape[1]) * (k - 1) * np.log(n))
        return out


@dataclass
class Selection:
    terms: list[Term]
    log: list[dict]
    gains: dict[str, float]
    rows: int
    not_chosen: list[str]
    removed_main_effects: list[str]
    #: Pairs tried by the GLM alone (not measured by H²), recorded with the searched pairs.
    screened_pairs: list[dict] = field(default_factory=list)
    #: Counts: what a bend's coefficient costs instead of log n (None: BIC's log n for every term).
    bend_cost: float | None = None
    #: Counts: the NB2 dispersion the criterion used, with its ML and moment estimates (set_dispersion).
    dispersion: dict | None = None

    def to_dict(self) -> dict:
        return {"rows": self.rows, "steps": self.log, "not_chosen": self.not_chosen,
                "removed_main_effects": self.removed_main_effects,
                **({} if self.dispersion is None else {"count_dispersion": self.dispersion}),
                "rule": ("forward selection from the material main effects: a bend or product enters when it lowers "
                         "the extended BIC (BIC + 2 log(candidates of its kind), Chen & Chen 2008) of the GLM on the "
                         "discovery rows, within the coefficient budget of the estimation rows; then a backward pass "
                         "removes terms (main effects too, keeping hierarchy and requests) whose removal lowers it"
                         + ("" if self.bend_cost is None else
                            f"; count outcome: a bend's coefficients cost {self.bend_cost:g} each instead of "
                            "log(rows)"))}


def select_terms(ctx: Context, material: list[str], requested: set[str], shapes: dict,
                 pairs: list[dict], ranked: list[str] | None = None, weak: set[str] = frozenset()) -> Selection:
    """``ranked``: every feature, strongest out-of-bag importance first (orders the main effects
    the forest did not single out)."""
    n = len(ctx.frame)
    rows = np.sort(ctx.rng(29).permutation(n)[:min(n, SELECT_ROWS[ctx.task])])
    data = ctx.frame.iloc[rows].reset_index(drop=True)
    y = np.asarray(ctx.y)[rows]
    kinds = ctx.kinds
    # Requested variables first, then by importance; a term cap keeps the front of this list.
    order = sorted(material, key=lambda v: (v not in requested, material.index(v)))
    if ctx.requests.max_terms is not None:
        order = order[:ctx.requests.max_terms]
    ranked = ranked or [f.name for f in ctx.features]
    others = [v for v in ranked if v not in material and v not in ctx.requests.drop]
    if ctx.requests.max_terms is not None:
        others = []
    if not ctx.glm_checks_main_effects:
        # Small tables: every main effect, as a hand-built model would have them; the estimation
        # is penalised where the rows are short, rather than the weak variables being guessed away.
        order, others = order + others, []
    base = [Term("linear" if kinds[v] == "numeric" else "categorical", [v], evidence={"reason": "main effect"})
            for v in order]
    cell_pairs = _unsearched_category_pairs(ctx, order, others, pairs)
    screened = [{"variables": [a, b], "kind": "categorical×categorical", "h2": None, "strength": None,
                 "rows": len(rows), "kept": False, "searched_by": "discovery-row GLM"} for a, b in cell_pairs]
    candidates = (_main_candidates(ctx, others) + _bend_candidates(ctx, [v for v in order if v in material], shapes)
                  + _pair_candidates(ctx, order, pairs) + _pair_candidates(ctx, order + others, screened, bring=True))
    sel = _forward_backward(ctx, base, candidates, data, y, requested, len(rows), weak)
    sel.screened_pairs = screened
    return sel


def _unsearched_category_pairs(ctx: Context, order: list[str], others: list[str], pairs: list[dict]) -> list[tuple[str, str]]:
    """Category × category pairs the H² search did not measure, to be tried by the GLM directly.

    A pattern such as a crossover (the cells cancel along both categories) gives neither category
    a main effect, and a greedy tree finds no first split on either, so the forest's importance
    and H² can miss it at any size. The GLM on all discovery rows sees it with power that grows
    with the rows; the extended BIC counts these candidates in the pair family.
    """
    kinds = ctx.kinds
    cats = [v for v in order + others if kinds[v] == "categorical"]
    measured = {frozenset(rec["variables"]) for rec in pairs}
    out = []
    for i, a in enumerate(cats):
        for b in cats[i + 1:]:
            if frozenset((a, b)) in measured:
                continue
            if len(_levels(ctx.frame, a)) * len(_levels(ctx.frame, b)) <= MAX_CELLS:
                out.append((a, b))
    return out


def _main_candidates(ctx: Context, variables: list[str]) -> list[Candidate]:
    """Main effects of the variables the forest did not single out: a slope or level effect too
    small for permutation importance can still be plain to a GLM on all discovery rows (a 1%
    linear effect on 2,500 rows gives a likelihood-ratio statistic near 30)."""
    kinds = ctx.kinds
    return [Candidate(f"main effect:{v}", [Term("linear" if kinds[v] == "numeric" else "categorical", [v],
                                                evidence={"reason": "main effect (not material; the discovery-row GLM "
                                                                    "found it)"})], "main")
            for v in variables]


def _bend_candidates(ctx: Context, order: list[str], shapes: dict) -> list[Candidate]:
    """Every bend form a curve supports; the discovery rows pick at most one per variable, and at
    most one variable per cluster of strongly correlated numbers."""
    cluster_of = {v: f"bend-cluster:{i}" for i, c in enumerate(ctx.correlated_clusters(order)) for v in c}
    rows = ctx.requests.estimation_rows
    out = []
    for v in order:
        sh = shapes[v]
        if sh["kind"] != "numeric" or not sh.get("bend_put_forward"):
            continue
        conflicts = frozenset({f"bend:{v}"} | ({cluster_of[v]} if v in cluster_of else set()))
        for kind, info in sh["forms"].items():
            if kind == "linear" or (kind == "two_hinges" and rows is not None and rows < TWO_HINGE_ROWS):
                continue
            ev = {"reason": "bend", "curve": sh["curve_used"], "share_missed_by_line": sh["share_missed_by_line"],
                  "form": kind, "form_r2": info["r2"], "best_form_on_curve": sh["best_bend"]}
            if kind == "quadratic":
                ts = [Term("quadratic", [v], {"centre": round(sh["centre"], 6)}, ev)]
            elif kind == "log":
                ts = [Term("log", [v], {"floor": info["floor"]}, ev)]
            else:
                ts = [Term("hinge", [v], {"knot": float(f"{k:.6g}"), "direction": "above"}, dict(ev))
                      for k in info["knots"]]
            out.append(Candidate(f"bend ({kind}):{v}", ts, "bend", conflicts))
    return out


def _pair_candidates(ctx: Context, order: list[str], pairs: list[dict], bring: bool = False) -> list[Candidate]:
    """Products for every searched pair whose variables keep their main effects (hierarchy);
    with ``bring``, a pair whose main effects are not in the model brings them in with it."""
    kinds, fills = ctx.kinds, ctx.fills
    out = []
    for rec in pairs:
        a, b = rec["variables"]
        if not {a, b} <= set(order):
            continue
        ev = {"reason": "interaction", "h2": rec["h2"], "strength": rec["strength"]}
        if rec.get("searched_by"):
            ev["searched_by"] = rec["searched_by"]
        group = frozenset({f"pair:{a}*{b}"})
        brings = (a, b) if bring else ()
        if kinds[a] == kinds[b] == "numeric":
            centres = {v: round(float(pd.to_numeric(ctx.frame[v], errors="coerce").fillna(fills[v]).mean()), 6)
                       for v in (a, b)}
            plain = Term("interaction", [a, b], {"centres": centres, "power": 1}, ev)
            out.append(Candidate(f"product:{a}*{b}", [plain], "pair", group))
            prod = rec.get("product")
            if prod and prod["bends"]:
                for name, r2 in prod["r2_product_squared"].items():
                    c = centres if name == "mean" else {a: 0.0, b: 0.0}
                    ev2 = {**ev, "reason": "bend in the interaction", "r2_product": prod["r2_product"],
                           "r2_with_square": r2, "centring": name}
                    # The squared product brings its plain product (hierarchy), so both enter together.
                    out.append(Candidate(f"product with bend ({name}):{a}*{b}",
                                         [Term("interaction", [a, b], {"centres": centres, "power": 1}, dict(ev)),
                                          Term("interaction", [a, b], {"centres": c, "power": 2}, ev2)],
                                         "pair", group))
            continue
        # A number times a category's indicators is left uncentred: with both main effects in the
        # model centring changes nothing fitted, and the plain product keeps treatment coding.
        out.append(Candidate(f"product:{a}*{b}", [Term("interaction", [a, b], {"centres": {}, "power": 1}, ev)],
                             "pair", group, brings))
        cats = [v for v in (a, b) if kinds[v] == "categorical"]
        levels = {v: _levels(ctx.frame, v) for v in cats}
        if len(cats) == 1:
            # The slope of the number in one level only (the others share the main-effect slope).
            for lv in levels[cats[0]]:
                out.append(Candidate(f"product:{a}*{b}[{lv}]",
                                     [Term("interaction", [a, b], {"centres": {}, "power": 1,
                                                                   "subset": {cats[0]: [lv]}}, dict(ev))],
                                     "pair", group, brings))
        elif len(levels[a]) * len(levels[b]) <= MAX_CELLS:
            for la in levels[a]:
                for lb in levels[b]:
                    out.append(Candidate(f"product:{a}*{b}[{la},{lb}]",
                                         [Term("interaction", [a, b], {"centres": {}, "power": 1,
                                                                       "subset": {a: [la], b: [lb]}}, dict(ev))],
                                         "pair", group, brings))
    return out


def _levels(frame: pd.DataFrame, var: str) -> list[str]:
    """Non-reference levels (reference = most common, as the equation codes it)."""
    counts = frame[var].fillna("").astype(str).value_counts()
    order = sorted(counts.index, key=lambda lv: (-counts[lv], lv))
    return sorted(order[1:])


def _forward_backward(ctx: Context, base: list[Term], candidates: list[Candidate], data: pd.DataFrame,
                      y: np.ndarray, requested: set[str], n_rows: int, weak: set[str] = frozenset()) -> Selection:
    kinds, fills = ctx.kinds, ctx.fills
    crit = Criterion(y, ctx.task, ctx.classes, ctx.requests.family)
    pools = {p: sum(c.pool == p for c in candidates) for p in ("main", "bend", "pair")}
    weak_base = {i for i, t in enumerate(base) if t.variables[0] in weak} if ctx.glm_checks_main_effects else set()
    pools["main"] += len(weak_base)
    extra = {p: 2.0 * np.log(max(1, k)) for p, k in pools.items()}     # extended BIC, γ = 1
    base_cols = [_columns([t], data, fills, kinds) for t in base]
    cols = {c.key: _columns(c.terms, data, fills, kinds) for c in candidates}
    budget = ctx.requests.budget
    max_terms = ctx.requests.max_terms
    by_key = {c.key: c for c in candidates}
    main_key = {c.terms[0].variables[0]: c.key for c in candidates if c.pool == "main"}   # variable → its candidate

    def design(mains: list[int], chosen: list[str]) -> np.ndarray:
        blocks = [base_cols[i] for i in mains] + [cols[k] for k in chosen]
        return np.column_stack(blocks) if blocks else np.empty((len(y), 0))

    def present(mains: list[int], chosen: list[str]) -> set[str]:
        """Variables whose main effect is in the model (base or entered as a candidate)."""
        return ({base[i].variables[0] for i in mains}
                | {by_key[k].terms[0].variables[0] for k in chosen if by_key[k].pool == "main"})

    def missing(c: Candidate, have: set[str]) -> list[str]:
        """Main-effect candidates ``c`` brings in with it (hierarchy)."""
        return [main_key[v] for v in c.brings if v not in have]

    def with_mains(c: Candidate, have: set[str]) -> np.ndarray:
        extra_cols = [cols[k] for k in missing(c, have)]
        return np.column_stack([cols[c.key], *extra_cols]) if extra_cols else cols[c.key]

    # counts: what a bend's coefficients are spared of BIC's log n (COUNT_BEND_COST)
    relief = max(0.0, np.log(len(y)) - COUNT_BEND_COST) if crit.count else 0.0

    def spared(keys: list[str]) -> float:
        return relief * sum(cols[k].shape[1] for k in keys if by_key[k].pool == "bend")

    def penalised(mains: list[int], chosen: list[str]) -> float:
        return (crit(design(mains, chosen)) + sum(extra[by_key[k].pool] for k in chosen)
                + extra["main"] * sum(i in weak_base for i in mains) - spared(chosen))

    mains = list(range(len(base)))
    chosen: list[str] = []
    crit.set_dispersion(design(mains, chosen))
    score = penalised(mains, chosen)
    log = [{"step": 0, "added": "main effects", "criterion": float(score)}]
    gains: dict[str, float] = {}
    refused: set[str] = set()      # counts: candidates whose refit did not bear out their score statistic
    while True:
        width = design(mains, chosen).shape[1]
        n_terms = len(mains) + sum(len(by_key[k].terms) for k in chosen)
        taken = set().union(*(by_key[k].conflicts for k in chosen)) if chosen else set()
        have = present(mains, chosen)
        best, best_score = None, score
        blocks = {c.key: with_mains(c, have) for c in candidates if c.key not in chosen}
        open_ = [c for c in candidates
                 if c.key not in chosen and c.key not in refused and not (c.conflicts & taken)
                 and (budget is None or width + blocks[c.key].shape[1] <= budget)
                 and (max_terms is None or n_terms + len(c.terms) + len(missing(c, have)) <= max_terms)]
        current = design(mains, chosen)
        fixed = (sum(extra[by_key[k].pool] for k in chosen) + extra["main"] * sum(i in weak_base for i in mains)
                 - spared(chosen))
        for c, value in zip(open_, crit.extended(current, [blocks[c.key] for c in open_])):
            s = value + fixed + extra[c.pool] + extra["main"] * len(missing(c, have)) - spared([c.key])
            if s < best_score - 1e-9:
                best, best_score = c, s
        if best is None:
            break
        brought = missing(best, have)
        if crit.count:
            # The score statistic is a first-order guess of the likelihood-ratio drop; far from the
            # current model (a strong bend) it can overstate it many times over, and every later
            # comparison, the backward pass's included, would then be made against a criterion no
            # model reaches (planted counts, 5,000 rows: a noise column stayed in 12 of 20 runs,
            # 1 of 20 after). The chosen model is refitted and its own criterion kept; a candidate
            # that does not lower it is set aside until the model changes.
            real = penalised(mains, chosen + brought + [best.key])
            if real >= score - 1e-9:
                refused.add(best.key)
                continue
            best_score = real
            refused = set()
        for k in brought:
            by_key[k].terms[0].evidence["reason"] = f"main effect (brought in by {best.key}: hierarchy)"
        gains[best.key] = float(score - best_score)
        chosen.extend(brought + [best.key])
        score = best_score
        log.append({"step": len(log), "added": best.key, "criterion": float(score), "drop": gains[best.key],
                    **({"with_main_effects": [by_key[k].terms[0].variables[0] for k in brought]} if brought else {})})
    # Backward: a candidate chosen early may be made redundant by a later one, and a main effect
    # may add nothing once the forest's terms are in (a correlated proxy, say). The weakest
    # removable term leaves first, one at a time (backward elimination).
    removed_mains: list[str] = []
    while True:
        needed = {v for k in chosen for t in by_key[k].terms for v in t.variables}
        options = [("term", k) for k in chosen] + [("main", i) for i in mains
                                                   if base[i].variables[0] not in needed | requested
                                                   and _removable(ctx)]
        best = None
        for what, item in options:
            m2 = [i for i in mains if not (what == "main" and i == item)]
            c2 = [k for k in chosen if not (what == "term" and k == item)]
            # hierarchy: every bend and product keeps the main effects of its variables
            have = present(m2, c2)
            if any(v not in have for k in c2 if by_key[k].pool != "main"
                   for t in by_key[k].terms for v in t.variables):
                continue
            s = penalised(m2, c2)
            margin = s - score
            if margin < -1e-9 and (best is None or margin < best[0]):
                best = (margin, what, item, m2, c2, s)
        if best is None:
            break
        margin, what, item, m2, c2, s = best
        name = item if what == "term" else f"main effect:{base[item].variables[0]}"
        log.append({"step": len(log), "removed": name, "criterion": float(s), "drop": float(score - s)})
        if what == "main":
            removed_mains.append(base[item].variables[0])
        gains.pop(item if what == "term" else "", None)
        mains, chosen, score = m2, c2, s
    if not mains and not chosen and base:   # keep one slope: the strongest variable
        mains = [0]
        removed_mains = [v for v in removed_mains if v != base[0].variables[0]]
    terms = [base[i] for i in mains]
    for key in chosen:
        terms += by_key[key].terms
    for key, gain in gains.items():
        for t in by_key[key].terms:
            t.evidence["criterion_drop_on_entry"] = gain
    left = [c.key for c in candidates if c.key not in chosen]
    dispersion = ({"alpha": crit.alpha, "maximum_likelihood": crit.alpha_ml, "moment": crit.alpha_moment,
                   "rule": "the smaller (Criterion.set_dispersion)"} if crit.count else None)
    return Selection(terms, log, gains, n_rows, left, removed_mains, bend_cost=COUNT_BEND_COST if crit.count else None,
                     dispersion=dispersion)


def _removable(ctx: Context) -> bool:
    """May material main effects leave? Only with enough discovery rows (context.GLM_CHECK_ROWS)."""
    return ctx.glm_checks_main_effects


def removal_reason(ctx: Context, var: str, kept: list[str]) -> str:
    """Why a main effect left, for the note: the kept variable it stood in for, if any."""
    rho = ctx.rank_correlation
    if var in rho.index:
        others = [v for v in kept if v != var and v in rho.index]
        if others:
            best = max(others, key=lambda v: rho.loc[var, v])
            if rho.loc[var, best] >= 0.5:
                return f"{var} (|Spearman| {rho.loc[var, best]:.2f} with {best}, which stays)"
    return var


def drop_one(terms: list[Term], data: pd.DataFrame, y: np.ndarray, *, task: str, classes: list[str] | None,
             fills: dict, kinds: dict, family: str | None = None) -> list[float]:
    """BIC increase when each term alone is removed from the final model (its marginal worth)."""
    crit = Criterion(y, task, classes, family)
    blocks = [_columns([t], data, fills, kinds) for t in terms]
    crit.set_dispersion(np.column_stack(blocks) if blocks else np.empty((len(y), 0)))
    full = crit(np.column_stack(blocks)) if blocks else crit(np.empty((len(y), 0)))
    out = []
    for i in range(len(terms)):
        rest = [b for j, b in enumerate(blocks) if j != i]
        X = np.column_stack(rest) if rest else np.empty((len(y), 0))
        out.append(float(crit(X) - full))
    return out
