"""SPSS syntax of the equation: COMPUTE statements that add the prediction to the active dataset.

Runs in IBM SPSS Statistics and in GNU PSPP (where verify checks it). The file reads variables
named by :func:`spss_names` (a column name SPSS cannot carry is mapped, and the mapping is in
``manifest.features[].spss_name``), works in scratch variables (``#x0``, ``#c1``, ...) that SPSS
discards after the next procedure, and adds ``pred_equation`` (regression) or ``label_equation``
and ``prob_equation_1..K`` (classification, in the order of the manifest's classes).

Missing values use SPSS's own rules: ``MISSING()`` is true for system- and user-missing numbers,
which take the training fill; a string that is blank (or reads NA, NULL, ...) is the missing
level. Every string from the data is a quoted literal with its quote doubled when it holds only
printable ASCII, and otherwise a hexadecimal literal ``X'...'`` of its UTF-8 bytes (SPSS in
Unicode mode, the default since version 21), so no value can end a literal or a command.
"""
from __future__ import annotations

import re

from ..intake.values import MISSING_TOKENS
from .breakdown import blocks
from .dialect import Dialect, Inputs, plain_number, print_expr

_MISSING_TEXT = tuple(sorted(MISSING_TOKENS))     # intake's one list, as in every export
_RESERVED = {"ALL", "AND", "BY", "EQ", "GE", "GT", "LE", "LT", "NE", "NOT", "OR", "TO", "WITH"}
_VALID = re.compile(r"^[A-Za-z@][A-Za-z0-9_.@#$]*$")
MAX_NAME_BYTES = 64
WIDTH = 78


def sps_str(value: str) -> str:
    """A string literal SPSS reads back exactly: 'it''s', or X'...' for anything unusual."""
    text = str(value)
    if all(32 <= ord(ch) < 127 for ch in text):
        return "'" + text.replace("'", "''") + "'"
    return "X'" + text.encode("utf-8").hex().upper() + "'"


def _valid(name: str) -> bool:
    return (bool(_VALID.match(name)) and len(name.encode("utf-8")) <= MAX_NAME_BYTES
            and name.upper() not in _RESERVED and not name.endswith((".", "_")))


def spss_names(names: list[str], taken: set[str] | None = None) -> dict[str, str]:
    """Column name → an SPSS variable name: the name itself where SPSS allows it, otherwise its
    letters and digits with "_" between, starting with a letter, at most 64 bytes; unique without
    regard to case (SPSS names are case-insensitive)."""
    used = {t.upper() for t in (taken or set())}
    out: dict[str, str] = {}
    for name in names:
        base = name if _valid(name) else _sanitise(name)
        cand, k = base, 1
        while cand.upper() in used:
            k += 1
            suffix = f"_{k}"
            cand = base[:MAX_NAME_BYTES - len(suffix)].rstrip("._") + suffix
        used.add(cand.upper())
        out[name] = cand
    return out


def _sanitise(name: str) -> str:
    core = re.sub(r"[^A-Za-z0-9]+", "_", name).strip("_")
    if not core or not core[0].isalpha():
        core = "v_" + core if core else "v"
    core = core[:MAX_NAME_BYTES].rstrip("._")
    return core + "_v" if core.upper() in _RESERVED else core


SPSS = Dialect(number=plain_number, text=sps_str, is_level=lambda var, lit: f"({var} = {lit})",
               square=lambda a: f"{a}**2", pos=lambda a: f"MAX({a}, 0)", log=lambda a: f"LN({a})")


class _Codes(Inputs):
    """Numeric inputs become scratch variables ``#x0``...; each categorical input becomes one
    scratch code ``#c1`` (0 = no known level, k = the k-th level the equation compares with), so
    a string is trimmed and compared once per case."""

    def __init__(self) -> None:
        super().__init__(prefix="#")
        self.levels: dict[str, list[str]] = {}

    def level(self, feature: str, level: str, d: Dialect) -> str:
        levels = self.levels.setdefault(feature, [])
        if level not in levels:
            levels.append(level)
        return f"({self.categorical(feature)} = {levels.index(level) + 1})"


def _wrap(text: str, indent: str = "    ") -> list[str]:
    """Break a long command between terms (at " + "), continuation lines indented."""
    parts = text.split(" + ")
    lines, cur = [], parts[0]
    for p in parts[1:]:
        if len(cur) + 3 + len(p) > WIDTH:
            lines.append(cur + " +")
            cur = indent + p
        else:
            cur += " + " + p
    return lines + [cur]


def equation_sps(eq, meta: dict, features: list) -> str:
    """``features``: the data's features in manifest order (name, kind)."""
    names = spss_names([f.name for f in features])
    codes = _Codes()
    design = [print_expr(c.node, SPSS, codes) for c in eq.columns]
    coef_blocks = blocks(eq)
    outputs = _output_names(eq, set(names.values()))
    kinds = ", ".join(f"{names[f.name]} ({'number' if f.kind == 'numeric' else 'string'})" for f in features
                      if any(r.feature == f.name for r in codes))
    lines = ["* pocketforest equation export: SPSS syntax (checked in GNU PSPP).",
             "* Run it with the data open: it adds " + ", ".join(outputs) + ".",
             "* Variables read (their original column names are manifest.json features[].spss_name):"]
    lines += ["*   " + ln.strip() for ln in _wrap_words(kinds)]
    lines += ["* A missing number (system- or user-missing) takes the training fill below; a blank string",
              "* (or NA, NULL, ...) is the missing level; a level never seen in training matches none.",
              "* Strings holding anything but printable ASCII are written as X'...' (UTF-8 bytes).",
              ""]
    lines += _bind(codes, names)
    for k, (cls, coef) in enumerate(coef_blocks, start=1):
        terms = [plain_number(coef[0])] + [f"{plain_number(b)} * {x}" for b, x in zip(coef[1:], design)]
        lines += _wrap(f"COMPUTE #eta{k} = " + " + ".join(terms) + ".")
    if eq.task == "regression":
        if eq.link == "identity":
            lines.append(f"COMPUTE {outputs[0]} = #eta1.")
        else:
            # PSPP returns system-missing when EXP underflows, where the other forms give a mean
            # below 1e-304 or exactly 0: below -700 the mean is 0. A missing #eta1 skips the whole
            # DO IF, so the prediction stays system-missing, as in the other forms.
            lines += ["DO IF (#eta1 < -700).", f"  COMPUTE {outputs[0]} = 0.", "ELSE.",
                      f"  COMPUTE {outputs[0]} = EXP(#eta1).", "END IF."]
        lines.append(f"VARIABLE LABELS {outputs[0]} {sps_str('Equation prediction of ' + str(eq.target))}.")
    else:
        lines += _classify(eq, outputs, len(coef_blocks))
    lines += ["EXECUTE.", ""]
    return "\n".join(lines)


def _output_names(eq, taken: set[str]) -> list[str]:
    wanted = (["pred_equation"] if eq.task == "regression" else
              ["label_equation"] + [f"prob_equation_{k}" for k in range(1, len(eq.classes) + 1)])
    return list(spss_names(wanted, taken).values())


def _wrap_words(text: str) -> list[str]:
    lines, cur = [], ""
    for w in text.split(", "):
        if cur and len(cur) + len(w) + 2 > WIDTH - 4:
            lines.append(cur + ",")
            cur = w
        else:
            cur = f"{cur}, {w}" if cur else w
    return lines + ([cur] if cur else [])


def _bind(codes: _Codes, names: dict[str, str]) -> list[str]:
    out = []
    missing = ", ".join(sps_str(t) for t in _MISSING_TEXT)
    for ref in codes:
        var = names[ref.feature]
        if ref.kind == "numeric":
            out += [f"COMPUTE #{ref.var} = {var}.", f"IF (MISSING({var})) #{ref.var} = {plain_number(ref.fill)}."]
            continue
        out.append(f"COMPUTE #{ref.var} = 0.")
        trimmed = f"RTRIM(LTRIM({var}))"
        for k, level in enumerate(codes.levels.get(ref.feature, []), start=1):
            cond = f"ANY({trimmed}, {missing})" if level == "" else f"{trimmed} = {sps_str(level)}"
            out.append(f"IF ({cond}) #{ref.var} = {k}.")
    return out


def _classify(eq, outputs: list[str], n_blocks: int) -> list[str]:
    label, probs = outputs[0], outputs[1:]
    etas = ["0"] + [f"#eta{k}" for k in range(1, n_blocks + 1)]
    width = max(1, max(len(str(c).encode("utf-8")) for c in eq.classes))
    # A class score without a value leaves every probability system-missing and the label blank,
    # as in the other forms. The test is spelled out because MAX and sums of SPSS functions skip
    # missing arguments; scratch variables keep their value from the case before, so #best is
    # reset first.
    missing = " + ".join(f"MISSING({e})" for e in etas[1:]) or "0"
    lines = [f"STRING {label} (A{width}).", "COMPUTE #best = 0."]
    lines += _wrap(f"DO IF ({missing} = 0).")
    # softmax after subtracting the largest score, so EXP never overflows; PSPP also returns
    # system-missing when EXP underflows, so exponents stop at -700 (EXP(-700) < 1e-304: a
    # probability that small is 0 for every purpose, and the other forms give 0 there)
    body = [f"COMPUTE #top = MAX({', '.join(etas)})."]
    body += [f"COMPUTE #w{k} = EXP(MAX({e} - #top, -700))." for k, e in enumerate(etas)]
    body += _wrap("COMPUTE #sum = " + " + ".join(f"#w{k}" for k in range(len(etas))) + ".")
    body += [f"COMPUTE {p} = #w{k} / #sum." for k, p in enumerate(probs)]
    body += ["COMPUTE #best = 1.", f"COMPUTE #most = {probs[0]}."]
    for k, p in enumerate(probs[1:], start=2):   # the first largest probability, as elsewhere
        body += [f"DO IF ({p} > #most).", f"  COMPUTE #best = {k}.", f"  COMPUTE #most = {p}.", "END IF."]
    lines += ["  " + ln for ln in body] + ["END IF."]
    for k, cls in enumerate(eq.classes, start=1):
        lines.append(f"IF (#best = {k}) {label} = {sps_str(cls)}.")
    lines.append(f"VARIABLE LABELS {label} {sps_str('Equation label of ' + str(eq.target))}.")
    for p, cls in zip(probs, eq.classes):
        lines.append(f"VARIABLE LABELS {p} {sps_str(f'P({eq.target} = {cls})')}.")
    return lines
