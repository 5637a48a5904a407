"""`compare` on new labelled rows: it must reproduce distill's own test-row numbers when given those
rows, measure drift it is shown, and keep the CLI contract (exit 0 / 1 on a crossed threshold / 2)."""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from conftest import run_cli, synthetic_table

# ONNX forests and trees compute in float32 (METHODS.md, Transport) and every graph returns float32.
# A tree's leaf value is rounded once (2^-24 relative); the forest's 40 tree outputs are summed in
# float32, in an order onnxruntime's threads choose, so a prediction may move by up to
# 40 * 2^-24 ~ 2.4e-6 relative. Metrics are smooth averages of the predictions (derivative of
# order 1 on these scales), so they move by a few 1e-6 at worst (measured: at most 2e-8 when this
# was written). 1e-5 covers the bound; a wrong row, model or class order moves them by > 1e-3.
METRIC_RTOL = 1e-5
METRIC_ATOL = 1e-5


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    """Small regression and three-class bundles with their test rows written as CSV (target kept)."""
    from pocketforest.intake import prepare
    from pocketforest.pipeline import Settings, distill
    base = tmp_path_factory.mktemp("compare")
    out = {}
    for name, task, k in (("regression", "regression", 2), ("multiclass", "classification", 3)):
        df = synthetic_table(n=500, seed=11, task=task, n_classes=k)
        # the three-way split forced: compare must reproduce figures that came from test rows
        r = distill(prepare(df, "y", source=f"{name}.csv"),
                    Settings(trees=40, seed=5, quiet=True, bootstrap=300, split=(0.5, 0.25, 0.25)))
        bundle = Path(r.write(base / name))
        test_rows = r.table.data.iloc[r.splits.test]
        csv = base / f"{name}_test.csv"
        test_rows.to_csv(csv, index=False)
        out[name] = (bundle, csv, r)
    return out


def _manifest(bundle: Path) -> dict:
    return json.loads((bundle / "manifest.json").read_text())


@pytest.mark.parametrize("name", ["regression", "multiclass"])
def test_compare_on_the_test_rows_reproduces_the_manifest(fitted, name):
    from pocketforest.scoring.compare import compare
    bundle, csv, _ = fitted[name]
    m = _manifest(bundle)
    c = compare(bundle, csv)
    assert c.rows == m["splits"]["test"] and c.exit_code == 0
    for model in ("forest", "tree", "equation"):
        for metric, want in m["evaluation"][model].items():
            got = c.evaluation[model][metric]
            assert got == pytest.approx(want, rel=METRIC_RTOL, abs=METRIC_ATOL), (model, metric)
    for model in ("tree", "equation"):
        for k, want in m["fidelity"][model].items():
            assert c.fidelity[model][k] == pytest.approx(want, rel=METRIC_RTOL, abs=METRIC_ATOL)
        # same rows, same seed and resamples: the paired bootstrap draws the same indices
        for k in ("value", "ci_low", "ci_high"):
            assert c.loss[model][k] == pytest.approx(m["loss"][model][k], rel=METRIC_RTOL, abs=METRIC_ATOL)
    # the rows come from the same population: no unseen levels, no column far off
    assert c.drift["unseen_category_rows"] == 0
    assert all(abs(col["smd"]) < 0.4 for col in c.drift["columns"] if col["kind"] == "numeric")


def test_parquet_rows_give_the_same_numbers(fitted, tmp_path):
    from pocketforest.scoring.compare import compare
    bundle, csv, _ = fitted["regression"]
    pq = tmp_path / "rows.parquet"
    pd.read_csv(csv).to_parquet(pq, index=False)
    a, b = compare(bundle, csv).to_dict(), compare(bundle, pq).to_dict()
    for model in ("forest", "tree", "equation"):
        # the CSV holds each float64 as its round-trip text, so both files give the same float32
        # inputs and the same outputs: exact by construction
        assert a["evaluation"][model] == pytest.approx(b["evaluation"][model], rel=1e-12)
    assert a["drift"]["share_outside_envelope"] == b["drift"]["share_outside_envelope"]


def test_manifest_records_training_profile(fitted):
    bundle, _, r = fitted["regression"]
    m = _manifest(bundle)
    disc = r.table.data.iloc[r.splits.discovery]
    for f in m["features"]:
        if f["kind"] == "numeric":
            # the same column's mean/sd, possibly summed in another order: ~n * eps, default rel 1e-6
            assert f["mean"] == pytest.approx(float(disc[f["name"]].mean()))  # pandas skips NaN
            assert f["sd"] == pytest.approx(float(disc[f["name"]].std(ddof=1)))
        else:
            present = disc[f["name"]][disc[f["name"]] != ""]
            assert sum(f["shares"].values()) == pytest.approx(1.0)  # count ratios: ~k * eps
            for level, share in f["shares"].items():
                assert share == pytest.approx(float((present == level).mean()))  # count ratio


def test_drift_is_measured(fitted, tmp_path):
    """Constructed shift: x1 moved by one training sd, a colour never seen, a third of rows past x2's max."""
    from pocketforest.scoring.compare import compare
    bundle, csv, _ = fitted["regression"]
    m = _manifest(bundle)
    feat = {f["name"]: f for f in m["features"]}
    rows = pd.read_csv(csv)
    rows["x1"] = rows["x1"] + feat["x1"]["sd"]
    rows.loc[rows.index[:10], "colour"] = "purple"
    third = rows.index[: len(rows) // 3]
    rows.loc[third, "x2"] = feat["x2"]["max"] + 1.0
    path = tmp_path / "shifted.csv"
    rows.to_csv(path, index=False)
    c = compare(bundle, path)
    cols = {col["name"]: col for col in c.drift["columns"]}
    # SMD of a shift by one training sd is about 1 (pooled sd ≈ training sd)
    assert 0.7 < cols["x1"]["smd"] < 1.3 and cols["x1"]["flag"]
    assert cols["colour"]["unseen_levels"] == ["purple"] and cols["colour"]["unseen_rows"] == 10
    assert c.drift["unseen_category_rows"] == 10
    assert cols["x2"]["outside_range"] == pytest.approx(len(third) / len(rows))  # count ratio
    assert c.drift["share_outside_envelope"] >= len(third) / len(rows)
    d = c.to_dict()
    json.dumps(d)  # JSON-safe


def test_cli_text_json_out_and_thresholds(fitted, tmp_path, capsys):
    from pocketforest.cli import main
    bundle, csv, _ = fitted["regression"]
    out = tmp_path / "found.json"
    assert main(["compare", str(bundle), str(csv), "--json", "--out", str(out)]) == 0
    printed = json.loads(capsys.readouterr().out)
    assert json.loads(out.read_text()) == printed
    assert main(["compare", str(bundle), str(csv)]) == 0
    text = capsys.readouterr().out
    for model in ("tree", "equation"):
        lo = printed["loss"][model]
        assert f"{lo['value']:+.4f}" in text and f"{lo['ci_low']:+.4f}" in text
    assert f"{printed['evaluation']['forest']['r2']:.4f}" in text
    assert main(["compare", str(bundle), str(csv), "--max-loss", "10", "--max-outside", "1"]) == 0
    # exit 1 as a user sees it: a loss above the threshold (any real loss exceeds -1)
    worse = run_cli("compare", str(bundle), str(csv), "--max-loss", "-1")
    assert worse.returncode == 1 and "CHECK FAILED" in worse.stdout


@pytest.mark.parametrize("mutate, expect", [
    (lambda df: df.drop(columns="y"), "no column 'y'"),
    (lambda df: df.assign(y="high"), "must be numeric"),
    (lambda df: df.drop(columns="x2"), "missing column"),
    (lambda df: df, "--out"),
])
def test_bad_input_is_one_error_line(fitted, tmp_path, capsys, mutate, expect):
    from pocketforest.cli import main
    bundle, csv, _ = fitted["regression"]
    path = tmp_path / "bad.csv"
    mutate(pd.read_csv(csv)).to_csv(path, index=False)
    out = tmp_path / ("never.json" if expect != "--out" else "never.txt")
    assert main(["compare", str(bundle), str(path), "--out", str(out)]) == 2
    lines = capsys.readouterr().err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error:") and expect in lines[0], lines
    assert not out.exists()


def test_unknown_class_rows_are_left_out_and_counted(fitted, tmp_path):
    from pocketforest.scoring.compare import compare
    bundle, csv, _ = fitted["multiclass"]
    rows = pd.read_csv(csv)
    rows.loc[rows.index[:5], "y"] = "enormous"
    path = tmp_path / "odd.csv"
    rows.to_csv(path, index=False)
    c = compare(bundle, path)
    assert c.rows_unknown_class == 5 and c.rows == len(rows) - 5


def test_rows_without_a_prediction_are_left_out_and_counted(fitted, monkeypatch):
    """Where the equation has no finite value its prediction is missing (README); compare judges
    every model on the rows where all three predict, and says how many it left out."""
    from pocketforest.scoring import compare as module
    bundle, csv, _ = fitted["regression"]
    real = module.Scorer.run

    def run(self, frame):
        out = real(self, frame)
        if self.model == "equation":
            out["prediction"][:3] = np.nan
        return out

    monkeypatch.setattr(module.Scorer, "run", run)
    c = module.compare(bundle, csv)
    assert c.rows_without_prediction == 3 and c.rows == len(pd.read_csv(csv)) - 3
    assert all(np.isfinite(v) for m in ("forest", "tree", "equation") for v in c.evaluation[m].values())
    assert "3 rows where the equation has no finite value left out" in c.text()


def test_text_columns_are_sized_to_their_contents(fitted):
    """A large outcome (rmse in the hundreds of millions) never runs into the next column."""
    import re

    from pocketforest.scoring.compare import compare, comparison_text
    bundle, csv, _ = fitted["regression"]
    d = compare(bundle, csv).to_dict()
    for m in ("forest", "tree", "equation"):
        d["evaluation"][m] = {k: v * 1e9 for k, v in d["evaluation"][m].items()}
    lines = comparison_text(d).splitlines()
    head = next(i for i, line in enumerate(lines) if line.startswith("model "))
    names = list(d["evaluation"]["forest"])
    ends = [m.end() for m in list(re.finditer(r"\S+", lines[head]))[1:1 + len(names)]]
    for m, line in zip(("forest", "tree", "equation"), lines[head + 1:head + 4]):
        cells = list(re.finditer(r"\S+", line))[1:1 + len(names)]
        assert [c.group() for c in cells] == [f"{d['evaluation'][m][n]:.4f}" for n in names], line
        assert [c.end() for c in cells] == ends, line
