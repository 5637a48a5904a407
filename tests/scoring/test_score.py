"""`score`: streamed in bounded chunks, same row order, CSV or Parquet, schema checks, envelope
counts, and no fitting library on the scoring path."""
from __future__ import annotations

import json
import os
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from pocketforest.scoring.runtime import Scorer
from pocketforest.scoring.score import score_file

from conftest import SRC, run_cli, synthetic_table


def _new_rows(n=53, seed=41):
    data = synthetic_table(n=n, seed=seed).drop(columns="y")
    data.insert(0, "row_id", [f"r{i:03d}" for i in range(n)])
    return data


def test_chunks_are_bounded_and_output_keeps_row_order(bundles, tmp_path, monkeypatch):
    data = _new_rows()
    src = tmp_path / "new.csv"
    data.to_csv(src, index=False)
    sizes = []
    real = Scorer.columns

    def spy(self, frame):
        sizes.append(len(frame))
        return real(self, frame)

    monkeypatch.setattr(Scorer, "columns", spy)
    out = tmp_path / "pred.csv"
    n = score_file(str(bundles["regression"]), str(src), "forest", str(out), keep=["row_id"], quiet=True, chunk_rows=7)
    assert n == len(data) and max(sizes) <= 7 and len(sizes) == -(-len(data) // 7)
    streamed = pd.read_csv(out)
    assert list(streamed["row_id"]) == list(data["row_id"])
    whole = Scorer(bundles["regression"], "forest").columns(data)
    # onnxruntime sums the 60 trees in float32 and may split the sum across threads differently
    # for 7 rows and for all rows: <= 60 * 2^-24 ~ 3.6e-6 relative; rtol 1e-5
    np.testing.assert_allclose(streamed["prediction"], whole["prediction"], rtol=1e-5)


def test_parquet_in_and_out_match_csv(bundles, tmp_path):
    data = _new_rows()
    data.to_csv(tmp_path / "a.csv", index=False)
    data.to_parquet(tmp_path / "a.parquet", index=False)
    for model in ("tree", "equation"):
        score_file(str(bundles["multiclass"]), str(tmp_path / "a.csv"), model, str(tmp_path / "p.csv"),
                   keep=["row_id"], quiet=True, chunk_rows=10)
        score_file(str(bundles["multiclass"]), str(tmp_path / "a.parquet"), model, str(tmp_path / "p.parquet"),
                   keep=["row_id"], quiet=True, chunk_rows=10)
        a, b = pd.read_csv(tmp_path / "p.csv"), pd.read_parquet(tmp_path / "p.parquet")
        assert list(a.columns) == list(b.columns) == ["row_id", "label", "prob_high", "prob_low", "prob_mid",
                                                      "inputs_outside_training"]
        assert list(b["row_id"]) == list(data["row_id"])
        # same float32 model outputs; CSV text of a float32 is its shortest round-trip decimal,
        # within half a float32 ulp (2^-24 relative) of the Parquet value
        np.testing.assert_allclose(a[["prob_high", "prob_low", "prob_mid"]], b[["prob_high", "prob_low", "prob_mid"]],
                                   rtol=1e-6)
        assert (a["label"] == b["label"]).all()


def test_text_in_a_numeric_column_names_column_and_line(bundles, tmp_path):
    data = _new_rows().astype(object)
    data.loc[30, "x2"] = "twelve"
    src = tmp_path / "bad.csv"
    data.to_csv(src, index=False)
    out = tmp_path / "pred.csv"
    r = run_cli("score", str(bundles["regression"]), str(src), "--model", "tree", "--out", str(out))
    assert r.returncode == 2 and r.stderr.startswith("error:")
    assert "'x2'" in r.stderr and "twelve" in r.stderr and "line 32" in r.stderr  # header is line 1
    assert not out.exists() and not [p for p in tmp_path.iterdir() if p.name.startswith(".pf-score")]


def test_unseen_category_follows_the_policy_and_is_counted(bundles, tmp_path):
    """design.py: an unseen level is the reference level in the equation, none of the known
    levels in the trees, and one input outside the training envelope."""
    bundle = bundles["regression"]
    manifest = json.loads((bundle / "manifest.json").read_text())
    term = next(t for t in manifest["terms"] if t["kind"] == "categorical")
    var = term["variables"][0]
    ref_level = term["reference"][var]
    data = _new_rows(n=12)
    data["x1"] = data["x1"].clip(-0.9, 0.9)
    data["x3"] = data["x3"].fillna(0.0)
    data[[c for c in ("colour", "site") if c != var]] = "north" if var == "colour" else "red"
    seen = data.copy()
    seen[var] = ref_level
    data[var] = "east"
    data.to_csv(tmp_path / "a.csv", index=False)
    seen.to_csv(tmp_path / "b.csv", index=False)
    r = run_cli("score", str(bundle), str(tmp_path / "a.csv"), "--model", "equation", "--out", str(tmp_path / "pa.csv"))
    assert r.returncode == 0, r.stderr
    assert f"'{var}': 12 row(s) have categories never seen in training (e.g. 'east')" in r.stderr
    score_file(str(bundle), str(tmp_path / "b.csv"), "equation", str(tmp_path / "pb.csv"), quiet=True)
    pa_, pb = pd.read_csv(tmp_path / "pa.csv"), pd.read_csv(tmp_path / "pb.csv")
    # an unseen level scores as the reference level: the same arithmetic, so only the CSV text of
    # the float32 result (within 2^-24 relative) could differ
    np.testing.assert_allclose(pa_["prediction"], pb["prediction"], rtol=1e-6)
    assert (pa_["inputs_outside_training"] == pb["inputs_outside_training"] + 1).all()


def test_keep_column_absent_or_clashing_is_an_error(bundles, tmp_path):
    data = _new_rows()
    data.to_csv(tmp_path / "a.csv", index=False)
    r = run_cli("score", str(bundles["regression"]), str(tmp_path / "a.csv"), "--model", "tree",
                "--out", str(tmp_path / "p.csv"), "--keep", "nope")
    assert r.returncode == 2 and "'nope'" in r.stderr and not (tmp_path / "p.csv").exists()
    data.rename(columns={"row_id": "prediction"}).to_csv(tmp_path / "b.csv", index=False)
    r = run_cli("score", str(bundles["regression"]), str(tmp_path / "b.csv"), "--model", "tree",
                "--out", str(tmp_path / "p.csv"), "--keep", "prediction")
    assert r.returncode == 2 and "output column" in r.stderr


def test_scoring_imports_no_fitting_library(bundles, tmp_path):
    """DESIGN.md: scoring needs only the bundle and onnxruntime."""
    _new_rows().to_csv(tmp_path / "a.csv", index=False)
    code = ("import sys\n"
            "from pocketforest.cli import main\n"
            f"rc = main(['score', {str(bundles['binary'])!r}, {str(tmp_path / 'a.csv')!r}, '--model', 'forest',"
            f" '--out', {str(tmp_path / 'p.parquet')!r}, '-q'])\n"
            "bad = sorted({m.split('.')[0] for m in sys.modules} & {'sklearn', 'statsmodels', 'patsy', 'skl2onnx'})\n"
            "print(rc, ','.join(bad))\n")
    env = dict(os.environ, PYTHONPATH=str(SRC))
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=300)
    assert r.returncode == 0, r.stderr
    assert r.stdout.split() == ["0"], r.stdout
    assert len(pd.read_parquet(tmp_path / "p.parquet")) == 53


def test_stdout_output_when_no_file_is_given(bundles, tmp_path):
    _new_rows(n=9).to_csv(tmp_path / "a.csv", index=False)
    r = run_cli("score", str(bundles["binary"]), str(tmp_path / "a.csv"), "--model", "equation", "-q")
    assert r.returncode == 0, r.stderr
    lines = r.stdout.strip().splitlines()
    assert lines[0] == "label,prob_no,prob_yes,inputs_outside_training" and len(lines) == 10


@pytest.mark.parametrize("chunk", [1, 5, 1000])
def test_chunk_size_does_not_change_predictions(bundles, tmp_path, chunk):
    data = _new_rows(n=17)
    data.to_csv(tmp_path / "a.csv", index=False)
    score_file(str(bundles["binary"]), str(tmp_path / "a.csv"), "tree", str(tmp_path / "p.csv"), quiet=True,
               chunk_rows=chunk)
    got = pd.read_csv(tmp_path / "p.csv")
    want = Scorer(bundles["binary"], "tree").columns(data)
    assert list(got["label"]) == list(want["label"])


def test_tuned_sessions_give_the_same_predictions(bundles):
    """runtime.make_session (for the benchmark): thread settings change speed, never results."""
    from pocketforest.scoring.runtime import feeds, make_session
    bundle = bundles["multiclass"]
    manifest = json.loads((bundle / "manifest.json").read_text())
    rows = _new_rows(n=40)
    fd = feeds(rows, manifest["features"])
    outs = [make_session(bundle / "forest.onnx", **kw).run(None, fd)[1]
            for kw in ({}, {"latency": True}, {"threads": 2})]
    one_by_one = np.vstack([make_session(bundle / "forest.onnx", latency=True).run(
        None, {k: v[i:i + 1] for k, v in fd.items()})[1] for i in range(3)])
    np.testing.assert_array_equal(outs[0], outs[1])
    np.testing.assert_array_equal(outs[0], outs[2])
    # one row on one thread vs a batch on the default threads: float32 sums of 60 trees' votes in
    # possibly another order, <= 60 * 2^-24 ~ 3.6e-6 relative; rtol 1e-5
    np.testing.assert_allclose(one_by_one, outs[0][:3], rtol=1e-5)


def test_keep_name_with_the_header_cell_spaces_is_found(bundles, tmp_path):
    """Header names are read stripped, so ``--keep " row_id "`` means column row_id."""
    data = _new_rows().rename(columns={"row_id": " row_id "})
    data.to_csv(tmp_path / "a.csv", index=False)
    score_file(str(bundles["regression"]), str(tmp_path / "a.csv"), "tree", str(tmp_path / "p.csv"),
               keep=[" row_id "], quiet=True)
    assert list(pd.read_csv(tmp_path / "p.csv").columns)[:2] == ["row_id", "prediction"]


def test_an_error_in_a_later_chunk_closes_the_input_file(bundles, tmp_path):
    """The input is closed when scoring stops on bad text, not left for the garbage collector
    (the fuzz test saw the ResourceWarning of an unclosed file)."""
    import gc
    import warnings

    from pocketforest.errors import InputError
    data = _new_rows().astype({"x1": object})
    data.loc[40, "x1"] = "oops"
    data.to_csv(tmp_path / "a.csv", index=False)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        with pytest.raises(InputError, match="oops"):
            score_file(str(bundles["regression"]), str(tmp_path / "a.csv"), "forest", str(tmp_path / "p.csv"),
                       quiet=True, chunk_rows=10)
        gc.collect()
    assert not [w for w in caught if issubclass(w.category, ResourceWarning)], [str(w.message) for w in caught]
    assert not (tmp_path / "p.csv").exists()


def test_an_unseen_level_written_like_a_known_one_is_named_in_the_warning():
    from pocketforest.features import Feature
    from pocketforest.scoring.score import Stray
    stray = Stray([Feature(name="shade", kind="categorical", onnx_input="shade", missing=0.0,
                           categories=["none", "partial"])])
    stray.add(pd.DataFrame({"shade": ["Partial", "east", "none", "Partial "]}))
    (warning,) = stray.warnings()
    assert "3 row(s) have categories never seen in training" in warning
    assert "'Partial' matches the known level 'partial' except for letter case or spacing" in warning
    assert "'east' matches" not in warning
