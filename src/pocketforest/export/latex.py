"""LaTeX export of the equation: a small standalone document (amsmath) a person can typeset
with pdfLaTeX, XeLaTeX or LuaLaTeX.

Column names and levels are set in ``\\text{...}`` with every LaTeX special character escaped, so
a name can never open a command or leave math mode.
"""
from __future__ import annotations

import numpy as np

from .dialect import Dialect, Inputs, print_expr

_SPECIAL = {"\\": r"\textbackslash{}", "{": r"\{", "}": r"\}", "$": r"\$", "&": r"\&", "#": r"\#",
            "_": r"\_", "%": r"\%", "^": r"\textasciicircum{}", "~": r"\textasciitilde{}",
            "\n": " ", "\r": " ", "\t": " ",
            # ligatures would turn -- into a dash and '' or `` into curly quotes
            "-": "-{}", "'": r"\textquotesingle{}", "`": r"\textasciigrave{}"}


def tex_escape(value: str) -> str:
    return "".join(_SPECIAL.get(ch, ch) for ch in str(value))


def tex_text(value: str) -> str:
    return r"\text{" + tex_escape(value) + "}"


def tex_number(value: float, digits: int = 6) -> str:
    """A readable number: 6 significant digits, powers of ten written out."""
    text = f"{float(value):.{digits}g}"
    if "e" in text:
        mant, exp = text.split("e")
        text = rf"{mant} \times 10^{{{int(exp)}}}"
    return text


def _signed(value: float) -> str:
    return f"({tex_number(value)})" if value < 0 else tex_number(value)


TEX = Dialect(number=_signed, text=lambda s: "``" + tex_escape(s if s else "(missing)") + "''",
              is_level=lambda var, lit: rf"[{var} = \text{{{lit}}}]",
              square=lambda a: rf"{a}^{{2}}", pos=lambda a: rf"\max(0, {a})", log=lambda a: rf"\log {a}",
              times=r" \cdot ")


class _Names(Inputs):
    """In LaTeX an input is shown by its (escaped) column name, not a generated one."""

    def numeric(self, feature: str, fill: float) -> str:
        super().numeric(feature, fill)
        return tex_text(feature)

    def categorical(self, feature: str) -> str:
        super().categorical(feature)
        return tex_text(feature)


def equation_tex(eq, meta: dict) -> str:
    inputs = _Names()
    design = [print_expr(c.node, TEX, inputs) for c in eq.columns]
    coef = np.asarray(eq.coef, dtype=float)
    blocks = [(None, coef)] if coef.ndim == 1 else [(eq.classes[k + 1], coef[:, k]) for k in range(coef.shape[1])]
    out = [r"\documentclass{article}", r"\usepackage{amsmath}", r"\usepackage{iftex}", r"\ifPDFTeX",
           r"\usepackage[utf8]{inputenc}", r"\usepackage[T1]{fontenc}", "@UNICODE@", r"\fi",
           r"\begin{document}",
           rf"\section*{{Equation for {tex_text(eq.target)}}}",
           rf"{eq.family.capitalize()} family, {eq.link} link, fitted on the {tex_escape(eq.fit_on)} rows "
           rf"($n = {eq.n}$, {tex_escape(eq.method)})"
           + (rf"; the p-values and intervals for a paper come from the {tex_escape(eq.inference.fit_on)} rows "
              r"alone (see the report)" if eq.inference is not None else "")
           + r". Exact coefficients are in \texttt{equation.txt}; "
           r"$[v = \text{level}]$ is 1 when the column equals that level and 0 otherwise.", ""]
    for cls, b in blocks:
        head = r"\eta" if cls is None else rf"\eta_{{{tex_text(cls)}}}"
        out.append(r"\begin{align*}")
        rows = [f"{head} &= {tex_number(b[0])}"]
        for w, x in zip(b[1:], design):
            sign = "-" if w < 0 else "+"
            rows.append(rf"&\quad {sign} {tex_number(abs(w))} \cdot {x}")
        out.append(" \\\\\n".join(rows))
        out.append(r"\end{align*}")
    if eq.task == "regression":
        out.append(r"\[ \hat{y} = \eta \]" if eq.link == "identity" else r"\[ \hat{y} = e^{\eta} \]")
    elif len(eq.classes) == 2:
        out.append(rf"\[ P({tex_text(eq.target)} = {tex_text(eq.classes[1])}) = \frac{{1}}{{1 + e^{{-\eta}}}} \]")
    else:
        out.append(rf"\[ P({tex_text(eq.target)} = k) = \frac{{e^{{\eta_k}}}}{{\sum_j e^{{\eta_j}}}}, "
                   rf"\quad \eta_{{{tex_text(eq.classes[0])}}} = 0 \]")
    fills = [(r.feature, r.fill) for r in inputs if r.kind == "numeric"]
    if fills:
        out.append(r"\noindent Missing numbers take these values: " +
                   "; ".join(f"{tex_text(f)} $= {tex_number(v)}$" for f, v in fills) + ".")
    out.append(r"\end{document}")
    text = "\n".join(out) + "\n"
    return text.replace("@UNICODE@", _pdftex_fallbacks(text))


def _pdftex_fallbacks(text: str) -> str:
    """pdfLaTeX stops at a character its fonts lack (CJK, emoji, ...): show those as their code
    point there; XeLaTeX and LuaLaTeX get the characters themselves."""
    lines = [f"\\DeclareUnicodeCharacter{{{ord(ch):04X}}}{{\\texttt{{<U+{ord(ch):04X}>}}}}"
             for ch in sorted(set(text)) if ord(ch) > 0x24F]
    return "\n".join(lines) if lines else "%"


__all__ = ["equation_tex", "tex_escape"]
