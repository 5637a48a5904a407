"""Same data and seed, same numbers: two distills must agree on every manifest number and every
prediction of every exported form.

The two runs are separate processes with different PYTHONHASHSEED values, so an order that leaks
from a set or dict of strings (hash-randomised per process, Python docs: object.__hash__) would
show up here. ONNX files embed the creation time in their metadata, so the graphs are compared
by their outputs on the reference rows, not byte for byte (the workbook too carries the time, and
tests/test_workbook.py checks that equal content and time give equal bytes); reference.csv and
the text exports must match byte for byte.
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from conftest import run_cli, synthetic_table

# Files whose bytes may carry the creation time; everything else in a bundle must be identical.
STAMPED = {"forest.onnx", "tree.onnx", "equation.onnx", "report.html", "manifest.json",
           "equation.xlsx"}   # the workbook's document properties carry the bundle's creation time


def _distill(csv: Path, out: Path, hashseed: str, monkeypatch) -> Path:
    monkeypatch.setenv("PYTHONHASHSEED", hashseed)
    proc = run_cli("distill", str(csv), "--target", "y", "--trees", "15", "--nested-repeats", "1", "--seed", "11", "--out", str(out), "-q")
    assert proc.returncode == 0, proc.stderr
    return out


def _without_time(manifest: dict) -> dict:
    m = {k: v for k, v in manifest.items() if k not in ("created", "artifacts", "artifact_sizes")}
    m["artifacts"] = {k: v for k, v in manifest.get("artifacts", {}).items() if k not in STAMPED}
    # a compressed file's size can follow the digits of the time it carries (the workbook is a zip)
    m["artifact_sizes"] = {k: v for k, v in manifest.get("artifact_sizes", {}).items() if k != "equation.xlsx"}
    return m


@pytest.mark.parametrize("task,k", [("regression", 2), ("classification", 3)])
def test_same_seed_same_numbers_and_predictions(tmp_path, monkeypatch, task, k):
    from pocketforest.scoring.runtime import Scorer

    csv = tmp_path / "data.csv"
    synthetic_table(n=300, seed=5, task=task, n_classes=k).to_csv(csv, index=False)
    a = _distill(csv, tmp_path / "a", "1", monkeypatch)
    b = _distill(csv, tmp_path / "b", "2", monkeypatch)

    ma = json.loads((a / "manifest.json").read_text())
    mb = json.loads((b / "manifest.json").read_text())
    assert _without_time(ma) == _without_time(mb)

    for name in sorted(p.name for p in a.iterdir()):
        if name not in STAMPED:
            assert (a / name).read_bytes() == (b / name).read_bytes(), f"{name} differs between runs"

    ref = pd.read_csv(a / "reference.csv", dtype=str, keep_default_na=False).replace("", np.nan)
    for model in ("forest", "tree", "equation"):
        out_a = Scorer(a, model).run(ref)
        out_b = Scorer(b, model).run(ref)
        assert out_a.keys() == out_b.keys()
        for key in out_a:
            np.testing.assert_array_equal(out_a[key], out_b[key], err_msg=f"{model}.onnx {key}")

    if task == "regression":  # guard: the equality above must not come from an ignored seed
        proc = run_cli("distill", str(csv), "--target", "y", "--trees", "15", "--nested-repeats", "1", "--seed", "12",
                       "--out", str(tmp_path / "c"), "-q")
        assert proc.returncode == 0, proc.stderr
        mc = json.loads((tmp_path / "c" / "manifest.json").read_text())
        assert mc["forest"]["oob"] != ma["forest"]["oob"]

