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
        args = ["distill", str(data), "--target", "y", "--trees", "30", "--seed", "4", "-q",
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
