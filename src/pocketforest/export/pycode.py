"""Python exports of the equation and the tree: standard library only, ``predict(row)``.

Every column name, category value and class label is written with :func:`ascii`, which gives an
escaped, ASCII-only Python string literal; nothing from the data is ever printed as code or inside
a comment.
"""
from __future__ import annotations

from ..expr import num_literal
from ..intake.values import MISSING_TOKENS
from ..thresholds import double_split
from .dialect import Dialect, Inputs, linear_predictors, plain_number
from .tree_spec import TreeNode


def py_str(value: str) -> str:
    return ascii(str(value))


PY = Dialect(number=plain_number, text=py_str,
             is_level=lambda var, lit: f"(1.0 if {var} == {lit} else 0.0)",
             square=lambda a: f"_sq({a})", pos=lambda a: f"_pos({a})", log=lambda a: f"_log({a})")

_HELPERS = '''

def _value(row, name):
    if name not in row:
        raise KeyError("input column %r is missing from the row (pass None for a missing value)" % (name,))
    return row[name]


def _num(row, name, fill):
    """A number; None, NaN, an empty or missing-value text takes the training fill."""
    v = _value(row, name)
    if v is None:
        return fill
    if isinstance(v, str):
        v = v.strip()
        if v in _MISSING_TEXT:
            return fill
    v = float(v)
    return fill if v != v else v


def _cat(row, name):
    """A category as the text it was trained on; missing is the level ""."""
    v = _value(row, name)
    if v is None:
        return ""
    if isinstance(v, bool):
        return "True" if v else "False"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if v != v:
            return ""
        return str(int(v)) if v.is_integer() else repr(v)
    v = str(v).strip()
    return "" if v in _MISSING_TEXT else v


def _sq(v):
    return v * v


def _pos(v):
    return v if v > 0.0 else 0.0


def _log(v):
    """NaN for v <= 0 (only beyond the training range): the prediction is then missing."""
    return math.log(v) if v > 0.0 else float("nan")


def _finite(v):
    """A value that is not a finite number (a log of v <= 0, an overflow) is missing: None."""
    return v if math.isfinite(v) else None


def _exp(v):
    try:
        return math.exp(v)
    except OverflowError:  # numpy and JavaScript give infinity here
        return float("inf")


def _probabilities(etas):
    """Softmax written as 1 / sum(exp(e_j - e_k)): no overflow for large scores."""
    return [1.0 / sum(_exp(e - k) for e in etas) for k in etas]


def _classify(etas):
    if not all(math.isfinite(e) for e in etas):
        return {"label": None, "probabilities": {c: None for c in CLASSES}}
    p = _probabilities(etas)
    best = max(range(len(p)), key=lambda k: p[k])
    return {"label": CLASSES[best], "probabilities": dict(zip(CLASSES, p))}
'''


def _header(kind: str, meta: dict) -> list[str]:
    classes = meta.get("classes") or []
    return ['"""pocketforest ' + kind + ' export: call predict(row) with a dict keyed by column name.',
            "",
            "Standard library only. A missing value is None. Regression returns a number;",
            "classification returns {'label': ..., 'probabilities': {class: p, ...}}.",
            *(["Where the equation has no finite value, the prediction (label, probabilities) is None."]
              if kind == "equation" else []),
            "The target, task and classes are given below as data.",
            '"""',
            "import math",
            "",
            f"TARGET = {py_str(meta['target'])}",
            f"TASK = {py_str(meta['task'])}",
            f"CLASSES = ({''.join(py_str(c) + ', ' for c in classes)})",
            f"TOOL_VERSION = {py_str(meta['tool_version'])}",
            "",
            _missing_text(),
            _HELPERS]


def _missing_text() -> str:
    """The cell texts that mean "missing", read from intake's one list (so they cannot drift)."""
    return "_MISSING_TEXT = frozenset({" + ", ".join(py_str(t) for t in sorted(MISSING_TOKENS)) + "})"


def _bind(inputs: Inputs) -> list[str]:
    out = []
    for ref in inputs:
        if ref.kind == "numeric":
            out.append(f"    {ref.var} = _num(row, {py_str(ref.feature)}, {plain_number(ref.fill)})")
        else:
            out.append(f"    {ref.var} = _cat(row, {py_str(ref.feature)})")
    return out


def equation_py(eq, meta: dict) -> str:
    inputs = Inputs()
    etas = linear_predictors(eq, PY, inputs)
    lines = _header("equation", meta) + ["# " + eq.source_line, "", "def predict(row):"] + _bind(inputs)
    if eq.task == "regression":
        lines.append(f"    eta = {etas[0]}")
        lines.append("    return _finite(eta)" if eq.link == "identity" else "    return _finite(_exp(eta))")
    else:
        lines.append("    etas = [0.0]")
        for e in etas:
            lines.append(f"    etas.append({e})")
        lines.append("    return _classify(etas)")
    return "\n".join(lines) + "\n"


def tree_py(nodes: list[TreeNode], meta: dict) -> str:
    inputs = Inputs()
    leaves: dict[int, int] = {}
    body: list[str] = []

    def walk(i: int, depth: int) -> None:
        node, pad = nodes[i], "    " * depth
        if node.is_leaf:
            leaves[i] = len(leaves)
            body.append(f"{pad}leaf = {leaves[i]}")
            return
        if node.level is None:
            op, bound = double_split(node.threshold)
            body.append(f"{pad}if {inputs.numeric(node.feature, node.fill)} {op} {plain_number(bound)}:")
            walk(node.left, depth + 1)
            body.append(f"{pad}else:")
            walk(node.right, depth + 1)
        else:
            body.append(f"{pad}if {inputs.categorical(node.feature)} == {py_str(node.level)}:")
            walk(node.right, depth + 1)
            body.append(f"{pad}else:")
            walk(node.left, depth + 1)

    walk(0, 1)
    order = sorted(leaves, key=leaves.get)
    lines = _header("tree", meta)
    if meta["task"] == "regression":
        values = [num_literal(nodes[i].value[0]) for i in order]
        lines.append("_LEAVES = (")
        lines += ["    " + " ".join(v + "," for v in values[k:k + 4]) for k in range(0, len(values), 4)]
        lines.append(")")
    else:
        lines.append("_LEAVES = (")
        for i in order:
            lines.append("    (" + ", ".join(num_literal(p) for p in nodes[i].value) + ",),")
        lines.append(")")
    lines += ["", "", "def predict(row):"] + _bind(inputs) + body
    if meta["task"] == "regression":
        lines.append("    return _LEAVES[leaf]")
    else:
        lines += ["    p = _LEAVES[leaf]",
                  "    best = max(range(len(p)), key=lambda k: p[k])",
                  "    return {\"label\": CLASSES[best], \"probabilities\": dict(zip(CLASSES, p))}"]
    return "\n".join(lines) + "\n"
