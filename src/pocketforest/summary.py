"""The terminal summary after `distill`, and its JSON twin for ``--json``.

The text is printed from the dictionary that ``--json`` prints, so the two always show the same
numbers: a compact scoreboard, the surrogates' fidelity and loss with intervals, the formula, the
bundle path and the command that opens the report.
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


def summary_dict(r, path: str) -> dict:
    report = str(Path(path) / "report.html")
    return {"bundle": path, "task": r.table.task, "target": r.table.target, "splits": r.splits.sizes(),
            "oob": r.forest.oob, "evaluation": r.evaluation, "fidelity": r.fidelity, "loss": r.loss,
            "formula": r.equation.formula, "tree": {"depth": r.tree.depth, "leaves": r.tree.leaves},
            "importance": [i.to_dict() for i in r.importance], "warnings": r.warnings,
            "report": report, "open_report": open_command(report),
            "verify": f"pocketforest verify {shlex.quote(path)}",
            **({"sample": r.sample} if getattr(r, "sample", None) else {})}


def _f(v, fmt: str) -> str:
    return "–" if v is None else format(v, fmt)


def format_summary(d: dict) -> str:
    """Text form of :func:`summary_dict`."""
    ev = d["evaluation"]
    names = list(ev["forest"].keys())
    width = max(10, *(len(n) + 2 for n in names))
    sp = d["splits"]
    lines = [f"pocketforest: {d['target']} ({d['task']}); rows {sp['discovery']} discovery / "
             f"{sp['confirmation']} confirmation / {sp['test']} test", ""]
    fid, loss = {"forest": "(reference)"}, {"forest": ""}
    for m in MODELS[1:]:
        fid[m] = ", ".join(f"{k} {_f(v, '.3f')}" for k, v in d["fidelity"][m].items())
        lo = d["loss"][m]
        loss[m] = (f"{lo['metric']} {_f(lo['value'], '+.4f')} "
                   f"({_f(lo['ci_low'], '+.4f')} to {_f(lo['ci_high'], '+.4f')})")
    fid_w = max(len("fidelity"), *(len(v) for v in fid.values()))
    loss_w = max(len("loss (95% interval)"), *(len(v) for v in loss.values()))
    head = (f"{'on ' + str(ev['n']) + ' test rows':<16}" + "".join(f"{n:>{width}}" for n in names)
            + f"    {'fidelity':<{fid_w}}    {'loss (95% interval)':<{loss_w}}")
    head = head.rstrip()
    lines += [head, "-" * len(head)]
    for m in MODELS:
        row = f"{m:<16}" + "".join(f"{_f(ev[m][n], '.4f'):>{width}}" for n in names)
        lines.append((row + f"    {fid[m]:<{fid_w}}    {loss[m]:<{loss_w}}").rstrip())
    lines += ["", f"equation: {d['formula']}", f"tree:     depth {d['tree']['depth']}, {d['tree']['leaves']} leaves"]
    if d.get("sample"):
        lines.append(sample_line(d["sample"]))
    if d.get("warnings"):
        n = len(d["warnings"])
        lines.append(f"notes:    {n} (data and fitting notes; all in the report's first section)")
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
