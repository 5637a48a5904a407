"""The benchmark module must keep running: `--quick` end to end, every contract figure present.

Nothing here is timed (speed targets live in the benchmark's own output, never in tests); the
checks are that each figure is measured, has its target and a mark, and that the JSON holds the
raw measurements behind every ratio.
"""
from __future__ import annotations

import json
import os
import subprocess
import sys

from conftest import ROOT, SRC

FIGURES = [
    "distill wall time / bare forest fit",
    "discovery time / bare forest fit",
    "distill peak memory",
    "ONNX forest batch throughput / scikit-learn",
    "single-row latency scikit-learn / ONNX",
    "score throughput / pandas read+write",
    "score peak memory",
    "forest.onnx size",
    "OOB r2 cost of the defaults vs unconstrained trees",
    # --tree (issue 13): fidelity at 8 and 12 leaves, greedy vs search vs synthetic rows
    "tree default leaves (friedman1)", "tree default leaves (demo)",
    "tree r² gain, exact at 8 leaves (friedman1)", "tree r² gain, lookahead at 12 leaves (demo)",
    "tree r² gain, synthetic rows at 12 (demo)", "tree exact search time / distill time (friedman1)",
]


def test_quick_benchmark_reports_every_figure(tmp_path):
    out = tmp_path / "bench.json"
    proc = subprocess.run([sys.executable, "-m", "pocketforest.bench", "--quick", "--tree", "--out", str(out),
                           "--work", str(tmp_path)],
                          capture_output=True, text=True, cwd=ROOT, env=dict(os.environ, PYTHONPATH=str(SRC)), timeout=600)
    assert proc.returncode == 0, proc.stderr[-3000:]
    for name in FIGURES:
        line = next((ln for ln in proc.stdout.splitlines() if ln.startswith(name)), None)
        assert line is not None, f"{name} missing from:\n{proc.stdout}"
        assert "target" in line
    assert "not judged" in proc.stdout  # a quick run never claims pass or short

    result = json.loads(out.read_text())
    assert result["quick"] is True
    for name in FIGURES:
        fig = next(f for f in result["figures"] if f["name"].startswith(name))
        assert fig["value"] is not None and fig["value"] == fig["value"], name  # measured, not NaN
    raw = result["raw"]["distill"]
    assert raw["bare_fit_s"] > 0 and raw["distill_s"] > 0
    assert set(raw["stages"]) >= {"forest", "importance", "discovery", "equation", "tree", "judge"}
    assert raw["onnx_bytes"]["forest"] > 0 and raw["forest_nodes"] > 0
    # the size-keeping defaults were in force: the forest's leaves respect the cap it recorded
    assert raw["forest_settings"]["max_leaf_nodes"] >= 2
    tree = result["raw"]["tree"]
    for name in ("friedman1", "demo"):
        assert {"greedy_8", "greedy_12", "optimal_8", "lookahead_12", "synthetic_12"} <= set(tree[name]["mean"])
        assert tree[name]["distill_seconds"] > 0 and tree[name]["seconds"]["optimal_8"] > 0
    assert "greedy  exact<=3  lookahead" in proc.stdout
    # the statistical figures are either measured by pocketforest.simulate or plainly absent
    for fig in result["figures"]:
        if fig["value"] is None:
            assert "not in this build" in fig["note"] or fig["target"].startswith("(see")
    assert list(tmp_path.glob("pf-bench-*")) == []  # its scratch folder is removed


def test_quick_cluster_section_reports_its_figures(tmp_path):
    """`--cluster` at small sizes: the cluster ratio, worker memory, distill --sample with its
    self-check and the Dask-backend fit figure are all measured (numbers not judged)."""
    from pocketforest.bench import cluster

    section = cluster.run(True, tmp_path, lambda text: None)
    names = [f.name for f in section.figures]
    assert names[0].startswith("cluster score / one-process score") and len(names) == 4
    assert all(f.value is not None and f.value == f.value and f.value > 0 for f in section.figures)
    raw = section.raw["cluster"]
    assert raw["score_cluster"]["rows"] == 20_000 and raw["score_cluster"]["workers"] >= 1
    assert raw["distill_sample"]["sample"]["sample_rows"] == 1_000
    assert raw["distill_sample"]["sample"]["self_check"]["loss"]["tree"]["ci_low"] is not None
    assert raw["fit"]["same_trees"]  # joblib's Dask backend grows the very same trees
