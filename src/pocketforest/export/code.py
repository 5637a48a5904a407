"""All code exports of a distillation, printed from the one term model and the one tree.

``bundle.py`` calls :func:`all_exports`; each printer lives in its own module (SQL, Python,
JavaScript, LaTeX) and walks the same expression trees and tree nodes.
"""
from __future__ import annotations

from .. import __version__
from .jscode import equation_js, tree_js
from .latex import equation_tex
from .pycode import equation_py, tree_py
from .sql import equation_sql, tree_sql
from .tree_spec import TreeNode

#: Every file this module writes, in the order verify checks them.
FILES = ("equation.tex", "equation.sql", "equation.py", "equation.js", "tree.sql", "tree.py", "tree.js")


def export_meta(target: str, task: str, classes: list[str] | None) -> dict:
    return {"target": target, "task": task, "classes": list(classes) if classes else None,
            "tool_version": __version__}


def code_exports(eq, nodes: list[TreeNode], meta: dict) -> dict[str, str]:
    """File name → text for an equation fit and tree nodes (usable without a whole run)."""
    return {"equation.tex": equation_tex(eq, meta), "equation.sql": equation_sql(eq, meta),
            "equation.py": equation_py(eq, meta), "equation.js": equation_js(eq, meta),
            "tree.sql": tree_sql(nodes, meta), "tree.py": tree_py(nodes, meta), "tree.js": tree_js(nodes, meta)}


def all_exports(r, nodes: list[TreeNode]) -> dict[str, str]:
    return code_exports(r.equation, nodes, export_meta(r.table.target, r.table.task, r.classes))
