"""JavaScript exports of the equation and the tree: plain JavaScript, ``predict(row)``.

Runs in Node.js and browsers; sets ``module.exports = { predict }`` when ``module`` exists. Every
name, level and label is a JSON string literal with non-ASCII characters escaped and every ``<``
written as ``\\u003c``, so the file can also sit inside an HTML ``<script>`` element: no literal
can hold ``</script`` or ``<!--``, which would end or derail the element.
"""
from __future__ import annotations

import json

from ..expr import num_literal
from ..intake.values import MISSING_TOKENS
from ..thresholds import double_split
from .dialect import Dialect, Inputs, linear_predictors, plain_number, print_expr
from .tree_spec import TreeNode


def js_str(value: str) -> str:
    return json.dumps(str(value), ensure_ascii=True).replace("<", "\\u003c")


JS = Dialect(number=plain_number, text=js_str,
             is_level=lambda var, lit: f"({var} === {lit} ? 1.0 : 0.0)",
             square=lambda a: f"_sq({a})", pos=lambda a: f"_pos({a})", log=lambda a: f"_log({a})")

_HELPERS = r'''
function _value(row, name) {
  if (!Object.prototype.hasOwnProperty.call(row, name)) {
    throw new Error("input column " + JSON.stringify(name) + " is missing from the row (pass null for a missing value)");
  }
  return row[name];
}

function _num(row, name, fill) {
  var v = _value(row, name);
  if (v === null || v === undefined) return fill;
  if (typeof v === "string") {
    v = v.trim();
    if (_MISSING_TEXT.indexOf(v) >= 0) return fill;
    var n = Number(v);
    if (Number.isNaN(n)) throw new Error("input column " + JSON.stringify(name) + " must be a number, not " + JSON.stringify(v));
    return n;
  }
  v = Number(v);
  return Number.isNaN(v) ? fill : v;
}

function _cat(row, name) {
  var v = _value(row, name);
  if (v === null || v === undefined) return "";
  if (typeof v === "boolean") return v ? "True" : "False";
  if (typeof v === "number") return Number.isNaN(v) ? "" : String(v);
  v = String(v).trim();
  return _MISSING_TEXT.indexOf(v) >= 0 ? "" : v;
}

function _sq(v) { return v * v; }
function _pos(v) { return v > 0.0 ? v : 0.0; }
// NaN for v <= 0 (only beyond the training range): the prediction is then missing
function _log(v) { return v > 0.0 ? Math.log(v) : NaN; }
// a value that is not a finite number (a log of v <= 0, an overflow) is missing: null
function _finite(v) { return Number.isFinite(v) ? v : null; }

function _probabilities(etas) {
  // softmax written as 1 / sum(exp(e_j - e_k)): no overflow for large scores
  return etas.map(function (k) {
    var s = 0.0;
    for (var j = 0; j < etas.length; j++) s += Math.exp(etas[j] - k);
    return 1.0 / s;
  });
}

function _missing() {
  var probabilities = {};
  for (var k = 0; k < CLASSES.length; k++) probabilities[CLASSES[k]] = null;
  return { label: null, probabilities: probabilities };
}

function _result(p) {
  var best = 0, probabilities = {};
  for (var k = 0; k < p.length; k++) {
    if (p[k] > p[best]) best = k;
    probabilities[CLASSES[k]] = p[k];
  }
  return { label: CLASSES[best], probabilities: probabilities };
}
'''

_FOOTER = '''
  return {{ predict: predict, TARGET: TARGET, TASK: TASK, CLASSES: CLASSES, TOOL_VERSION: TOOL_VERSION }};
}})();
var predict = pocketforest_{kind}.predict;
if (typeof module !== "undefined" && module.exports) {{
  module.exports = pocketforest_{kind};
}}
'''


def _header(kind: str, meta: dict) -> list[str]:
    classes = meta.get("classes") or []
    return ["// pocketforest " + kind + " export: call predict(row) with an object keyed by column name.",
            "// A missing value is null. Regression returns a number; classification returns",
            "// {label, probabilities: {class: p, ...}}. Target, task and classes are given below as data.",
            *(["// Where the equation has no finite value, the prediction (label, probabilities) is null."]
              if kind == "equation" else []),
            f"// Defines predict and pocketforest_{kind} (so equation.js and tree.js can share one page).",
            f"var pocketforest_{kind} = (function () {{",
            '"use strict";',
            f"var TARGET = {js_str(meta['target'])};",
            f"var TASK = {js_str(meta['task'])};",
            f"var CLASSES = [{', '.join(js_str(c) for c in classes)}];",
            f"var TOOL_VERSION = {js_str(meta['tool_version'])};",
            "",
            _missing_text(),
            _HELPERS]


def _missing_text() -> str:
    """The cell texts that mean "missing", read from intake's one list (so they cannot drift)."""
    return "var _MISSING_TEXT = [" + ", ".join(js_str(t) for t in sorted(MISSING_TOKENS)) + "];"


def _bind(inputs: Inputs) -> list[str]:
    out = []
    for ref in inputs:
        if ref.kind == "numeric":
            out.append(f"  var {ref.var} = _num(row, {js_str(ref.feature)}, {plain_number(ref.fill)});")
        else:
            out.append(f"  var {ref.var} = _cat(row, {js_str(ref.feature)});")
    return out


def equation_js(eq, meta: dict) -> str:
    inputs = Inputs()
    etas = linear_predictors(eq, JS, inputs)
    lines = _header("equation", meta) + ["// " + eq.source_line, "function predict(row) {"] + _bind(inputs)
    if eq.task == "regression":
        lines.append(f"  var eta = {etas[0]};")
        lines.append("  return _finite(eta);" if eq.link == "identity" else "  return _finite(Math.exp(eta));")
    else:
        lines.append("  var etas = [0.0];")
        for e in etas:
            lines.append(f"  etas.push({e});")
        lines.append("  if (!etas.every(Number.isFinite)) return _missing();")
        lines.append("  return _result(_probabilities(etas));")
    lines.append("}")
    return "\n".join(lines) + "\n" + _FOOTER.format(kind="equation")


def tree_js(nodes: list[TreeNode], meta: dict) -> str:
    inputs = Inputs()
    leaves: dict[int, int] = {}
    body: list[str] = []

    def walk(i: int, depth: int) -> None:
        node, pad = nodes[i], "  " * depth
        if node.is_leaf:
            leaves[i] = len(leaves)
            body.append(f"{pad}leaf = {leaves[i]};")
            return
        if node.level is None:
            op, bound = double_split(node.threshold)
            body.append(f"{pad}if ({inputs.numeric(node.feature, node.fill)} {op} {plain_number(bound)}) {{")
            walk(node.left, depth + 1)
        else:
            body.append(f"{pad}if ({inputs.categorical(node.feature)} === {js_str(node.level)}) {{")
            walk(node.right, depth + 1)
        body.append(f"{pad}}} else {{")
        walk(node.left if node.level is not None else node.right, depth + 1)
        body.append(f"{pad}}}")

    walk(0, 1)
    order = sorted(leaves, key=leaves.get)
    lines = _header("tree", meta)
    if meta["task"] == "regression":
        values = [num_literal(nodes[i].value[0]) for i in order]
        lines.append("var _LEAVES = [")
        lines += ["  " + " ".join(v + "," for v in values[k:k + 4]) for k in range(0, len(values), 4)]
        lines.append("];")
    else:
        lines.append("var _LEAVES = [")
        lines += ["  [" + ", ".join(num_literal(p) for p in nodes[i].value) + "]," for i in order]
        lines.append("];")
    lines += ["", "function predict(row) {"] + _bind(inputs) + ["  var leaf;"] + body
    lines.append("  return _LEAVES[leaf];" if meta["task"] == "regression" else "  return _result(_LEAVES[leaf]);")
    lines.append("}")
    return "\n".join(lines) + "\n" + _FOOTER.format(kind="tree")


def equation_terms_js(eq, meta: dict) -> str:
    """``pocketforest_terms.contributions(row)``: for each linear predictor, the intercept and each
    term's contribution (coefficient × column, summed over the term's columns, in the order of
    :func:`breakdown.labels`); ``LABELS`` names them. For the calculator page."""
    from .breakdown import blocks, labels, term_groups

    inputs = Inputs()
    design = [print_expr(c.node, JS, inputs) for c in eq.columns]
    lines = _header("terms", meta) + [f"var LABELS = [{', '.join(js_str(x) for x in labels(eq))}];",
                                       f"var BLOCKS = [{', '.join(js_str(c) if c is not None else 'null' for c, _ in blocks(eq))}];",
                                       "", "function contributions(row) {"] + _bind(inputs)
    lines.append("  return [")
    for _, coef in blocks(eq):
        parts = [plain_number(coef[0])]
        for g in term_groups(eq):
            parts.append(" + ".join(f"{plain_number(coef[1 + j])} * {design[j]}" for j in g.columns))
        lines.append("    [" + ",\n     ".join(parts) + "],")
    lines += ["  ];", "}", "",
              "  return { contributions: contributions, LABELS: LABELS, BLOCKS: BLOCKS, TARGET: TARGET, TASK: TASK,",
              "           CLASSES: CLASSES, TOOL_VERSION: TOOL_VERSION };",
              "})();"]
    return "\n".join(lines) + "\n"
