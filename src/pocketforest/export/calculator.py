"""``calculator.html``: one self-contained page to type values and see both surrogates' predictions.

The page carries the bundle's own JavaScript exports (``equation.js``, ``tree.js``) and a third
printout of the same expression trees that returns each term's contribution
(:func:`jscode.equation_terms_js`), so the page computes exactly what those files compute. Inputs
are built by a small fixed script from a JSON description (names, kinds, training ranges, levels);
every name and level reaches the page as JSON data with ``<`` escaped and is shown with
``textContent``, never as markup or code. A Content-Security-Policy forbids every network request:
the page works offline and can be attached to an e-mail.
"""
from __future__ import annotations

import html
import json

from ..report.palette import CSS_VARIABLES
from .breakdown import blocks, labels
from .dialect import equation_inputs
from .jscode import equation_js, equation_terms_js, tree_js
from .tree_spec import TreeNode


def _json(data) -> str:
    """JSON that cannot end or derail a <script> element."""
    return json.dumps(data, ensure_ascii=True, allow_nan=False).replace("<", "\\u003c")


def _tree_inputs(nodes: list[TreeNode]) -> set[str]:
    return {n.feature for n in nodes if not n.is_leaf}


def page_spec(eq, nodes: list[TreeNode], meta: dict, features: list[dict]) -> dict:
    """What the page script needs: the inputs (those either surrogate reads, in the data's order)."""
    order = [f["name"] for f in features]
    in_equation = {n for n, _ in equation_inputs(eq, order)}
    in_tree = _tree_inputs(nodes)
    inputs = []
    for f in features:
        if f["name"] not in in_equation | in_tree:
            continue
        item = {"name": f["name"], "kind": f["kind"],
                "used_by": [m for m, s in (("equation", in_equation), ("tree", in_tree)) if f["name"] in s]}
        if f["kind"] == "numeric":
            item.update({"min": f.get("min"), "max": f.get("max"), "default": f.get("fill")})
        else:
            item["levels"] = [c for c in (f.get("categories") or []) if c != ""]
        inputs.append(item)
    return {"target": meta["target"], "task": meta["task"], "classes": meta.get("classes") or [],
            "link": eq.link, "family": eq.family, "terms": labels(eq),
            "blocks": [c for c, _ in blocks(eq)], "inputs": inputs}


_STYLE = CSS_VARIABLES + """
*{box-sizing:border-box}
body{font-family:Georgia,'Iowan Old Style','Palatino Linotype',serif;max-width:62rem;margin:0 auto;
 padding:1.2rem 1rem 2.5rem;color:var(--ink);background:var(--paper);line-height:1.4}
header{border-bottom:3px double var(--green);padding-bottom:.5rem;margin-bottom:1rem}
h1{font-size:1.5rem;margin:.2rem 0;color:var(--deep)}
h2{font-size:1.12rem;color:var(--deep);margin:1.4rem 0 .4rem;border-top:1px solid var(--rule);padding-top:.4rem}
.meta,.hint{font-size:.85rem;color:#5a5a48}
.layout{display:flex;flex-wrap:wrap;gap:1.2rem}
.layout>section{flex:1 1 26rem}
table{border-collapse:collapse;font-size:.9rem;font-variant-numeric:tabular-nums;width:100%}
td,th{border-bottom:1px solid var(--rule);padding:.25rem .5rem;text-align:left;vertical-align:middle}
th{background:#ebe6d3;font-weight:600}
td.num,th.num{text-align:right}
input,select{font:inherit;padding:.15rem .3rem;border:1px solid #b9b49f;background:#fffef9;width:10rem}
input.outside{border-color:var(--ochre);background:#f7efdc}
.range{font-size:.8rem;color:#5a5a48}
.cards{display:flex;flex-wrap:wrap;gap:.7rem}
.card{flex:1 1 12rem;background:var(--panel);border-top:4px solid var(--slate);padding:.5rem .8rem}
.card.tree{border-color:var(--ochre)}
.card .big{font-size:1.45rem;font-weight:600}
.warn{background:#f7efdc;border:1px solid #e0cfa3;color:#7a4a12;padding:.5rem .8rem;margin:.6rem 0}
.bar{display:inline-block;height:.7rem;background:var(--slate);vertical-align:middle}
.bar.neg{background:var(--ochre)}
.cautions{font-size:.85rem;background:#f7efdc;border:1px solid #e0cfa3;padding:.5rem 1rem .5rem 2rem}
@media print{body{background:#fff;max-width:none;padding:0}input,select{border:none;background:none}
 .hint{display:none}section{break-inside:avoid}}
"""

_SCRIPT = r"""
(function () {
  "use strict";
  var spec = JSON.parse(document.getElementById("pf-spec").textContent);
  var equation = pocketforest_equation, tree = pocketforest_tree, terms = pocketforest_terms;
  var form = document.getElementById("pf-inputs");

  function el(tag, attrs, text) {
    var e = document.createElement(tag);
    for (var k in attrs) if (Object.prototype.hasOwnProperty.call(attrs, k)) e.setAttribute(k, attrs[k]);
    if (text !== undefined) e.textContent = text;
    return e;
  }
  function fmt(v, digits) {
    if (v === null || v === undefined || Number.isNaN(v)) return "–";
    if (!Number.isFinite(v)) return v > 0 ? "∞" : "−∞";
    return Number(v.toPrecision(digits)).toString();
  }
  function setValue(node, v, digits) {
    node.setAttribute("data-value", String(v));
    node.textContent = fmt(v, digits);
  }

  spec.inputs.forEach(function (item, i) {
    var tr = el("tr"), id = "pf-in-" + i;
    var th = el("th", {scope: "row"});
    th.appendChild(el("label", {"for": id}, item.name));
    tr.appendChild(th);
    var td = el("td"), input;
    if (item.kind === "numeric") {
      input = el("input", {id: id, type: "number", step: "any", "data-index": String(i)});
      if (item.default !== null && item.default !== undefined) input.value = fmt(item.default, 6);
    } else {
      input = el("select", {id: id, "data-index": String(i)});
      input.appendChild(el("option", {value: ""}, "(missing)"));
      item.levels.forEach(function (lv) {
        var o = el("option", {}, lv);
        o.value = lv;
        input.appendChild(o);
      });
      if (item.levels.length) input.value = item.levels[0];
    }
    td.appendChild(input);
    tr.appendChild(td);
    var note = item.kind === "numeric" && item.min !== null && item.min !== undefined
      ? "training range " + fmt(item.min, 6) + " to " + fmt(item.max, 6)
      : (item.kind === "numeric" ? "" : item.levels.length + " categories");
    if (item.used_by.length < 2) note += (note ? "; " : "") + item.used_by[0] + " only";
    tr.appendChild(el("td", {"class": "range"}, note));
    form.appendChild(tr);
    input.addEventListener("input", update);
    input.addEventListener("change", update);
  });

  function row() {
    var out = {}, outside = [], bad = [];
    spec.inputs.forEach(function (item, i) {
      var input = document.getElementById("pf-in-" + i);
      if (item.kind === "numeric") {
        if (input.validity && input.validity.badInput) bad.push(item.name);
        var text = input.value.trim();
        var v = text === "" ? null : Number(text);
        var off = v !== null && item.min !== null && item.min !== undefined && (v < item.min || v > item.max);
        input.classList.toggle("outside", !!off);
        if (off) outside.push(item);
        out[item.name] = v;
      } else {
        out[item.name] = input.value === "" ? null : input.value;
      }
    });
    return {values: out, outside: outside, bad: bad};
  }

  function showModel(prefix, res) {
    if (spec.task === "regression") {
      setValue(document.getElementById(prefix), res, 6);
      return;
    }
    document.getElementById(prefix + "-label").textContent = res.label;
    document.getElementById(prefix + "-label").setAttribute("data-value", res.label);
    spec.classes.forEach(function (c, k) {
      setValue(document.getElementById(prefix + "-p" + k), res.probabilities[c], 4);
    });
  }

  function update() {
    var r = row();
    var warn = document.getElementById("pf-warning");
    warn.textContent = "";
    r.outside.forEach(function (item) {
      warn.appendChild(el("div", {}, item.name + " is outside the training range (" + fmt(item.min, 6) +
        " to " + fmt(item.max, 6) + "): the equation extrapolates there and should not be trusted."));
    });
    r.bad.forEach(function (name) { warn.appendChild(el("div", {}, name + " is not a number: it counts as missing.")); });
    warn.hidden = !warn.firstChild;
    showModel("pf-equation", equation.predict(r.values));
    showModel("pf-tree", tree.predict(r.values));
    var parts = terms.contributions(r.values);
    var body = document.getElementById("pf-terms");
    body.textContent = "";
    var biggest = 0;
    parts.forEach(function (b) { b.slice(1).forEach(function (v) { biggest = Math.max(biggest, Math.abs(v)); }); });
    spec.terms.forEach(function (label, t) {
      var tr = el("tr");
      tr.appendChild(el("td", {}, label));
      parts.forEach(function (b, k) {
        var td = el("td", {"class": "num", id: "pf-term-" + k + "-" + t});
        setValue(td, b[t], 4);
        tr.appendChild(td);
        if (t > 0 && biggest > 0) {
          var w = Math.round(60 * Math.abs(b[t]) / biggest);
          var cell = el("td");
          cell.appendChild(el("span", {"class": "bar" + (b[t] < 0 ? " neg" : ""), style: "width:" + w + "px"}));
          tr.appendChild(cell);
        } else {
          tr.appendChild(el("td"));
        }
      });
      body.appendChild(tr);
    });
    parts.forEach(function (b, k) {
      var s = 0;
      b.forEach(function (v) { s += v; });
      setValue(document.getElementById("pf-eta-" + k), s, 6);
    });
  }

  document.getElementById("pf-ready").setAttribute("data-ready", "yes");
  window.pocketforestUpdate = update;
  update();
})();
"""


def _e(x) -> str:
    return html.escape(str(x))


def _result_cards(spec: dict) -> str:
    def card(prefix: str, title: str, cls: str) -> str:
        if spec["task"] == "regression":
            body = f"<div class='big'><output id='{prefix}'></output></div>"
        else:
            rows = "".join(f"<tr><td>{_e(c)}</td><td class='num' id='{prefix}-p{k}'></td></tr>"
                           for k, c in enumerate(spec["classes"]))
            body = (f"<div class='big'><output id='{prefix}-label'></output></div>"
                    f"<table><thead><tr><th>class</th><th class='num'>probability</th></tr></thead>"
                    f"<tbody>{rows}</tbody></table>")
        return f"<div class='card {cls}'><div>{title}</div>{body}</div>"
    return ("<div class='cards'>" + card("pf-equation", "Equation", "equation") +
            card("pf-tree", "Tree", "tree") + "</div>")


def _terms_table(spec: dict) -> str:
    first = spec["classes"][0] if spec["classes"] else ""
    heads = "".join(f"<th class='num'>{'contribution' if len(spec['blocks']) == 1 else _e(c) + ' vs ' + _e(first)}"
                    "</th><th></th>" for c in spec["blocks"])
    etas = "".join(f"<td class='num' id='pf-eta-{k}'></td><td></td>" for k in range(len(spec["blocks"])))
    scale = {"identity": "the prediction itself", "log": "the log of the prediction",
             "logit": (f"the log-odds of {spec['classes'][-1]} against {spec['classes'][0]}"
                       if len(spec["classes"]) == 2 else "each class's log-odds against the first")}.get(spec["link"], "the link scale")
    return (f"<p class='hint'>On the link scale ({_e(scale)}): the intercept and the terms add up to the "
            "linear predictor.</p>"
            f"<table><thead><tr><th>term</th>{heads}</tr></thead><tbody id='pf-terms'></tbody>"
            f"<tfoot><tr><th>linear predictor</th>{etas}</tr></tfoot></table>")


def calculator_html(eq, nodes: list[TreeNode], meta: dict, features: list[dict], cautions: list[str] = ()) -> str:
    """The page's text. ``features``: the manifest's feature entries (name, kind, min, max, categories, fill)."""
    spec = page_spec(eq, nodes, meta, features)
    target = _e(meta["target"])
    kind = "predicted value" if meta["task"] == "regression" else "predicted class and probabilities"
    csp = "default-src 'none'; style-src 'unsafe-inline'; script-src 'unsafe-inline'; img-src data:"
    scripts = "".join(f"<script>\n{code}</script>\n" for code in
                      (equation_js(eq, meta), tree_js(nodes, meta), equation_terms_js(eq, meta), _SCRIPT))
    return ("<!DOCTYPE html>\n<html lang='en'><head><meta charset='utf-8'>"
            f"<meta http-equiv='Content-Security-Policy' content=\"{csp}\">"
            "<meta name='viewport' content='width=device-width, initial-scale=1'>"
            f"<title>Calculator: {target}</title><style>{_STYLE}</style></head><body>"
            f"<header><h1>Calculator for {target}</h1>"
            f"<p class='meta'>The equation and the small tree of this bundle (pocketforest "
            f"{_e(meta['tool_version'])}), computed in this page as you type: {kind}. Nothing leaves the page.</p>"
            "</header><noscript><p class='warn'>This page computes with JavaScript; allow scripts for this "
            "file, or use equation.xlsx or equation.R.</p></noscript>"
            "<div class='layout'><section><h2>Inputs</h2>"
            "<p class='hint'>Leave a number empty, or choose (missing), for a missing value.</p>"
            "<table><tbody id='pf-inputs'></tbody></table>"
            "<div id='pf-warning' class='warn' role='alert' hidden></div></section>"
            f"<section><h2>Predictions</h2>{_result_cards(spec)}"
            f"<h2>Why: each term of the equation</h2>{_terms_table(spec)}</section></div>"
            "<h2>Cautions</h2><ul class='cautions'>" + "".join(f"<li>{c}</li>" for c in cautions) + "</ul>"
            "<span id='pf-ready' hidden></span>"
            f"<script type='application/json' id='pf-spec'>{_json(spec)}</script>\n{scripts}</body></html>\n")
