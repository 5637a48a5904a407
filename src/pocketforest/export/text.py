"""Plain-text printers: the equation and the tree as a person reads them."""
from __future__ import annotations

import json

from ..equation import EquationFit
from ..expr import num_literal
from ..terms import level_label
from .tree_spec import TreeNode


def equation_text(eq: EquationFit, fills: dict, kinds: dict) -> str:
    lines = [f"# Equation for {eq.target} ({eq.family} family, {eq.link} link)",
             f"# {eq.source_line}; formula:",
             f"#   {eq.formula}", "#",
             "# Missing inputs: numbers take the value below, categories count as the level '(missing)'."]
    for name, kind in kinds.items():
        if kind == "numeric":
            lines.append(f"#   {name}: {num_literal(fills[name])}")
    lines.append("")
    blocks = [(None, eq.coef)] if eq.coef.ndim == 1 else [(eq.classes[k + 1], eq.coef[:, k]) for k in range(eq.coef.shape[1])]
    for cls, coef in blocks:
        head = "eta" if cls is None else f"eta[{cls}]"
        lines.append(f"{head} =")
        lines.append(f"    {num_literal(coef[0])}")
        for c, b in zip(eq.columns, coef[1:]):
            lines.append(f"  + {num_literal(b)} * {c.label}")
        lines.append("")
    if eq.task == "regression":
        lines.append("prediction = eta" if eq.link == "identity" else "prediction = exp(eta)")
    elif len(eq.classes) == 2:
        lines.append(f"P({eq.target} = {eq.classes[1]}) = 1 / (1 + exp(-eta)); "
                     f"P({eq.target} = {eq.classes[0]}) = 1 - that")
    else:
        lines.append(f"P({eq.target} = k) = exp(eta[k]) / sum_j exp(eta[j]), with eta[{eq.classes[0]}] = 0")
    lines.append("[v = level] is 1 when the column equals that level, else 0; an unseen level counts as the reference.")
    return "\n".join(lines + [""] + spreadsheet_text(eq, list(kinds))) + "\n"


def spreadsheet_text(eq: EquationFit, order: list[str]) -> list[str]:
    """One-cell spreadsheet formulas for pasting, with where their inputs go. Names are shown as
    JSON strings, so none can start a line of its own; the formulas come last in the file."""
    from .workbook import CELL_PREFIX, cell_formulas
    columns, formulas = cell_formulas(eq, order)
    out = ["# Spreadsheet (Excel, LibreOffice Calc): put the inputs in row 2, one column each:",
           "#   " + ", ".join(f"{col} = {json.dumps(name, ensure_ascii=False)}" for col, name in columns),
           "# then paste a formula below (from its '=') into another cell of row 2; fill down for more rows.",
           "# A blank cell is a missing value. equation.xlsx holds the same with the coefficients by cell."]
    for k, (what, formula) in enumerate(formulas, start=1):
        out.append(f"#   formula {k} gives {json.dumps(what, ensure_ascii=False)}"
                   + (f" ({len(formula):,} characters: longer than Excel's 8,192 for a cell, use equation.xlsx)"
                      if len(formula) > 8192 else ""))
    out += [f"{CELL_PREFIX}{k}: {formula}" for k, (_, formula) in enumerate(formulas, start=1)]
    return out


def _leaf_text(node: TreeNode, task: str, classes: list[str] | None) -> str:
    if task == "regression":
        return f"predict {node.value[0]:.6g}"
    best = max(range(len(node.value)), key=lambda k: node.value[k])
    probs = ", ".join(f"{c}: {p:.3f}" for c, p in zip(classes, node.value))
    return f"predict {classes[best]} ({probs})"


def tree_text(nodes: list[TreeNode], task: str, target: str, classes: list[str] | None) -> str:
    """Indented if/else rules with the discovery rows reaching each node: one line per leaf and
    two per split, under a three-line heading."""
    leaves = sum(n.is_leaf for n in nodes)
    lines = [f"# Surrogate tree for {target}, {leaves} leaves: rules read top to bottom; "
             "n = discovery rows reaching the node.",
             "# A missing number takes the value noted at its split; a missing category is the level '(missing)'.", ""]

    def walk(i: int, depth: int) -> None:
        node = nodes[i]
        pad = "    " * depth
        if node.is_leaf:
            lines.append(f"{pad}{_leaf_text(node, task, classes)}   [n = {node.samples}]")
            return
        if node.level is None:
            cond = f"{node.feature} <= {node.threshold:.7g}"
            miss = f" (missing = {node.fill:.7g})"
        else:
            cond = f"{node.feature} != {level_label(node.level)}"
            miss = ""
        lines.append(f"{pad}if {cond}{miss}:   [n = {node.samples}]")
        walk(node.left, depth + 1)
        lines.append(f"{pad}else:")
        walk(node.right, depth + 1)

    walk(0, 0)
    return "\n".join(lines) + "\n"
