"""All code exports of a distillation, printed from the one term model and the one tree.

``bundle.py`` calls :func:`all_exports` and :func:`collaborator_exports`; each printer lives in
its own module (SQL, Python, JavaScript, LaTeX, R, SPSS syntax, the workbook, the calculator page)
and walks the same expression trees and tree nodes.
"""
from __future__ import annotations

from .. import __version__
from .calculator import calculator_html
from .jscode import equation_js, tree_js
from .latex import equation_tex
from .pycode import equation_py, tree_py
from .rcode import equation_r, tree_r
from .spss import equation_sps
from .sql import equation_sql, tree_sql
from .tree_spec import TreeNode
from .workbook import equation_workbook

#: Files for the people who receive the equation: R, SPSS syntax, a workbook, a page.
COLLABORATOR_FILES = ("equation.R", "tree.R", "equation.sps", "equation.xlsx", "calculator.html")
#: Every file this module writes, in the order verify checks them.
FILES = ("equation.tex", "equation.sql", "equation.py", "equation.js", "tree.sql", "tree.py", "tree.js") + COLLABORATOR_FILES


def export_meta(target: str, task: str, classes: list[str] | None) -> dict:
    return {"target": target, "task": task, "classes": list(classes) if classes else None,
            "tool_version": __version__}


def code_exports(eq, nodes: list[TreeNode], meta: dict) -> dict[str, str]:
    """File name → text for an equation fit and tree nodes (usable without a whole run); the
    tree's files alone when ``eq`` is None (the rows could not support an equation)."""
    tree = {"tree.sql": tree_sql(nodes, meta), "tree.py": tree_py(nodes, meta), "tree.js": tree_js(nodes, meta)}
    if eq is None:
        return tree
    return {"equation.tex": equation_tex(eq, meta), "equation.sql": equation_sql(eq, meta),
            "equation.py": equation_py(eq, meta), "equation.js": equation_js(eq, meta), **tree}


def all_exports(r, nodes: list[TreeNode]) -> dict[str, str]:
    return code_exports(r.equation, nodes, export_meta(r.table.target, r.table.task, r.classes))


def collaborator_exports(eq, nodes: list[TreeNode], meta: dict, features: list, manifest_features: list[dict],
                         rows, created: str | None = None, cautions: list[str] = ()) -> dict[str, bytes]:
    """File name → bytes of the collaborators' forms. ``features``: the data's features;
    ``manifest_features``: their manifest entries (ranges, levels, fills); ``rows``: the reference
    input rows the workbook starts with. Without an equation (``eq`` None) only tree.R: the
    SPSS syntax and the workbook hold the equation alone, and the calculator page is the two
    surrogates side by side, so a tree-only page would be a different product."""
    if eq is None:
        return {"tree.R": tree_r(nodes, meta).encode()}
    return {"equation.R": equation_r(eq, meta).encode(), "tree.R": tree_r(nodes, meta).encode(),
            "equation.sps": equation_sps(eq, meta, features).encode(),
            "equation.xlsx": equation_workbook(eq, meta, features, rows, created, cautions),
            "calculator.html": calculator_html(eq, nodes, meta, manifest_features, cautions).encode()}
