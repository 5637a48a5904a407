"""The equation typeset as MathML, printed from the same expression trees as every other export.

Browsers render MathML Core natively, so the page needs no script and no web font. Each design
column becomes one line ``± |β| · term``; long equations therefore wrap by line instead of running
off the page, and print cleanly.
"""
from __future__ import annotations

import html

import numpy as np

from ..expr import Const, Is, Log, Node, Num, Pos, Prod, Square, Sub


def _e(x) -> str:
    return html.escape(str(x))


def mi(name: str) -> str:
    return f"<mi>{_e(name)}</mi>" if len(name) == 1 else f"<mi mathvariant='normal'>{_e(name)}</mi>"


def mn(value: float) -> str:
    return f"<mn>{_e(f'{value:.4g}')}</mn>"


def paren(inner: str) -> str:
    return f"<mrow><mo>(</mo>{inner}<mo>)</mo></mrow>"


def node_mathml(node: Node, top: bool = True) -> str:
    """MathML for one expression tree (``top``: no outer parentheses needed)."""
    if isinstance(node, Num):
        return mi(node.feature)
    if isinstance(node, Is):
        level = node.level if node.level else "(missing)"
        return f"<mrow><mo>[</mo>{mi(node.feature)}<mo>=</mo><mtext>{_e(level)}</mtext><mo>]</mo></mrow>"
    if isinstance(node, Const):
        return mn(node.value) if node.value >= 0 else paren(f"<mo>−</mo>{mn(-node.value)}")
    if isinstance(node, Sub):
        right = node.right
        if isinstance(right, Const) and right.value == 0:
            return node_mathml(node.left, top)
        if isinstance(right, Const) and right.value < 0:
            inner = f"{node_mathml(node.left, False)}<mo>+</mo>{mn(-right.value)}"
        else:
            inner = f"{node_mathml(node.left, False)}<mo>−</mo>{node_mathml(right, False)}"
        return f"<mrow>{inner}</mrow>" if top else paren(inner)
    if isinstance(node, Prod):
        inner = "<mo>·</mo>".join(node_mathml(i, False) for i in node.items)
        return f"<mrow>{inner}</mrow>" if top else paren(inner)
    if isinstance(node, Square):
        return f"<msup>{node_mathml(node.arg, False)}<mn>2</mn></msup>"
    if isinstance(node, Pos):
        return f"<mrow><mi>max</mi><mo>(</mo><mn>0</mn><mo>,</mo>{node_mathml(node.arg, True)}<mo>)</mo></mrow>"
    if isinstance(node, Log):
        return f"<mrow><mi>log</mi><mo>⁡</mo>{paren(node_mathml(node.arg, True))}</mrow>"
    raise TypeError(f"unknown node {node!r}")


def lhs_mathml(eq, target: str, cls: str | None = None) -> str:
    """Left-hand side for the link: ŷ, log μ, the log-odds, or a log ratio against the first class."""
    t = mi(target)
    if eq.task == "regression":
        if eq.link == "log":
            return f"<mrow><mi>log</mi><mo>⁡</mo><mi>E</mi><mo>[</mo>{t}<mo>]</mo></mrow>"
        if len(target) == 1:
            return f"<mover accent='true'>{t}<mo>^</mo></mover>"
        return f"<mrow><mtext>predicted</mtext><mspace width='0.3em'></mspace>{t}</mrow>"
    classes = eq.classes
    if len(classes) == 2:
        p = f"<mi>P</mi><mo>(</mo>{t}<mo>=</mo><mtext>{_e(classes[1])}</mtext><mo>)</mo>"
        return (f"<mrow><mi>log</mi><mo>⁡</mo><mfrac><mrow>{p}</mrow>"
                f"<mrow><mn>1</mn><mo>−</mo>{p}</mrow></mfrac></mrow>")
    num = f"<mi>P</mi><mo>(</mo>{t}<mo>=</mo><mtext>{_e(cls)}</mtext><mo>)</mo>"
    den = f"<mi>P</mi><mo>(</mo>{t}<mo>=</mo><mtext>{_e(classes[0])}</mtext><mo>)</mo>"
    return f"<mrow><mi>log</mi><mo>⁡</mo><mfrac><mrow>{num}</mrow><mrow>{den}</mrow></mfrac></mrow>"


def equation_blocks(eq, target: str) -> list[tuple[str | None, str]]:
    """One (class or None, HTML) block per linear predictor: a small table of MathML lines."""
    coef = np.asarray(eq.coef, dtype=float)
    if coef.ndim == 1:
        coef = coef[:, None]
        labels = [None]
    else:
        labels = list(eq.classes[1:])
    blocks = []
    for k, cls in enumerate(labels):
        b = coef[:, k]
        rows = [f"<tr><td class='lhs'><math>{lhs_mathml(eq, target, cls)}<mo>=</mo></math></td>"
                f"<td><math>{mn(b[0]) if b[0] >= 0 else '<mo>−</mo>' + mn(-b[0])}</math></td></tr>"]
        for col, beta in zip(eq.columns, b[1:]):
            sign = "+" if beta >= 0 else "−"
            rows.append(f"<tr><td></td><td><math><mo>{sign}</mo>{mn(abs(beta))}<mo>·</mo>"
                        f"{node_mathml(col.node, isinstance(col.node, Prod))}</math></td></tr>")
        blocks.append((cls, "<table class='eqn'>" + "".join(rows) + "</table>"))
    return blocks
