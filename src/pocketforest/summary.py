"""The terminal summary after `distill`, its JSON twin for ``--json``, and the text of
``Distillation.summary()`` and ``repr`` for a notebook.

The text is printed from the dictionary that ``--json`` prints, so the two always show the same
numbers: a compact scoreboard, the surrogates' fidelity and loss with intervals, the formula, the
bundle path and the command that opens the report. ``summary()`` shows the same scoreboard for a
result not yet written, with the equation's coefficients, as a statsmodels results summary does.
"""
from __future__ import annotations

import shlex
import sys
from pathlib import Path

MODELS = ("forest", "tree", "equation")


def open_command(report: str, platform: str | None = None) -> str:
    """The usual command that opens a file in the desktop's browser on this platform."""
    platform = platform or sys.platform
    quoted = shlex.quote(report)
    if platform == "darwin":
        return f"open {quoted}"
    if platform.startswith("win"):
        return f'start "" "{report}"'
    return f"xdg-open {quoted}"


def result_dict(r) -> dict:
    """The numbers of a :class:`~pocketforest.pipeline.Distillation`, before any bundle exists."""
    return {"task": r.table.task, "target": r.table.target, "splits": r.splits.sizes(),
            "oob": r.forest.oob, "evaluation": r.evaluation, "fidelity": r.fidelity, "loss": r.loss,
            "formula": r.equation.formula if r.equation is not None else None,
            "tree": {"depth": r.tree.depth, "leaves": r.tree.leaves},
            "importance": [i.to_dict() for i in r.importance], "warnings": r.warnings,
            "plan": r.plan.to_dict() if r.plan is not None else None,
            **({"equation_absent": r.no_equation.to_dict()} if r.no_equation is not None else {})}


def summary_dict(r, path: str) -> dict:
    report = str(Path(path) / "report.html")
    return {"bundle": path, **result_dict(r), "report": report, "open_report": open_command(report),
            "verify": f"pocketforest verify {shlex.quote(path)}",
            **({"sample": r.sample} if getattr(r, "sample", None) else {})}


def _f(v, fmt: str) -> str:
    return "–" if v is None else format(v, fmt)


GAP = "    "  # between the text columns (fidelity, loss) and their neighbours


def aligned_columns(rows: list[list[str]], right: list[bool]) -> list[str]:
    """Rows of cells as lines, each column as wide as its widest cell (header included), numbers
    right-aligned, text left-aligned, at least two spaces between any two cells."""
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    lines = []
    for r in rows:
        cells = []
        for i, (cell, w) in enumerate(zip(r, widths)):
            text = cell.rjust(w) if right[i] else cell.ljust(w)
            sep = "" if i == 0 else ("  " if right[i] else GAP)
            cells.append(sep + text)
        lines.append("".join(cells).rstrip())
    return lines


def format_summary(d: dict) -> str:
    """Text form of :func:`summary_dict`: every column sized to its contents, so large values
    (a salary's rmse, a count's mae) never run into their neighbours."""
    ev = d["evaluation"]
    names = list(ev["forest"].keys())
    sp = d["splits"]
    lines = [f"pocketforest: {d['target']} ({d['task']}); rows {sp['discovery']} discovery / "
             f"{sp['confirmation']} confirmation / {sp['test']} test"]
    if d.get("plan"):
        lines.append(f"plan: {d['plan']['reason']}")
    lines.append("")
    models = [m for m in MODELS if m in ev]   # no equation row when there is none
    fid, loss = {"forest": "(reference)"}, {"forest": ""}
    for m in models[1:]:
        fid[m] = ", ".join(f"{k} {_f(v, '.3f')}" for k, v in d["fidelity"][m].items())
        lo = d["loss"][m]
        loss[m] = (f"{lo['metric']} {_f(lo['value'], '+.4f')} "
                   f"({_f(lo['ci_low'], '+.4f')} to {_f(lo['ci_high'], '+.4f')})")
    on = (f"on {ev['n']} test rows" if ev.get("on") == "test"
          else f"{ev.get('repeats')}x{ev.get('folds')}-fold CV")
    rows = [[on] + names + ["fidelity", "loss (95% interval)"]]
    rows += [[m] + [_f(ev[m][n], ".4f") for n in names] + [fid[m], loss[m]] for m in models]
    right = [False] + [True] * len(names) + [False, False]
    table = aligned_columns(rows, right)
    rule = "-" * max(len(line) for line in table)
    lines += [table[0], rule] + table[1:]
    nested = [lo["nested"] for lo in d["loss"].values() if "nested" in lo]
    if nested:
        lines.append(f"loss intervals: nested cross-validation, {nested[0]['repeats']} x {nested[0]['folds']} folds "
                     f"({nested[0]['fits']} refits), about the procedure at this many rows")
    own = {m: lo["bundle_models"] for m, lo in d["loss"].items() if "bundle_models" in lo}
    if own:
        rows = next(iter(own.values()))["rows"]
        lines.append(f"these models' loss, on the {rows} confirmation rows: " + ", ".join(
            f"{m} {_f(b['value'], '+.4f')} ({_f(b['ci_low'], '+.4f')} to {_f(b['ci_high'], '+.4f')})"
            for m, b in own.items()))
    equation = d["formula"] if not d.get("equation_absent") else "none: " + d["equation_absent"]["reason"]
    lines += ["", f"equation: {equation}", f"tree:     depth {d['tree']['depth']}, {d['tree']['leaves']} leaves"]
    if d.get("sample"):
        lines.append(sample_line(d["sample"]))
    if d.get("warnings"):
        n = len(d["warnings"])
        lines.append(f"notes:    {n} (data and fitting notes; all in the report's first section)")
    if "bundle" in d:
        lines += ["", f"bundle:   {d['bundle']}", f"report:   {d['open_report']}", f"check:    {d['verify']}"]
    return "\n".join(lines)


def sample_line(sm: dict) -> str:
    """`distill --sample`: how many rows of how many, and the check on left-out rows."""
    text = f"sample:   {sm['sample_rows']:,} of {sm['rows_with_target']:,} rows with a target"
    chk = sm.get("self_check") or {}
    if chk.get("loss"):
        parts = [f"{m} loss {_f(lo['value'], '+.4f')} ({_f(lo['ci_low'], '+.4f')} to {_f(lo['ci_high'], '+.4f')})"
                 for m, lo in chk["loss"].items()]
        text += f"; on {chk['evaluation']['n']:,} rows left out: " + ", ".join(parts)
    return text


def summary_text(r, path: str) -> str:
    return format_summary(summary_dict(r, path))


def _coefficients(eq) -> list[str]:
    """The equation's coefficient table (confirmation rows), columns sized to their contents."""
    has_class = bool(eq.table) and "class" in eq.table[0]
    head = (["class"] if has_class else []) + ["term", "estimate", "std error", "95% low", "95% high", "p"]
    rows = [head] + [([c["class"]] if has_class else [])
                     + [c["term"]] + [_f(c.get(k), ".4g") for k in ("estimate", "std_error", "ci_low", "ci_high")]
                     + [_f(c.get("p_value"), ".3g")] for c in eq.table]
    right = ([False] if has_class else []) + [False] + [True] * 5
    table = aligned_columns(rows, right)
    return [table[0], "-" * max(len(line) for line in table)] + table[1:]


def result_text(r) -> str:
    """What ``Distillation.summary()`` returns: the scoreboard, fidelity and loss, the formula, the
    tree's size and the equation's coefficients, as text (numbers as in the ``--json`` output)."""
    eq = r.equation
    if eq is None:   # the summary already says why and how many rows would be needed
        return format_summary(result_dict(r))
    paper = eq.inference or eq        # the fit whose standard errors and p-values are for reading
    lines = [format_summary(result_dict(r)), "",
             f"coefficients: {eq.family} GLM, {eq.link} link, on the {paper.fit_on} rows (n = {paper.n})"]
    lines += _coefficients(paper)
    bt = paper.block_test
    if bt:
        lines.append(f"block test of the suggested terms: statistic {_f(bt.get('statistic'), '.4g')}, "
                     f"df {bt.get('df')}, p = {_f(bt.get('p_value'), '.3g')}")
    if eq.inference is not None:
        lines.append(f"the exports carry these terms re-estimated on the {eq.fit_on} rows (n = {eq.n}, {eq.method})")
    return "\n".join(lines)


def result_line(r) -> str:
    """One short line for ``repr(Distillation)``: what was fitted and how well the surrogates did."""
    key = r.loss["tree"]["metric"]
    scores = ", ".join(f"{m} {_f(r.evaluation[m].get(key), '.3f')}" for m in r.models)
    terms = "no equation" if r.equation is None else f"{len(r.equation.terms)} terms"
    return (f"<Distillation {r.table.task} of {r.table.target!r}: test {key} {scores}; "
            f"{terms}, tree of {r.tree.leaves} leaves>")
