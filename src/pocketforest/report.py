"""report.html: one self-contained page a researcher can attach or print (no network needed)."""
from __future__ import annotations

import html

CAUTIONS = [
    "A forest and its surrogates find patterns worth testing; confirm them in new data.",
    "Do not use the equation outside the training range of its inputs: powers and hinges "
    "extrapolate badly. Scoring counts the inputs of each row that fall outside that range.",
    "Where predictions affect people (health, credit, hiring, education, safety) they are decision "
    "support only: validate them on the population concerned, and follow local regulation and "
    "licensed professional judgement.",
    "Permutation importance is shared out among correlated columns and can mislead when columns "
    "are strongly related (Strobl et al. 2008).",
]

_STYLE = """
body{font-family:Georgia,'Times New Roman',serif;max-width:62rem;margin:2rem auto;padding:0 1rem;color:#1d2a22;background:#fbfaf5}
h1{font-size:1.6rem;border-bottom:3px solid #5b7f4a;padding-bottom:.3rem}
h2{font-size:1.2rem;color:#3f5f31;margin-top:2rem}
table{border-collapse:collapse;margin:.5rem 0;font-size:.92rem}
td,th{border-bottom:1px solid #d6d2c2;padding:.25rem .6rem;text-align:right}
th{background:#ece8d8}td:first-child,th:first-child{text-align:left}
pre{background:#f1eee2;padding:.6rem;overflow-x:auto;font-size:.85rem}
.note{color:#6b4f1d}
@media print{body{background:#fff}}
"""


def _e(x) -> str:
    return html.escape(str(x))


def _num(v, digits: int = 4) -> str:
    return "–" if v is None else f"{v:.{digits}g}" if isinstance(v, float) else _e(v)


def _table(head: list[str], rows: list[list]) -> str:
    h = "".join(f"<th>{_e(c)}</th>" for c in head)
    body = "".join("<tr>" + "".join(f"<td>{_num(c) if isinstance(c, float) else _e(c)}</td>" for c in r) + "</tr>"
                   for r in rows)
    return f"<table><tr>{h}</tr>{body}</table>"


def render_report(r, m: dict) -> str:
    """The page, from the manifest (the numbers users see are exactly those saved)."""
    parts = [f"<h1>pocketforest report: {_e(m['target'])} ({_e(m['task'])})</h1>"]
    parts.append("<h2>Data and splits</h2>")
    parts.append(_table(["part", "rows"], [[k, v] for k, v in m["splits"].items()]))
    if m.get("warnings"):
        parts.append("<ul class='note'>" + "".join(f"<li>{_e(w)}</li>" for w in m["warnings"]) + "</ul>")
    ev = m["evaluation"]
    names = [k for k in ev["forest"]]
    parts.append("<h2>How good is each model (test rows)</h2>")
    parts.append(_table(["model"] + names, [[mdl] + [ev[mdl][k] for k in names] for mdl in ("forest", "tree", "equation")]))
    rows = []
    for mdl in ("tree", "equation"):
        lo = m["loss"][mdl]
        fid = ", ".join(f"{k} {v:.3f}" for k, v in m["fidelity"][mdl].items())
        rows.append([mdl, fid, lo["value"], f"{lo['ci_low']:.4f} to {lo['ci_high']:.4f}"])
    parts.append(_table(["surrogate", "fidelity to forest", f"loss in {m['loss']['tree']['metric']}", "95% interval"], rows))
    parts.append("<h2>Which variables matter</h2>")
    parts.append(_table(["variable", "importance", "standard error"],
                        [[i["feature"], i["mean"], i["se"]] for i in m["importance"]]))
    parts.append("<h2>The equation</h2>")
    parts.append(f"<pre>{_e(m['formula'])}</pre>")
    coef = m["equation"]["coefficients"]
    head = ["term", "estimate", "std. error", "95% low", "95% high", "p"]
    parts.append(_table((["class"] if coef and "class" in coef[0] else []) + head,
                        [([c["class"]] if "class" in c else []) + [c["term"], c["estimate"], c["std_error"],
                         c["ci_low"], c["ci_high"], c["p_value"]] for c in coef]))
    parts.append(f"<p>Fitted on the {_e(m['equation']['fit_on'])} rows only, which played no part in choosing "
                 "the terms, so these p-values and intervals keep their stated meaning.</p>")
    parts.append("<h2>The surrogate tree</h2>")
    parts.append(_table(["depth", *[k for k in m["tree"]["fidelity_by_depth"][0] if k != "depth"]],
                        [[d["depth"], *[v for k, v in d.items() if k != "depth"]] for d in m["tree"]["fidelity_by_depth"]]))
    parts.append(f"<p>Chosen depth {m['tree']['depth']} ({_e(m['tree']['chosen_by'])}), {m['tree']['leaves']} leaves.</p>")
    parts.append("<h2>Cautions</h2><ul>" + "".join(f"<li>{_e(c)}</li>" for c in CAUTIONS) + "</ul>")
    return ("<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
            f"<title>pocketforest: {_e(m['target'])}</title><style>{_STYLE}</style></head><body>"
            + "\n".join(parts) + "</body></html>\n")
