"""The summary after `distill`: the text and --json show the same numbers, the bundle path, and how
to open the report."""
from __future__ import annotations

import json

import pytest

from conftest import synthetic_table


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """The same small job run twice through the command line's entry point, once with --json."""
    import contextlib
    import io

    from pocketforest.cli import main
    base = tmp_path_factory.mktemp("summary")
    data = base / "plots.csv"
    synthetic_table(n=300, seed=21).to_csv(data, index=False)
    out = {}
    for mode in ("text", "json"):
        args = ["distill", str(data), "--target", "y", "--trees", "30", "--nested-repeats", "0", "--seed", "4", "-q",
                "--out", str(base / mode)]
        buf = io.StringIO()
        with contextlib.redirect_stdout(buf):
            assert main(args + (["--json"] if mode == "json" else [])) == 0
        out[mode] = buf.getvalue()
    return base, out


def test_text_and_json_agree(runs):
    base, out = runs
    d = json.loads(out["json"])
    text = out["text"]
    for model in ("forest", "tree", "equation"):
        row = next(line for line in text.splitlines() if line.startswith(model + " "))
        for metric, value in d["evaluation"][model].items():
            assert f"{value:.4f}" in row, (model, metric)
    for model in ("tree", "equation"):
        row = next(line for line in text.splitlines() if line.startswith(model + " "))
        lo = d["loss"][model]
        assert f"{lo['value']:+.4f} ({lo['ci_low']:+.4f} to {lo['ci_high']:+.4f})" in row
        for k, v in d["fidelity"][model].items():
            assert f"{k} {v:.3f}" in row
    assert f"equation: {d['formula']}" in text
    assert f"depth {d['tree']['depth']}, {d['tree']['leaves']} leaves" in text
    # same seed, same data: the two runs found the same numbers
    assert d["bundle"] == str(base / "json") and f"bundle:   {base / 'text'}" in text
    assert d["report"] == str(base / "json" / "report.html")
    assert "report.html" in d["open_report"] and d["verify"].startswith("pocketforest verify ")
    assert "report:   " in text and "report.html" in text.split("report:   ", 1)[1].splitlines()[0]


def test_open_command_per_platform():
    from pocketforest.summary import open_command
    assert open_command("b/report.html", "linux") == "xdg-open b/report.html"
    assert open_command("b/report.html", "darwin") == "open b/report.html"
    assert open_command("my bundle/report.html", "linux") == "xdg-open 'my bundle/report.html'"
    assert open_command("b\\report.html", "win32").startswith('start "" ')


def test_classification_columns_never_run_together():
    """Every fidelity and loss cell is separated from its neighbours, whatever its length."""
    from pocketforest.summary import format_summary
    metrics = {"accuracy": 0.7, "log_loss": 0.55, "brier": 0.18, "auc": 0.8}
    d = {"target": "t", "task": "classification", "splits": {"discovery": 10, "confirmation": 5, "test": 5},
         "evaluation": {"n": 5, "forest": metrics, "tree": metrics, "equation": metrics},
         "fidelity": {m: {"agreement": 0.843, "kappa": 0.684} for m in ("tree", "equation")},
         "loss": {m: {"metric": "accuracy", "value": 0.0347, "ci_low": 0.0053, "ci_high": 0.0627}
                  for m in ("tree", "equation")},
         "formula": "t ~ x", "tree": {"depth": 2, "leaves": 4}, "warnings": [], "bundle": "b",
         "open_report": "o", "verify": "v"}
    text = format_summary(d)
    assert "0.8000    agreement 0.843, kappa 0.684    accuracy +0.0347 (+0.0053 to +0.0627)" in text


def _summary_dict(task: str, metrics: dict, fidelity: dict, loss_metric: str, n: int = 5) -> dict:
    return {"target": "t", "task": task, "splits": {"discovery": 10, "confirmation": 5, "test": n},
            "evaluation": {"on": "test", "n": n, "forest": metrics, "tree": metrics, "equation": metrics},
            "fidelity": {m: fidelity for m in ("tree", "equation")},
            "loss": {m: {"metric": loss_metric, "value": -1234.5, "ci_low": -99999.25, "ci_high": 0.0627}
                     for m in ("tree", "equation")},
            "formula": "t ~ x", "tree": {"depth": 2, "leaves": 4}, "warnings": [], "bundle": "b",
            "open_report": "o", "verify": "v"}


@pytest.mark.parametrize("task, metrics, fidelity, loss_metric", [
    # a salary outcome once printed "0.415520085.226615714.8563" (r2, rmse, mae run together)
    ("regression", {"r2": 0.4155, "rmse": 20085.2266, "mae": 15714.8563}, {"r2": 0.9}, "r2"),
    ("regression", {"r2": -3.5e4, "rmse": 123456789012.5, "mae": 98765432101.25}, {"r2": -7.5e5}, "r2"),
    ("classification", {"accuracy": 0.7, "log_loss": 34538.776, "brier": 0.18, "auc": None},
     {"agreement": 0.843, "kappa": -0.5}, "accuracy"),
])
def test_columns_are_sized_to_their_contents(task, metrics, fidelity, loss_metric):
    """Every cell of the scoreboard stays whole and apart from its neighbours, and each number
    ends under its header in every row, however large the values."""
    import re

    from pocketforest.summary import format_summary
    text = format_summary(_summary_dict(task, metrics, fidelity, loss_metric, n=123456))
    lines = text.splitlines()
    head = next(i for i, line in enumerate(lines) if line.startswith("on 123456 test rows"))
    table = lines[head:head + 5]
    assert set(table[1]) == {"-"} and len(table[1]) == max(len(line) for line in table)
    header_ends = [m.end() for m in list(re.finditer(r"\S+", table[0]))[4:4 + len(metrics)]]
    assert [table[0][e - len(n):e] for e, n in zip(header_ends, metrics)] == list(metrics)
    shown = ["–" if v is None else f"{v:.4f}" for v in metrics.values()]
    for model, line in zip(("forest", "tree", "equation"), table[2:]):
        tokens = list(re.finditer(r"\S+", line))
        assert tokens[0].group() == model
        assert [t.group() for t in tokens[1:1 + len(shown)]] == shown, line  # each number a cell of its own
        assert [t.end() for t in tokens[1:1 + len(shown)]] == header_ends, line
    for model in ("tree", "equation"):
        row = next(line for line in table if line.startswith(model + " "))
        assert "    " + ", ".join(f"{k} {v:.3f}" for k, v in fidelity.items()) + "    " in row
        assert row.endswith(f"{loss_metric} -1234.5000 (-99999.2500 to +0.0627)")


@pytest.fixture(scope="module")
def fitted():
    """Small notebook-style fits (pocketforest.fit) for the result's own text."""
    import pocketforest as pf
    return {task: pf.fit(synthetic_table(n=300, seed=8, task=task, n_classes=k), "y", n_trees=20, random_state=1)
            for task, k in (("regression", 2), ("classification", 3))}


@pytest.mark.parametrize("task", ["regression", "classification"])
def test_result_summary_holds_scoreboard_formula_and_coefficients(fitted, task):
    from pocketforest.summary import format_summary, result_dict, result_text
    r = fitted[task]
    text = result_text(r)
    assert text.startswith(format_summary(result_dict(r)))       # the scoreboard the command line prints
    assert f"equation: {r.equation.formula}" in text and "bundle:" not in text
    coefficients = text.split("\ncoefficients: ", 1)[1].splitlines()
    for row in (r.equation.inference or r.equation).table:
        line = next(line for line in coefficients if f" {row['term']} " in f" {line} "
                    and (row.get("class") is None or line.startswith(row["class"] + " ")))
        assert f"{row['estimate']:.4g}" in line and f"{row['p_value']:.3g}" in line


@pytest.mark.parametrize("task", ["regression", "classification"])
def test_result_repr_is_one_short_line(fitted, task):
    from pocketforest.summary import result_line
    r = fitted[task]
    line = result_line(r)
    key = r.loss["tree"]["metric"]
    assert "\n" not in line and len(line) < 160 and line.startswith("<Distillation ")
    assert f"equation {r.evaluation['equation'][key]:.3f}" in line
    # the result object itself: repr is that line, summary() the text
    assert repr(r) == line
    from pocketforest.summary import result_text
    assert r.summary() == result_text(r)
