"""report.html: one self-contained page a researcher can attach to a paper or send to a colleague.

Everything is inline (CSS, SVG figures, MathML): the page opens offline, refers to no web
address, runs no script, and prints. Numbers come from the manifest, so what the page says is
exactly what the bundle saved; figures that need the fitted objects (partial dependence, the
tree) are drawn from the Distillation. Each section is drawn from what exists and says so when
a piece is absent, rather than failing.
"""
from __future__ import annotations

import html
import importlib.util
import json
import sys

import numpy as np

from . import plots
from .mathml import equation_blocks
from .palette import CSS_VARIABLES
from ..scoring.bundle_io import equation_absent, models_of
from .snippets import collaborator_snippets
from .shapes import material_variables, shape_curves

CAUTIONS = [
    "The forest and its two surrogates point to patterns worth testing; they do not establish "
    "them. Confirm what they suggest in new data, collected for the purpose.",
    "Do not use the equation outside the training range of its inputs: powers and hinges "
    "extrapolate badly. <code>pocketforest score</code> counts, for every row, the inputs that "
    "fall outside that range (column <code>inputs_outside_training</code>), and "
    "<code>pocketforest compare</code> reports the share of such rows.",
    "Where predictions affect people (health, credit, hiring, education, safety) they are decision "
    "support only: validate them on the population concerned, and follow local regulation and "
    "licensed professional judgement.",
    "Permutation importance is shared out among correlated columns, and can be inflated for them, "
    "so a low score does not prove a column irrelevant (Strobl et al. 2008; Hooker, Mentch &amp; "
    "Zhou 2021).",
    "Partial dependence averages over the other columns as if they could vary freely; when columns "
    "are strongly related the curves describe combinations the data never contain (Apley &amp; Zhu 2020).",
]

SECTIONS = [("data", "Data and splits"), ("scoreboard", "How good is each model"),
            ("importance", "Which variables matter"), ("shapes", "Shapes: forest and equation"),
            ("interactions", "Interactions"), ("equation", "The equation"), ("tree", "The surrogate tree"),
            ("tree-size", "Tree size and fidelity"), ("elsewhere", "Scoring the bundle elsewhere"),
            ("cautions", "Cautions")]

_STYLE = CSS_VARIABLES + """
*{box-sizing:border-box}
body{font-family:Georgia,'Iowan Old Style','Palatino Linotype',serif;max-width:66rem;margin:0 auto;padding:1.5rem 1.2rem 3rem;color:var(--ink);background:var(--paper);line-height:1.45}
header{border-bottom:3px double var(--green);padding-bottom:.6rem;margin-bottom:1rem}
h1{font-size:1.65rem;margin:.2rem 0;color:var(--deep)}
.meta{font-size:.85rem;color:#5a5a48}
h2{font-size:1.22rem;color:var(--deep);margin:2.2rem 0 .5rem;padding-top:.4rem;border-top:1px solid var(--rule)}
h2 .n{display:inline-block;min-width:1.6rem;color:var(--ochre)}
h3{font-size:1rem;margin:1rem 0 .3rem}
nav ol{columns:2;font-size:.9rem;margin:.4rem 0;padding-left:1.4rem}
nav a{color:var(--deep)}
table{border-collapse:collapse;margin:.5rem 0;font-size:.88rem;font-variant-numeric:tabular-nums}
td,th{border-bottom:1px solid var(--rule);padding:.22rem .6rem;text-align:right;vertical-align:top}
th{background:#ebe6d3;font-weight:600}
td:first-child,th:first-child{text-align:left}
td.l,th.l{text-align:left}
pre{background:var(--panel);border-left:3px solid var(--ochre);padding:.55rem .7rem;overflow-x:auto;font-size:.8rem;line-height:1.35}
code{font-size:.88em;background:var(--panel);padding:0 .2em}
pre code{background:none;padding:0}
pre.wrap{white-space:pre-wrap;overflow-wrap:anywhere}
.cards{display:flex;flex-wrap:wrap;gap:.7rem;margin:.8rem 0}
.card{flex:1 1 12rem;background:var(--panel);border-top:4px solid var(--green);padding:.5rem .8rem}
.card.tree{border-color:var(--ochre)}.card.equation{border-color:var(--slate)}
.card .big{font-size:1.5rem;font-weight:600}
.card .small{font-size:.8rem;color:#5a5a48}
.grid{display:flex;flex-wrap:wrap;gap:.8rem}
.panel{flex:0 1 20.5rem;background:#fffef9;border:1px solid var(--rule);padding:.4rem .5rem}
.panel p{font-size:.8rem;margin:.2rem 0}
figure{margin:.6rem 0}
figcaption{font-size:.82rem;color:#4d4d3d;max-width:48rem}
svg{max-width:100%;height:auto}
.note,.warn{font-size:.9rem}
.warn li{color:#7a4a12}
.absent{color:#6b6b58;font-style:italic}
table.eqn td{border:none;padding:.05rem .3rem;text-align:left;font-size:1rem}
table.eqn td.lhs{text-align:right}
math{font-size:1.02rem}
.cautions li{margin:.35rem 0}
.cautions{background:#f7efdc;border:1px solid #e0cfa3;padding:.6rem 1rem .6rem 2rem}
@media print{body{background:#fff;max-width:none;padding:0}nav{display:none}
 h2{break-after:avoid}figure,.panel,table,pre{break-inside:avoid}.panel{flex-basis:48%}}
"""


def _e(x) -> str:
    return html.escape(str(x))


def _num(v, digits: int = 4) -> str:
    if v is None:
        return "–"
    if isinstance(v, float):
        if not np.isfinite(v):
            return "–"
        return f"{v:.{digits}g}"
    return _e(v)


def _is_number(v) -> bool:
    if isinstance(v, (int, float)) or v is None:
        return True
    text = str(v).strip().lstrip("+-").rstrip("%")
    return text.replace(".", "", 1).replace("e-", "", 1).replace("e+", "", 1).isdigit()


def _table(head: list[str], rows: list[list]) -> str:
    """Numbers right-aligned, text left-aligned, decided per column."""
    width = len(head)
    text_col = [not all(_is_number(r[i]) for r in rows) or i == 0 for i in range(width)]
    cls = lambda i: " class=l" if text_col[i] else ""  # noqa: E731
    h = "".join(f"<th{cls(i)}>{_e(c)}</th>" for i, c in enumerate(head))
    body = "".join("<tr>" + "".join(f"<td{cls(i)}>{_num(c) if isinstance(c, float) or c is None else _e(c)}</td>"
                                    for i, c in enumerate(r)) + "</tr>" for r in rows)
    return f"<table><thead><tr>{h}</tr></thead><tbody>{body}</tbody></table>"


def _section(i: int, key: str, title: str, body: str) -> str:
    return f"<section id='{key}'><h2><span class='n'>{i}</span>{_e(title)}</h2>{body}</section>"


def _figure(svg: str, caption: str) -> str:
    return f"<figure>{svg}<figcaption>{caption}</figcaption></figure>"


def _absent(text: str) -> str:
    return f"<p class='absent'>{_e(text)}</p>"


# ---------------------------------------------------------------- sections

def _data(r, m: dict) -> str:
    src = m.get("source", {})
    parts = [f"<p>Source <code>{_e(src.get('file', '?'))}</code>: {src.get('rows_used', '?')} rows used"
             + (f", {src['rows_dropped_missing_target']} dropped because the target was missing"
                if src.get("rows_dropped_missing_target") else "") + ". "
             f"Target <code>{_e(m['target'])}</code>, a {_e(m['task'])} task"
             + (f" with classes {', '.join(_e(c) for c in m['classes'])}" if m.get("classes") else "") + ".</p>"]
    roles = {"discovery": "fits the forest, ranks variables, chooses the terms, grows the tree",
             "confirmation": "estimates and tests the equation; picks the tree size",
             "test": "judges every model: nothing was fitted on these rows"}
    total = sum(m["splits"].values())
    parts.append(_table(["part", "rows", "share", "what it is used for"],
                        [[k, v, f"{v / total:.0%}", roles.get(k, "")] for k, v in m["splits"].items()]))
    rows = []
    for f in m["features"]:
        if f["kind"] == "numeric":
            span = f"{_num(f.get('min'))} to {_num(f.get('max'))}"
        else:
            cats = f.get("categories") or []
            span = ", ".join(cats[:6]) + (f" … ({len(cats)} levels)" if len(cats) > 6 else "")
        rows.append([f["name"], f["kind"], f"{f['missing']:.1%}", span])
    parts.append("<h3>Columns the models use</h3>")
    parts.append(_table(["column", "kind", "missing", "range or levels"], rows))
    dropped = src.get("dropped_columns") or {}
    if dropped:
        parts.append("<p class='note'>Left out: " + "; ".join(f"<code>{_e(k)}</code> ({_e(v)})" for k, v in dropped.items()) + ".</p>")
    warn = m.get("warnings") or []
    if warn:
        parts.append("<h3>Warnings</h3><ul class='warn'>" + "".join(f"<li>{_e(w)}</li>" for w in warn) + "</ul>")
    if m.get("sample"):
        parts.append(_sample(m))
    oob = m["forest"].get("oob") or {}
    parts.append(f"<p>Forest: {m['forest']['trees']} trees; out-of-bag "
                 + ", ".join(f"{_e(k)} {_num(v)}" for k, v in oob.items()) + ".</p>")
    return "".join(parts)


def _sample(m: dict) -> str:
    """`distill --sample`: the design, and the bundle checked on rows the sample left out."""
    sm = m["sample"]
    st = sm.get("strata") or {}
    parts = [f"<h3>Sample</h3><p>These models were fitted on a seeded sample of {sm['sample_rows']:,} of the "
             f"{sm['rows_with_target']:,} rows with a target ({sm['rows_in_data']:,} rows in the data), stratified on "
             f"<code>{_e(st.get('on', ''))}</code> ({_e(st.get('kind', ''))}) with every category level kept"
             + (f"; {sm['rows_topped_up']} rows were added so that rare levels are present" if sm.get("rows_topped_up")
                else "") + ". The splits below divide the sample.</p>"]
    chk = sm.get("self_check") or {}
    if chk.get("evaluation"):
        ev = chk["evaluation"]
        names = list(ev["forest"])
        parts.append(f"<p>Checked on {ev['n']:,} other rows, a seeded random sample of the rows the sample left "
                     "out (computed as <code>pocketforest compare</code> computes it):</p>")
        parts.append(_table(["model"] + names, [[mdl] + [ev[mdl].get(k) for k in names]
                                                for mdl in models_of(m)]))
        parts.append(_table(["surrogate", "loss", "95% interval"],
                            [[mdl, f"{lo['value']:+.4f}", f"{lo['ci_low']:+.4f} to {lo['ci_high']:+.4f}"]
                             for mdl, lo in chk["loss"].items()]))
    return "".join(parts)


def _cv_interval_text(loss: dict) -> str:
    """What the small-data loss intervals are about, read from how they were computed."""
    nested = [lo["nested"] for lo in loss.values() if "nested" in lo]
    own = [lo["bundle_models"] for lo in loss.values() if "bundle_models" in lo]
    if nested:
        nv = nested[0]
        text = ("The cross-validated loss intervals come from nested cross-validation (Bates, Hastie &amp; Tibshirani "
                f"2024): {nv['repeats']} repeats of {nv['folds']} folds, {nv['fits']} more refits of the whole "
                "pipeline. They are about the expected loss of this modelling procedure on tables of this size; the "
                "other metrics' intervals are a bootstrap over the held-out rows.")
    else:
        text = ("The cross-validated loss intervals describe the expected loss of this modelling procedure on tables "
                "of this size, which is what cross-validation estimates (Bates, Hastie &amp; Tibshirani 2024). They "
                "hold the fold refits fixed, so they are narrower than the uncertainty about these particular "
                "models.")
    if own:
        text += (f" What <i>these</i> models give up is judged on the {own[0]['rows']} confirmation rows, which "
                 "chose nothing: the forest and the tree as exported, the equation's terms re-estimated without "
                 "each tenth of those rows (nested cross-validation over those refits gives its interval). "
                 "Those are the figures to quote for the bundle.")
    return text


def _scoreboard(m: dict) -> str:
    ev = m["evaluation"]
    names = [k for k in ev["forest"]]
    key = m["loss"]["tree"]["metric"]
    cards = []
    for mdl in models_of(m):
        extra = ("out-of-bag " + ", ".join(f"{k} {_num(v, 3)}" for k, v in (m["forest"].get("oob") or {}).items())
                 if mdl == "forest" else
                 "fidelity " + ", ".join(f"{k} {_num(v, 3)}" for k, v in m["fidelity"][mdl].items()))
        where = "cross-validated" if ev.get("on") == "cross-validation" else "test"
        cards.append(f"<div class='card {mdl}'><div class='small'>{mdl} · {where} {key}</div>"
                     f"<div class='big'>{_num(ev[mdl].get(key), 3)}</div><div class='small'>{_e(extra)}</div></div>")
    parts = ["<div class='cards'>" + "".join(cards) + "</div>"]
    n = ev.get("n", m["splits"].get("test"))
    cv = ev.get("on") == "cross-validation"
    if cv:
        parts.append((f"<p><b>Plan:</b> {_e((m.get('plan') or {}).get('reason', ''))}. Every figure comes from "
                     f"{_e(ev.get('repeats'))} repeats of {_e(ev.get('folds'))}-fold cross-validation of the whole "
                     "pipeline on all {n} rows: forest, discovery, equation and tree were refitted in every fold "
                     "without that fold's rows (Harrell, Lee &amp; Mark 1996; Steyerberg 2019). The bundle holds the "
                     "models fitted once (the forest, the tree and the equation's terms on the discovery rows, the "
                     "equation's exported coefficients on all rows); the refits only judge them. The apparent figures (those models "
                     "on the rows they were fitted on) are shown below; the gap is their optimism. "
                     + _cv_interval_text(m["loss"]) + "</p>").replace("{n}", str(n)))
    else:
        parts.append(f"<p>All figures on the {n} test rows, which no model saw while it was fitted.</p>")
    parts.append(_table(["model"] + names, [[mdl] + [ev[mdl].get(k) for k in names] for mdl in models_of(m)]))
    if cv and ev.get("apparent"):
        parts.append("<p class='note'>Apparent (optimistic) figures:</p>"
                     + _table(["model"] + names, [[mdl] + [ev["apparent"][mdl].get(k) for k in names]
                                                  for mdl in models_of(m)]))
    if equation_absent(m):
        parts.append(_absent("There is no equation to score (see “The equation”): only the forest and the tree "
                             "are judged."))
    rows = []
    own = all("bundle_models" in m["loss"][mdl] for mdl in models_of(m)[1:])
    for mdl in models_of(m)[1:]:
        lo = m["loss"][mdl]
        fid = ", ".join(f"{k} {_num(v, 3)}" for k, v in m["fidelity"][mdl].items())
        rows.append([mdl, fid, f"{lo['value']:+.4f}", f"{lo['ci_low']:+.4f} to {lo['ci_high']:+.4f}"])
        if own:
            b = lo["bundle_models"]
            rows[-1] += [f"{b['value']:+.4f}", f"{b['ci_low']:+.4f} to {b['ci_high']:+.4f}"]
    head = ["surrogate", "fidelity to the forest", f"loss in {key}", "95% interval"]
    if own:
        head = head[:2] + [f"loss in {key}, the procedure (cross-validated)", "95% interval",
                           f"loss in {key}, these models ({m['loss']['tree']['bundle_models']['rows']} confirmation rows)",
                           "95% interval"]
    parts.append(_table(head, rows))
    parts.append(_figure(plots.loss_plot(m["loss"]),
                         (f"Loss = forest {key} − surrogate {key} on the held-out rows of the cross-validation; "
                          "the bar is the nested cross-validation interval. An interval that touches zero means "
                          "these rows cannot tell the surrogate from the forest."
                          if any("nested" in lo for lo in m["loss"].values()) else
                          f"Loss = forest {key} − surrogate {key} on the {'held-out' if cv else 'test'} rows; the bar "
                          f"is a paired percentile bootstrap interval over those rows (Efron &amp; Tibshirani 1993). "
                          "An interval that touches zero means these rows cannot tell the surrogate from the forest.")))
    return "".join(parts)


def _importance(m: dict) -> str:
    imp = m.get("importance") or []
    if not imp:
        return _absent("No importance was recorded in this bundle.")
    metric = m.get("importance_metric", "error")
    fig = plots.importance_plot(imp, metric)
    caption = ("Out-of-bag permutation importance (Breiman 2001): for each tree, the error on the rows its "
               "bootstrap left out, before and after shuffling one raw column. Bars are means over trees; "
               "whiskers ±1.96 standard errors." + (" Only the top 20 are drawn." if len(imp) > 20 else ""))
    return (_figure(fig, caption) + _table(["variable", "importance", "standard error"],
                                           [[i["feature"], i["mean"], i["se"]] for i in imp])
            + _screening((m.get("discovery") or {}).get("materiality") or {}))


def _screening(mat: dict) -> str:
    """The importance test per variable and the clusters of strongly correlated columns, from the
    typed records discovery keeps in the manifest (``discovery.materiality``): the detail behind
    the notes, in columns, never read from a note's wording."""
    variables = mat.get("variables") or {}
    if not variables:
        return ""
    rows = [[name, ev.get("oob_importance"), ev.get("oob_se"), ev.get("z"), _yes_no(ev.get("passed")),
             _yes_no(ev.get("requested")), ev.get("decision", "–")] for name, ev in variables.items()]
    rule = mat.get("rule")
    parts = ["<h3>Is each variable's importance more than noise?</h3>",
             (f"<p>Rule: {_e(rule)}.</p>" if isinstance(rule, str) and rule else ""),
             _table(["variable", "importance", "standard error", "z", "passed", "asked for", "decision"], rows)]
    clusters = mat.get("correlated_clusters") or []
    if clusters:
        parts += ["<h3>Strongly correlated columns</h3>",
                  "<p>Importance is shared out within each cluster, and partial dependence extrapolates for "
                  "its members, so their shapes come from accumulated local effects.</p>",
                  _table(["cluster", "columns", "largest |Spearman|"],
                         [[str(i + 1), ", ".join(c.get("variables") or []), c.get("max_abs_spearman")]
                          for i, c in enumerate(clusters)])]
    return "".join(parts)


def _term_text(t, var: str) -> str:
    p = t.params
    if t.kind == "linear":
        return "straight line"
    if t.kind == "quadratic":
        return f"bend: squared distance from {p.get('centre', 0):.4g}"
    if t.kind == "hinge":
        return f"hinge at {p.get('knot', 0):.4g} ({p.get('direction', 'above')})"
    if t.kind == "log":
        return "logarithm" + (f", guarded below at {p['floor']:.4g}" if p.get("floor") is not None else "")
    if t.kind == "categorical":
        return "one step per level"
    if t.kind == "interaction":
        others = [v for v in t.variables if v != var]
        return "interaction with " + " and ".join(others) + (" (squared)" if p.get("power") == 2 else "")
    return t.kind


def _shapes(r, m: dict) -> str:
    variables = material_variables(r, m)
    if not variables:
        return _absent("No variable stood out, so no shape is drawn.")
    curves = shape_curves(r, m, variables)
    panels = []
    if equation_absent(m):   # the forest's curves alone
        for s in curves:
            panels.append(f"<div class='panel'>{plots.shape_plot(s)}<p><b>{_e(s['variable'])}</b></p></div>")
        return ("<p>The forest's partial dependence (Friedman 2001): the average prediction with the variable set "
                "to each value. There is no equation to draw beside it (see “The equation”). Ticks on the axis mark "
                "the deciles of the discovery rows.</p><div class='grid'>" + "".join(panels) + "</div>")
    for s in curves:
        terms = "; ".join(_term_text(t, s["variable"]) for t in s["terms"]) or "not in the equation"
        panels.append(f"<div class='panel'>{plots.shape_plot(s)}<p><b>{_e(s['variable'])}</b> — equation: "
                      f"{_e(terms)}.</p></div>")
    src = {s["source"] for s in curves}
    return ("<p>Solid: the forest's partial dependence (Friedman 2001), the average prediction with the "
            "variable set to each value. Dashed or hollow: the same average for the equation, from its "
            "fitted coefficients (for several classes, one colour per class). Where they part, the equation "
            "misses the forest's shape. Ticks on the "
            "axis mark the deciles of the discovery rows. Curves: " + _e(", ".join(sorted(src))) + ".</p>"
            + "<div class='grid'>" + "".join(panels) + "</div>")


#: The figures a pair record may carry, in the order the table shows them; a column appears when
#: any record has it.
_PAIR_COLUMNS = [("h2", "H²"), ("strength", "strength"), ("null_h2", "null H²"),
                 ("null_strength", "null strength"), ("strength_threshold", "threshold")]


def _yes_no(v) -> str:
    return "–" if v is None else ("yes" if v else "no")


def _interactions(m: dict) -> str:
    inter = [i for i in (m.get("interactions") or []) if len(i.get("variables", [])) == 2]
    if not inter:
        return _absent("The discovery step measured no pair of variables in this bundle, so there is "
                       "no interaction matrix" + ("." if equation_absent(m) else "; the equation holds main effects only."))
    fig = plots.interaction_plot(inter)
    products = any("product" in it for it in inter)
    figures = [(k, label) for k, label in _PAIR_COLUMNS if any(k in it for it in inter)]
    head = ["pair", "kind"] + [label for _, label in figures] + ["kept"] + (["product R²"] if products else [])
    rows = []
    for it in sorted(inter, key=lambda i: -(i.get("h2") or 0)):
        row = [" × ".join(it["variables"]), it.get("kind", "–")] + [it.get(k) for k, _ in figures]
        row.append(_yes_no(it.get("kept")))
        if products:
            row.append((it.get("product") or {}).get("r2_product"))
        rows.append(row)
    about = []
    rules = list(dict.fromkeys(it["threshold_rule"] for it in inter if it.get("threshold_rule")))
    if rules:
        about.append("Threshold: " + "; ".join(_e(rule) for rule in rules) + ".")
    sizes = sorted({int(it["rows"]) for it in inter if it.get("rows") is not None and not it.get("searched_by")})
    if sizes:
        about.append("H² measured on " + " or ".join(str(n) for n in sizes) + " discovery rows.")
    glm_only = sorted({int(it["rows"]) for it in inter if it.get("searched_by") and it.get("rows") is not None})
    if glm_only:
        about.append("Pairs without an H² are category × category pairs the forest's importance did not single "
                     "out, tried by the GLM alone on " + " or ".join(str(n) for n in glm_only) + " discovery rows "
                     "(a crossover of two categories has no main effect, so the forest can miss it).")
    if products:
        about.append("Product R²: the share of a kept numeric pair's interaction surface that a centred "
                     "product of the two columns recovers.")
    nulls = ("The null columns are the same figures in a forest grown on an additive version of the data, "
             "where any interaction is noise. " if any(k.startswith("null_") for k, _ in figures) else "")
    legend = ("<p class='note'>Strength: the root mean square of the pair's joint effect beyond the two "
              "separate effects, relative to the spread of the forest's predictions. " + nulls
              + "Kept: the pair was put forward as a term for the equation. " + " ".join(about) + "</p>")
    return (_figure(fig, "Friedman &amp; Popescu's H² for each measured pair (2008, eq. 44): the share of the "
                    "pair's joint partial dependence not explained by the two variables separately. H² is "
                    "large for pairs whose joint effect is tiny, so read it beside the pair's strength.")
            + _table(head, rows) + legend)


def _present(files: set[str] | None, name: str) -> bool:
    """Is ``name`` in the bundle? Without a file list, judge by whether this version prints code."""
    if files is not None:
        return name in files
    return importlib.util.find_spec("pocketforest.export.code") is not None


def _evidence_text(ev: dict) -> str:
    parts = []
    for k, v in ev.items():
        if isinstance(v, float):
            parts.append(f"{k.replace('_', ' ')} {_num(v)}")
        elif isinstance(v, (int, str, bool)):
            parts.append(f"{k.replace('_', ' ')}: {v}" if k != "reason" else str(v))
    return "; ".join(parts)


def _no_equation(m: dict) -> str:
    """The plain statement that there is no equation, why, and the rows that would be needed."""
    eq = m["equation"]
    rule = eq.get("rule") or {}
    counted = ("confirmation rows" if rule.get("class") is None
               else f"confirmation rows of the rarest class, <code>{_e(rule['class'])}</code>")
    return (f"<p><b>There is no equation in this bundle.</b> The {counted} number {_e(rule.get('have'))}. Even the "
            f"smallest equation with one slope has {_e(rule.get('parameters'))} parameters, and at "
            f"{_e(rule.get('rows_per_parameter'))} rows per parameter it needs {_e(rule.get('need'))} such rows; "
            "with fewer, its estimates would mostly repeat the rows they were fitted on. About "
            f"<b>{_e(eq.get('rows_needed'))} rows</b> in the table (now {_e(rule.get('rows'))}), with the classes in "
            "the same shares, would be needed. The forest and the tree are delivered as usual; there is no "
            "<code>equation.onnx</code>, no equation code, SQL, R, SPSS syntax, workbook or calculator page.</p>")


def _equation(r, m: dict, files: set[str] | None = None) -> str:
    if equation_absent(m):
        return _no_equation(m)
    eq = m["equation"]
    parts = []
    link = {"identity": "identity link", "logit": "logit link", "log": "log link"}.get(eq["link"], eq["link"])
    sc = eq.get("scoring") or {}
    parts.append(f"<p>A {_e(eq['family'])} GLM with the {link}. Its terms were chosen on the discovery rows. "
                 f"<b>For the paper</b>, the table of estimates, p-values and intervals below comes from the "
                 f"{_e(eq['fit_on'])} rows alone (n = {_e(eq.get('n', '?'))}, {_e(eq.get('method', ''))}), which "
                 "played no part in choosing the terms, so those p-values keep their stated meaning (Cox 1975).</p>")
    if sc and not sc.get("same_as_inference"):
        parts.append(f"<p><b>For scoring</b>, every export (ONNX, SQL, code, text) carries the same terms "
                     f"re-estimated on the {_e(sc['fit_on'])} rows (n = {_e(sc['n'])}, {_e(sc['method'])}): more rows "
                     "give better predictions, but those rows chose the terms, so these estimates carry no "
                     "p-values. The equation printed here is the one for scoring.</p>")
    for cls, block in equation_blocks(r.equation, m["target"]):
        if cls is not None:
            parts.append(f"<h3>Class {_e(cls)} against {_e(r.equation.classes[0])}</h3>")
        parts.append(block)
    fills = [f"<code>{_e(f['name'])}</code> → {_num(f['fill'])}" for f in m["features"]
             if f["kind"] == "numeric" and "fill" in f and any(f["name"] in t["variables"] for t in m["terms"])]
    parts.append("<p class='note'>[<i>column</i> = level] is 1 when the row has that level, else 0. "
                 + ("A missing number takes its discovery-row median: " + ", ".join(fills) + ". " if fills else "")
                 + "The same equation, term for term, is in "
                 + ", ".join(f"<code>{n}</code>" for n in ("equation.txt", "equation.tex", "equation.onnx", "equation.sql",
                                                          "equation.py", "equation.js", "equation.R", "equation.sps",
                                                          "equation.xlsx", "calculator.html")
                             if _present(files, n) or n in ("equation.txt", "equation.onnx"))
                 + (" (LaTeX for a paper: <code>equation.tex</code>)" if _present(files, "equation.tex") else "") + ".</p>")
    parts.append(f"<p>Formula as statsmodels reads it:</p><pre class='wrap'><code>{_e(m['formula'])}</code></pre>")
    terms = m.get("terms") or []
    if any(t.get("evidence") for t in terms):
        rows = [[t["kind"], " × ".join(t["variables"]), _evidence_text(t.get("evidence") or {})] for t in terms]
        parts.append("<h3>Terms and why they are there</h3>" + _table(["term", "variables", "evidence (discovery rows)"], rows))
    coef = eq["coefficients"]
    has_class = bool(coef) and "class" in coef[0]
    head = (["class"] if has_class else []) + ["term", "estimate", "std. error", "95% low", "95% high", "p"]
    parts.append("<h3>Coefficients for the paper (confirmation rows)</h3>" + _table(head, [([c["class"]] if has_class else []) +
                                                        [c["term"], c["estimate"], c["std_error"], c["ci_low"],
                                                         c["ci_high"], c["p_value"]] for c in coef]))
    if sc and not sc.get("same_as_inference"):
        sh = (["class"] if has_class else []) + ["term", "estimate"]
        parts.append(f"<h3>Coefficients for scoring ({_e(sc['fit_on'])} rows)</h3>"
                     + _table(sh, [([c["class"]] if has_class else []) + [c["term"], c["estimate"]]
                                   for c in sc["coefficients"]]))
    bt = eq.get("block_test")
    parts.append("<h3>Do the suggested terms add anything?</h3>")
    if bt:
        name = bt.get("test", "test")
        df = f"{bt['df']}, {bt['df_resid']:.0f}" if bt.get("df_resid") is not None else f"{bt['df']}"
        parts.append(f"<p>One {_e(name)} test of every term beyond the main effects, on the same "
                     f"{_e(eq['fit_on'])} rows: statistic {_num(bt['statistic'])} on {df} degrees of freedom, "
                     f"p = {_num(bt['p_value'], 3)}. A small p says the bends and interactions improve on a "
                     "main-effects equation in rows that did not choose them.</p>")
    else:
        parts.append("<p>No terms beyond the main effects were suggested, so there is no block to test.</p>")
    if eq.get("note"):
        parts.append(f"<p class='note'>{_e(eq['note'])}</p>")
    return "".join(parts)


def _tree_nodes(r):
    from ..design import model_frame
    from ..export.tree_spec import tree_nodes
    prep = r.forest.pipeline.named_steps["prep"]
    Xd = np.asarray(prep.transform(model_frame(r.table.data.iloc[r.splits.discovery], r.table.features)),
                    dtype=np.float32)
    counts = np.asarray(r.tree.model.decision_path(Xd).sum(axis=0)).ravel()
    return tree_nodes(r.tree.model, r.forest.columns, r.fills, r.table.task, counts)


def _tree(r, m: dict) -> str:
    import re
    from ..export.tree_svg import fidelity_note, tree_svg
    t = m["tree"]
    svg = tree_svg(_tree_nodes(r), m["task"], m["target"], m.get("classes"),
                   note=fidelity_note(m["fidelity"]["tree"], m["evaluation"].get("on")))
    svg = re.sub(r'\s+xmlns="[^"]*"', "", svg, count=1)   # inline in HTML5: no namespace address needed
    caption = (f"The whole tree: depth {t['depth']}, {t['leaves']} leaves, grown on the discovery rows labelled by "
               "the forest (Craven &amp; Shavlik 1996). The same drawing is <code>tree.svg</code>; the same rules "
               "are <code>tree.txt</code>, <code>tree.onnx</code> and the tree's code exports.")
    chosen = t.get("chosen_by") or {}
    text = chosen.get("text", "") if isinstance(chosen, dict) else str(chosen)
    return _figure(svg, caption) + f"<p>Size chosen: {_e(text)}.</p>"


#: Sizes listed in the frontier table (the chosen size and the cap are added).
_FRONTIER_ROWS = (2, 3, 4, 6, 8, 10, 12, 16, 24, 32, 48, 64)


def _tree_size(r, m: dict) -> str:
    t = m["tree"]
    frontier = t.get("frontier") or []
    if not frontier:
        return _absent("No size/fidelity frontier was recorded in this bundle (the tree has a single leaf).")
    chosen = t.get("chosen_by") or {}
    key = chosen.get("measure") or ("r2" if m["task"] == "regression" else "probability_r2")
    fig = plots.frontier_plot(frontier, key, t["leaves"], chosen.get("cap"), chosen.get("margin"),
                              t.get("frontier_held_out"))
    names = {"r2": "R²", "probability_r2": "R² of class probabilities", "agreement": "agreement", "kappa": "kappa"}
    keys = list(frontier[0]["confirmation"])
    held = t.get("frontier_held_out")
    where = "test rows" if held == "test" else (held or "")
    show = set(_FRONTIER_ROWS) | {t["leaves"]} | ({chosen["cap"]} if chosen.get("cap") else set())
    head = ["leaves", "depth", f"{names[key]}, confirmation"] + ([f"{names.get(k, k)}, {where}" for k in keys] if held else [])
    rows = [[row["leaves"], row["depth"], row["confirmation"][key]]
            + ([(row.get("held_out") or {}).get(k) for k in keys] if held else [])   # "–" where no fold grew that size
            + (["← chosen"] if row["leaves"] == t["leaves"] else [""])
            for row in frontier if row["leaves"] in show]
    head.append("")
    rule = ("The size rule: among trees grown best-first (the split that most improves fidelity goes first) "
            "with at most the cap of leaves, take the smallest whose fidelity on the confirmation rows is within "
            "the margin of the most faithful; the forest labels those rows, so no outcome is used. A bigger, more "
            "faithful tree is one option away: <code>--tree-leaves 32</code> or <code>--tree-leaves 64</code>."
            if chosen.get("rule") == "frontier" else
            "This tree's size was set with <code>--tree-depth</code>; the frontier below shows what a best-first "
            "tree of each size would give.")
    if key == "probability_r2":
        rule += (" For classes, fidelity is the R² of the forest's class probabilities (pooled over classes): a "
                 "constant tree scores about 0 however unbalanced the classes, where label agreement would already "
                 "give it the majority share.")
    parts = [_figure(fig, "How closely a tree of each size reproduces the forest. Bigger trees are more faithful "
                     "and harder to read."), f"<p>{rule}</p>", _table(head, rows)]
    curve = t.get("fidelity_by_depth") or []
    if curve and curve[0].get("held_out"):
        parts.append("<h3>Trees grown depth-first to a fixed depth (<code>--tree-depth</code>)</h3>")
        parts.append(_table(["depth", "leaves", f"{names[key]}, {where}"],
                            [[d["depth"], d["leaves"], d["held_out"].get(key)] for d in curve]))
    return "".join(parts)


def _example_row(m: dict) -> dict:
    row = {}
    for f in m["features"]:
        if f["kind"] == "numeric":
            v = f.get("fill", f.get("min"))
            row[f["name"]] = float(f"{float(v):.6g}") if v is not None else None  # a typical value, shortly written
        else:
            cats = f.get("categories") or [""]
            row[f["name"]] = cats[0]
    return row


def _elsewhere(m: dict, files: set[str] | None) -> str:
    row = _example_row(m)
    py_row = "{" + ", ".join(f"{json.dumps(k)}: {v!r}" for k, v in row.items()) + "}"
    feeds = ",\n         ".join(
        f"{json.dumps(f['onnx_input'])}: np.array([[{json.dumps(row[f['name']])}]], dtype="
        + ("np.float32)" if f["kind"] == "numeric" else "object)") for f in m["features"])
    out = "prediction" if m["task"] == "regression" else "label, probabilities"
    parts = ["<p>Work inside the bundle folder. Every model takes the raw columns (names as in the data); "
             "a missing number is NaN / <code>None</code> / <code>null</code>, a missing category the empty string.</p>",
             "<h3>ONNX (any onnxruntime: Python, C, C++, C#, Java, JavaScript)</h3>",
             f"<pre><code>import numpy as np, onnxruntime as ort\nsession = ort.InferenceSession(\"forest.onnx\")   "
             f"# or {', '.join(f'{x}.onnx' for x in models_of(m)[1:])}\nfeeds = {{{_e(feeds)}}}\n{_e(out)} = session.run(None, feeds)</code></pre>"]
    # the equation's file first, the tree's named beside it; the tree's alone without an equation
    lead = "tree" if equation_absent(m) else "equation"

    def other(ext: str) -> str:
        return (f"   {'--' if ext == 'sql' else '#' if ext == 'py' else '//'} or tree.{ext}"
                if lead == "equation" and _present(files, f"tree.{ext}") else "")

    if _present(files, f"{lead}.sql"):
        parts += ["<h3>SQL (SQLite or DuckDB)</h3>",
                  "<pre><code>-- load your rows into a table named input_rows, e.g. in the duckdb shell:\n"
                  "CREATE TABLE input_rows AS SELECT * FROM read_csv('new_rows.csv');\n"
                  f".read {lead}.sql{other('sql')}\n"
                  f"-- sqlite3 shell:  .import --csv new_rows.csv input_rows   then   .read {lead}.sql\n"
                  "-- the result: every column of input_rows plus the prediction</code></pre>"]
    if _present(files, f"{lead}.py"):
        parts += ["<h3>Python (standard library only)</h3>",
                  f"<pre><code>import importlib.util\nspec = importlib.util.spec_from_file_location(\"{lead}\", "
                  f"\"{lead}.py\"){other('py')}\n{lead} = importlib.util.module_from_spec(spec)\n"
                  f"spec.loader.exec_module({lead})\nprint({lead}.predict({_e(py_row)}))</code></pre>"]
    if _present(files, f"{lead}.js"):
        parts += ["<h3>JavaScript (Node.js or a browser)</h3>",
                  f"<pre><code>const {{ predict }} = require(\"./{lead}.js\");{other('js')}\n"
                  f"console.log(predict({_e(json.dumps(row))}));</code></pre>"]
    parts += collaborator_snippets(m, row, lambda name: _present(files, name) and not (
        (name.startswith("equation") or name == "calculator.html") and equation_absent(m)))
    if not any(_present(files, f"{lead}.{ext}") for ext in ("sql", "py", "js")):
        parts.append(_absent("This bundle carries no SQL, Python or JavaScript printouts of the models; "
                             "score it through ONNX."))
    pred_cols = (", ".join(f"<code>pred_{x}</code>" for x in models_of(m))
                 if m["task"] == "regression" else
                 "<code>label_&lt;model&gt;</code> and <code>prob_&lt;model&gt;_&lt;class&gt;</code>")
    parts += ["<h3>Check your runtime against the reference rows</h3>",
              f"<p><code>reference.csv</code> holds input rows (every category, and rows with missing values, the last "
              "ones spelled as missing-value texts such as <code>NA</code>) with "
              f"each model's prediction as computed by the fitting libraries: {pred_cols}. Score those rows "
              "with your runtime and compare: values should agree to about 1e-4 (ONNX tree ensembles compute in "
              "float32). Where pocketforest is installed, one command checks every form and every checksum:</p>",
              "<pre><code>pocketforest verify .        # exit 0: every form reproduces reference.csv\n"
              f"pocketforest score . new_rows.csv --model {models_of(m)[-1]} --out predictions.csv\n"
              "pocketforest compare . labelled_rows.csv     # loss and drift on new labelled rows</code></pre>"]
    return "".join(parts)


def _cautions() -> str:
    return "<ul class='cautions'>" + "".join(f"<li>{c}</li>" for c in CAUTIONS) + "</ul>"


# ---------------------------------------------------------------- the page

def _build(key: str, builder) -> str:
    """One section; if drawing it fails, the page says so in place and the rest still ships.

    The bundle's numbers live in manifest.json, so a figure that cannot be drawn must not cost the
    user the bundle; the failure is shown on the page and on stderr, never hidden.
    """
    try:
        return builder()
    except Exception as exc:  # a bug in one figure must not lose the whole bundle
        print(f"warning: report section '{key}' could not be drawn ({type(exc).__name__}: {exc})", file=sys.stderr)
        return (f"<p class='warn'>This section could not be drawn ({_e(type(exc).__name__)}: {_e(exc)}). "
                "The numbers it would show are in <code>manifest.json</code>.</p>")


def render_report(r, m: dict, files: set[str] | dict | None = None) -> str:
    """The whole page. ``files`` (optional): names of the bundle's files, to show only the exports present."""
    names = set(files) if files is not None else None
    builders = {
        "data": lambda: _data(r, m), "scoreboard": lambda: _scoreboard(m), "importance": lambda: _importance(m),
        "shapes": lambda: _shapes(r, m), "interactions": lambda: _interactions(m),
        "equation": lambda: _equation(r, m, names), "tree": lambda: _tree(r, m),
        "tree-size": lambda: _tree_size(r, m), "elsewhere": lambda: _elsewhere(m, names),
        "cautions": _cautions,
    }
    body = [_section(i + 1, key, title, _build(key, builders[key])) for i, (key, title) in enumerate(SECTIONS)]
    nav = "<nav><ol>" + "".join(f"<li><a href='#{k}'>{_e(t)}</a></li>" for k, t in SECTIONS) + "</ol></nav>"
    what = "a forest and a tree (no equation)" if equation_absent(m) else "a forest, an equation and a tree"
    head = (f"<header><h1>{_e(m['target'])}: {what}</h1>"
            f"<div class='meta'>pocketforest {_e(m.get('tool_version', ''))} · {_e(m['task'])} · "
            f"created {_e(m.get('created', ''))} · seed {_e(m.get('seed', ''))} · "
            f"data <code>{_e((m.get('source') or {}).get('file', ''))}</code></div></header>")
    return ("<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
            "<meta name='viewport' content='width=device-width, initial-scale=1'>"
            f"<title>pocketforest: {_e(m['target'])}</title><style>{_STYLE}</style></head><body>"
            + head + nav + "\n".join(body)
            + "<footer class='meta'><p>Written by pocketforest from the bundle's manifest.json; this page needs "
              "no network and runs no script.</p></footer></body></html>\n")
