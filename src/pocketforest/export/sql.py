"""SQL exports: one ``SELECT`` over a table named ``input_rows`` that runs unchanged in SQLite
(3.35 or newer, with its math functions) and DuckDB.

The statement returns ``input_rows.*`` plus ``prediction`` (regression) or ``label`` and
``prob_<class>`` (classification). Each output column is a correlated scalar subquery whose
innermost level reads and imputes the inputs once, so nothing from the data has to be named
except through quoted identifiers (double quotes, embedded quotes doubled) and string literals
(single quotes, embedded quotes doubled). A missing value is ``NULL`` or a missing-value text
(``'NA'``, ``'null'``, ... as in intake); categories are compared as text without surrounding
spaces (``TRIM(CAST(... AS VARCHAR))``), numbers as doubles (``CAST(... AS DOUBLE)``). Numbers are printed
in exponent form (``2.5e0``) so DuckDB reads them as DOUBLE rather than DECIMAL.
"""
from __future__ import annotations

from ..expr import num_literal, sql_ident, sql_string
from ..intake.values import MISSING_TOKENS
from ..thresholds import double_split
from .dialect import Dialect, Inputs, linear_predictors
from .tree_spec import TreeNode


def sql_number(value: float) -> str:
    text = num_literal(value)
    if "e" not in text:
        text += "e0"
    return f"({text})" if text.startswith("-") else text


def _pos(a: str) -> str:
    return f"CASE WHEN {a} > 0 THEN {a} ELSE 0.0e0 END"


def _log(a: str) -> str:
    # LN of a non-positive value is NULL in SQLite and an error in DuckDB: make it NULL in both
    return f"CASE WHEN {a} > 0 THEN LN({a}) END"


SQL = Dialect(number=sql_number, text=sql_string,
              is_level=lambda var, lit: f"CASE WHEN {var} = {lit} THEN 1.0e0 ELSE 0.0e0 END",
              square=lambda a: f"({a}) * ({a})", pos=_pos, log=_log)

_HEADER = """-- pocketforest {kind} export: one SELECT over the table input_rows.
-- Returns every column of input_rows plus the prediction columns. A missing value is NULL or
-- a missing-value text such as 'NA' (surrounding spaces ignored).
-- Runs unchanged in SQLite (3.35+, math functions) and DuckDB.
"""


def _read_inputs(inputs: Inputs) -> str:
    """The innermost level: each input read once from the outer row, imputed, as a generated name.

    A cell is missing when it is NULL or its text, without surrounding spaces, is one of intake's
    missing-value tokens (so ``'NA'`` in a text column, or a DuckDB NaN, which prints as ``nan``):
    the same rule as ``score`` and the Python and JavaScript exports.
    """
    parts = []
    missing = "(" + ", ".join(sql_string(t) for t in sorted(MISSING_TOKENS)) + ")"
    for ref in inputs:
        col = f"input_rows.{sql_ident(ref.feature)}"
        text = f"TRIM(CAST({col} AS VARCHAR))"
        if ref.kind == "numeric":
            parts.append(f"CASE WHEN {col} IS NULL OR {text} IN {missing} THEN {sql_number(ref.fill)} "
                         f"ELSE CAST({col} AS DOUBLE) END AS {ref.var}")
        else:
            parts.append(f"CASE WHEN {col} IS NULL OR {text} IN {missing} THEN '' ELSE {text} END AS {ref.var}")
    return "SELECT " + ", ".join(parts) if parts else "SELECT 0 AS unused"


def _statement(kind: str, outputs: list[tuple[str, str]]) -> str:
    cols = ",\n".join(f"  ({expr}) AS {sql_ident(name)}" for name, expr in outputs)
    return _HEADER.format(kind=kind) + f"SELECT\n  input_rows.*,\n{cols}\nFROM input_rows\n"


def _argmax_case(scores: list[str], labels: list[str]) -> str:
    """The first label whose score is largest (ties to the earlier class, as numpy's argmax)."""
    whens = []
    for i in range(len(scores) - 1):
        cond = " AND ".join([f"{scores[i]} > {scores[j]}" for j in range(i)] +
                            [f"{scores[i]} >= {scores[j]}" for j in range(i + 1, len(scores))])
        whens.append(f"WHEN {cond} THEN {sql_string(labels[i])}")
    return "CASE " + " ".join(whens) + f" ELSE {sql_string(labels[-1])} END"


#: The largest finite double; ``ABS(v) <= LARGEST`` is false for ±inf, NaN (DuckDB) and NULL.
LARGEST = "1.7976931348623157e308"


def equation_sql(eq, meta: dict) -> str:
    return "-- " + eq.source_line + "\n" + _equation_sql(eq, meta)


def _equation_sql(eq, meta: dict) -> str:
    """Where the equation has no finite value (the log of a value <= 0, an overflow) every output
    is NULL, as every other form gives a missing prediction there."""
    inputs = Inputs(prefix="i.")
    etas = linear_predictors(eq, SQL, inputs)
    inner = _read_inputs(inputs)
    if eq.task == "regression":
        value = "e.eta_1" if eq.link == "identity" else "EXP(e.eta_1)"
        scores = f"SELECT {etas[0]} AS eta_1 FROM ({inner}) AS i"
        means = f"SELECT {value} AS mean FROM ({scores}) AS e"
        return _statement("equation", [("prediction", f"SELECT CASE WHEN ABS(m.mean) <= {LARGEST} THEN m.mean END "
                                                      f"FROM ({means}) AS m")])
    names = ["0.0e0"] + [f"e.eta_{k + 1}" for k in range(len(etas))]
    finite = " AND ".join(f"ABS({n}) <= {LARGEST}" for n in names[1:])
    scores = "SELECT " + ", ".join(f"{x} AS eta_{k + 1}" for k, x in enumerate(etas)) + f" FROM ({inner}) AS i"
    outputs = [("label", f"SELECT CASE WHEN {finite} THEN {_argmax_case(names, eq.classes)} END FROM ({scores}) AS e")]
    for k, cls in enumerate(eq.classes):
        denom = " + ".join(f"EXP({names[j]} - {names[k]})" for j in range(len(names)))
        outputs.append((f"prob_{cls}", f"SELECT CASE WHEN {finite} THEN 1.0e0 / ({denom}) END FROM ({scores}) AS e"))
    return _statement("equation", outputs)


def _tree_case(nodes: list[TreeNode], i: int, inputs: Inputs, leaf, depth: int = 1) -> str:
    node = nodes[i]
    if node.is_leaf:
        return leaf(node)
    pad = "  " * (depth + 1)
    if node.level is None:
        op, bound = double_split(node.threshold)
        cond = f"{inputs.numeric(node.feature, node.fill)} {op} {sql_number(bound)}"
        first, second = node.left, node.right
    else:
        cond = f"{inputs.categorical(node.feature)} = {sql_string(node.level)}"
        first, second = node.right, node.left
    return (f"CASE WHEN {cond}\n{pad}THEN {_tree_case(nodes, first, inputs, leaf, depth + 1)}\n"
            f"{pad}ELSE {_tree_case(nodes, second, inputs, leaf, depth + 1)} END")


def tree_sql(nodes: list[TreeNode], meta: dict) -> str:
    task, classes = meta["task"], meta.get("classes")
    inputs = Inputs(prefix="i.")
    if task == "regression":
        case = _tree_case(nodes, 0, inputs, lambda n: sql_number(n.value[0]))
        return _statement("tree", [("prediction", f"SELECT {case} FROM ({_read_inputs(inputs)}) AS i")])

    def label(n: TreeNode) -> str:
        best = max(range(len(n.value)), key=lambda k: n.value[k])
        return sql_string(classes[best])

    outputs = [("label", _tree_case(nodes, 0, inputs, label))]
    for k, cls in enumerate(classes):
        outputs.append((f"prob_{cls}", _tree_case(nodes, 0, inputs, lambda n, k=k: sql_number(n.value[k]))))
    inner = _read_inputs(inputs)
    return _statement("tree", [(name, f"SELECT {case} FROM ({inner}) AS i") for name, case in outputs])
