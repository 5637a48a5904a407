"""The terminal summary after `distill` (and its JSON twin for --json)."""
from __future__ import annotations


def summary_dict(r, path: str) -> dict:
    return {"bundle": path, "task": r.table.task, "target": r.table.target, "splits": r.splits.sizes(),
            "oob": r.forest.oob, "evaluation": r.evaluation, "fidelity": r.fidelity, "loss": r.loss,
            "formula": r.equation.formula, "tree": {"depth": r.tree.depth, "leaves": r.tree.leaves},
            "importance": [i.to_dict() for i in r.importance], "warnings": r.warnings}


def summary_text(r, path: str) -> str:
    ev = r.evaluation
    names = list(ev["forest"].keys())
    width = max(len(n) for n in names) + 2
    lines = [f"pocketforest: {r.table.target} ({r.table.task}), test rows n = {ev['n']}", ""]
    lines.append("model     " + "".join(f"{n:>{width + 6}}" for n in names))
    for m in ("forest", "tree", "equation"):
        lines.append(f"{m:<10}" + "".join(f"{ev[m][n]:>{width + 6}.4f}" for n in names))
    lines.append("")
    for m in ("tree", "equation"):
        lo = r.loss[m]
        fid = ", ".join(f"{k} {v:.3f}" for k, v in r.fidelity[m].items())
        lines.append(f"{m:<9} fidelity {fid}; loss in {lo['metric']} {lo['value']:+.4f} "
                     f"(95% interval {lo['ci_low']:+.4f} to {lo['ci_high']:+.4f})")
    lines += ["", f"equation: {r.equation.formula}", f"tree: depth {r.tree.depth}, {r.tree.leaves} leaves",
              "", f"bundle: {path}", f"report: open {path}/report.html",
              f"check it anywhere: pocketforest verify {path}"]
    return "\n".join(lines)
