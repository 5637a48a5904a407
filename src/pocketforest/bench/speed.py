"""The contract's speed, memory and size figures: distill against a bare forest fit, ONNX against
scikit-learn, score against a plain pandas read and write, peak memory, forest.onnx size.

The data are synthetic and seeded (:func:`.common.make_data`). ``quick`` runs small sizes (a
smoke run for the tests; its numbers are not the contract's).
"""
from __future__ import annotations

import os
import time
from pathlib import Path

import numpy as np
import pandas as pd

from .common import Figure, Section, best_of, judge, make_data, maxrss_mb, median_of, run_child

FULL = {"rows": 100_000, "columns": 20, "score_rows": 1_000_000, "trees": None, "bootstrap": None,
        "batch": 10_000, "single_repeats": 300}
QUICK = {"rows": 2_000, "columns": 20, "score_rows": 20_000, "trees": 20, "bootstrap": 200, "batch": 1_000,
         "single_repeats": 30}


def _child_baseline(config: dict) -> dict:
    """Peak memory of an interpreter that has imported what distill imports: the floor."""
    import onnxruntime  # noqa: F401
    import skl2onnx  # noqa: F401
    import statsmodels.api  # noqa: F401

    from .. import pipeline  # noqa: F401
    return {"maxrss_mb": maxrss_mb()}


def _child_distill(config: dict) -> dict:
    """Read the CSV, distil, write the bundle (as the `distill` command does), then measure the
    bare forest fit, prediction speed and the unconstrained forest on the same rows."""
    from sklearn.base import clone

    from ..design import model_frame
    from ..intake import load
    from ..pipeline import Settings, distill
    from ..scoring.runtime import feeds

    cpu0 = time.process_time()  # CPU seconds of all threads: steadier than wall time on a shared machine
    t0 = time.perf_counter()
    table = load(config["data"], "y")
    t_read = time.perf_counter() - t0
    given = {k: config[k] for k in ("trees", "bootstrap") if config.get(k)}
    settings = Settings(quiet=True, **given)
    t1 = time.perf_counter()
    result = distill(table, settings)
    t_distill = time.perf_counter() - t1
    t2 = time.perf_counter()
    bundle = result.write(config["bundle"])
    t_write = time.perf_counter() - t2
    cpu_whole = time.process_time() - cpu0
    peak = maxrss_mb()
    out: dict = {"read_s": t_read, "distill_s": t_distill, "write_s": t_write, "cpu_s": cpu_whole,
                 "stages": result.timings,
                 "maxrss_mb": peak, "rows": len(table.data), "oob": result.forest.oob,
                 "forest_settings": result.forest.settings,
                 "onnx_bytes": {m: os.path.getsize(Path(bundle) / f"{m}.onnx") for m in ("forest", "tree", "equation")},
                 "forest_nodes": int(sum(e.tree_.node_count for e in result.forest.model.estimators_))}

    # The bare fit: the same forest (same parameters, same seed) on the same discovery rows,
    # already encoded, with nothing else around it.
    fitted = result.forest.model
    prep = result.forest.pipeline.named_steps["prep"]
    disc = table.data.iloc[result.splits.discovery].reset_index(drop=True)
    Xd = np.asarray(prep.transform(model_frame(disc, table.features)), dtype=np.float32)
    yd = disc["y"].to_numpy(dtype=float)
    bare = clone(fitted).set_params(warm_start=False, oob_score=False, n_jobs=-1,
                                    n_estimators=result.forest.settings["trees"])
    c3, t3 = time.process_time(), time.perf_counter()
    bare.fit(Xd, yd)
    out["bare_fit_s"] = time.perf_counter() - t3
    out["bare_fit_cpu_s"] = time.process_time() - c3

    # Unconstrained trees (leaf size 1, no leaf cap), same everything else: what the size-keeping
    # defaults cost in out-of-bag accuracy.
    free = clone(fitted).set_params(warm_start=False, oob_score=True, n_jobs=-1, min_samples_leaf=1,
                                    max_leaf_nodes=None, n_estimators=result.forest.settings["trees"])
    t4 = time.perf_counter()
    free.fit(Xd, yd)
    out["free_fit_s"] = time.perf_counter() - t4
    out["free_oob_r2"] = float(free.oob_score_)
    out["free_nodes"] = int(sum(e.tree_.node_count for e in free.estimators_))
    del free, bare

    # Batch throughput and single-row latency: the shipped pipeline vs forest.onnx.
    test = table.data.iloc[result.splits.test].reset_index(drop=True)
    batch = test.iloc[np.arange(config["batch"]) % len(test)].reset_index(drop=True)
    frame = model_frame(batch, table.features)
    pipe = result.forest.pipeline
    out["sklearn_batch"] = {}
    for jobs in (1, -1):
        pipe.named_steps["forest"].set_params(n_jobs=jobs)
        out["sklearn_batch"][str(jobs)] = best_of(lambda: pipe.predict(frame), 3) / len(batch)
    pipe.named_steps["forest"].set_params(n_jobs=1)
    features = [f.to_dict() for f in table.features]
    fd = feeds(batch, features)
    sessions = _sessions(str(Path(bundle) / "forest.onnx"))
    out["onnx_batch"] = {}
    for name, sess in sessions.items():
        for size in config.get("batch_sizes", [len(batch)]):
            parts = [{k: v[i:i + size] for k, v in fd.items()} for i in range(0, len(batch), size)]
            secs = best_of(lambda: [sess.run(None, p) for p in parts], 3)
            out["onnx_batch"][f"{name}/batch={size}"] = secs / len(batch)
    # what `score` and each Dask worker do: single-threaded calls, one per core at once
    from concurrent.futures import ThreadPoolExecutor
    cores = os.cpu_count() or 1
    for size in config.get("batch_sizes", [len(batch)]):
        parts = [{k: v[i:i + size] for k, v in fd.items()} for i in range(0, len(batch), size)]
        if len(parts) >= cores:
            with ThreadPoolExecutor(cores) as pool:
                secs = best_of(lambda: list(pool.map(lambda q: sessions["threads=1"].run(None, q), parts)), 3)
            out["onnx_batch"][f"threads=1 x {cores} calls/batch={size}"] = secs / len(batch)
    one = batch.iloc[[0]]
    one_frame = model_frame(one, table.features)
    one_feed = feeds(one, features)
    reps = config["single_repeats"]
    out["sklearn_single_s"] = median_of(lambda: pipe.predict(one_frame), reps)
    out["onnx_single"] = {name: median_of(lambda: sess.run(None, one_feed), reps * 10)
                          for name, sess in sessions.items()}
    return out


def _sessions(path: str) -> dict:
    """onnxruntime sessions worth comparing: the default, all graph optimisations with one intra-op
    thread per core, and a single thread (what a single-row caller wants)."""
    import onnxruntime as ort

    out = {}
    for name, threads in (("default", None), ("threads=cores", os.cpu_count() or 1), ("threads=1", 1)):
        opts = ort.SessionOptions()
        opts.log_severity_level = 3
        opts.graph_optimization_level = ort.GraphOptimizationLevel.ORT_ENABLE_ALL
        if threads is not None:
            opts.intra_op_num_threads = threads
            opts.inter_op_num_threads = 1
        out[name] = ort.InferenceSession(path, sess_options=opts, providers=["CPUExecutionProvider"])
    return out


def _child_session(config: dict) -> dict:
    """What holding forest.onnx in an onnxruntime session costs in memory."""
    import onnxruntime as ort

    before = maxrss_mb()
    opts = ort.SessionOptions()
    opts.log_severity_level = 3
    ort.InferenceSession(config["model"], sess_options=opts, providers=["CPUExecutionProvider"])
    return {"imports_mb": before, "maxrss_mb": maxrss_mb()}


def _child_plain_copy(config: dict) -> dict:
    """The yardstick for `score`: pandas reads the whole CSV and writes it back out."""
    t = time.perf_counter()
    pd.read_csv(config["data"]).to_csv(config["out"], index=False)
    return {"seconds": time.perf_counter() - t, "maxrss_mb": maxrss_mb()}


def _child_score(config: dict) -> dict:
    """`pocketforest score` exactly as the command line runs it, in its own process."""
    from ..cli import main

    t, cpu = time.perf_counter(), time.process_time()
    code = main(["score", config["bundle"], config["data"], "--model", config.get("model", "forest"),
                 "--out", config["out"], "-q"])
    if code != 0:
        raise RuntimeError(f"score exited {code}")
    return {"seconds": time.perf_counter() - t, "cpu_s": time.process_time() - cpu, "maxrss_mb": maxrss_mb()}


CHILDREN = {"baseline": _child_baseline, "distill": _child_distill, "plain_copy": _child_plain_copy,
            "score": _child_score, "session": _child_session}


def run(quick: bool, root: Path, say) -> Section:
    """Measure every speed, memory and size figure, with data and bundle under ``root``."""
    size = dict(QUICK if quick else FULL)
    figures, raw = _measure(size, root, say)
    stages = raw["distill"]["stages"]
    text = "distill stages, seconds: " + ", ".join(f"{k} {v:.1f}" for k, v in stages.items())
    return Section(figures, raw, size, ["", text])


def _measure(size: dict, root: Path, say) -> tuple[list[Figure], dict]:
    data = root / "train.csv"
    say(f"writing {size['rows']:,} x {size['columns']} training rows")
    make_data(size["rows"], size["columns"], seed=0).to_csv(data, index=False)
    bundle = root / "bundle"
    base = run_child("baseline", {})
    say("distill, bare forest fit, unconstrained forest, prediction speed (one child process)")
    d = run_child("distill", {"data": str(data), "bundle": str(bundle), "trees": size["trees"],
                               "bootstrap": size["bootstrap"],
                               "batch": size["batch"], "single_repeats": size["single_repeats"],
                               "batch_sizes": [size["batch"], size["batch"] // 2, 1000] if size["batch"] > 1000 else [size["batch"]]})
    score_data = root / "score.csv"
    say(f"writing {size['score_rows']:,} rows to score")
    make_data(size["score_rows"], size["columns"], seed=1, target=False).to_csv(score_data, index=False)
    say("plain pandas read + write of the scoring file")
    plain = run_child("plain_copy", {"data": str(score_data), "out": str(root / "copy.csv")})
    say("pocketforest score (forest) on the same file")
    sc = run_child("score", {"bundle": str(bundle), "data": str(score_data), "out": str(root / "pred.csv")})
    say("pocketforest score (tree) on the same file: the streaming cost without the forest's")
    sc_tree = run_child("score", {"bundle": str(bundle), "data": str(score_data), "out": str(root / "pred.csv"),
                                   "model": "tree"})
    sess = run_child("session", {"model": str(bundle / "forest.onnx")})

    whole = d["read_s"] + d["distill_s"] + d["write_s"]
    figures = []
    ratio = whole / d["bare_fit_s"]
    figures.append(Figure("distill wall time / bare forest fit", ratio, "<= 2.0", judge(ratio, "<=", 2.0),
                          {"distill_s": whole, "bare_fit_s": d["bare_fit_s"]},
                          "read + distill + write vs one fit of the same forest on the same rows"))
    ratio = d["cpu_s"] / d["bare_fit_cpu_s"]
    figures.append(Figure("  the same in CPU seconds (all threads)", ratio, "<= 2.0", judge(ratio, "<=", 2.0),
                          {"distill_cpu_s": d["cpu_s"], "bare_fit_cpu_s": d["bare_fit_cpu_s"]},
                          "steadier than wall time when other processes share the cores"))
    disc = d["stages"].get("discovery")
    ratio = disc / d["bare_fit_s"] if disc is not None else None
    figures.append(Figure("discovery time / bare forest fit", ratio, "<= 0.5", judge(ratio, "<=", 0.5)))
    peak = d["maxrss_mb"]
    per_row_kb = max(peak - base["maxrss_mb"], 0.0) * 1024.0 / d["rows"]
    figures.append(Figure("distill peak memory, MB", peak, "(shown)", None,
                          {"imports_only_mb": base["maxrss_mb"], "kb_per_row_above_imports": per_row_kb},
                          f"{per_row_kb:.1f} KB per training row above the {base['maxrss_mb']:.0f} MB the imports take"))

    sk_batch = min(d["sklearn_batch"].values())
    best_onnx = min(d["onnx_batch"], key=d["onnx_batch"].get)
    ratio = sk_batch / d["onnx_batch"][best_onnx]
    figures.append(Figure("ONNX forest batch throughput / scikit-learn", ratio, ">= 1.5", judge(ratio, ">=", 1.5),
                          {"sklearn_s_per_row": d["sklearn_batch"], "onnx_s_per_row": d["onnx_batch"]},
                          f"best ONNX setting {best_onnx}; scikit-learn at its best n_jobs"))
    best_single = min(d["onnx_single"], key=d["onnx_single"].get)
    ratio = d["sklearn_single_s"] / d["onnx_single"][best_single]
    figures.append(Figure("single-row latency scikit-learn / ONNX", ratio, ">= 100", judge(ratio, ">=", 100.0),
                          {"sklearn_s": d["sklearn_single_s"], "onnx_s": d["onnx_single"]},
                          f"medians; ONNX session {best_single}"))
    ratio = plain["seconds"] / sc["seconds"]
    figures.append(Figure(f"score throughput / pandas read+write ({size['score_rows']:,} rows)", ratio, ">= 0.5",
                          judge(ratio, ">=", 0.5), {"score_s": sc["seconds"], "plain_s": plain["seconds"],
                                                     "score_tree_s": sc_tree["seconds"]},
                          f"forest model; the surrogate tree scores the same file in {sc_tree['seconds']:.1f} s "
                          f"(plain read+write {plain['seconds']:.1f} s)"))
    figures.append(Figure("score peak memory, MB", sc["maxrss_mb"], "<= 400", judge(sc["maxrss_mb"], "<=", 400.0),
                          {"plain_copy_mb": plain["maxrss_mb"], "forest_session_mb": sess["maxrss_mb"] - sess["imports_mb"]},
                          f"an onnxruntime session holding forest.onnx takes "
                          f"{sess['maxrss_mb'] - sess['imports_mb']:.0f} MB of it; pandas read+write of the same file "
                          f"peaks at {plain['maxrss_mb']:.0f} MB"))
    mb = d["onnx_bytes"]["forest"] / 1e6
    figures.append(Figure(f"forest.onnx size, MB ({d['rows']:,} rows, defaults)", mb, "< 50", judge(mb, "<", 50.0),
                          {"bytes": d["onnx_bytes"], "nodes": d["forest_nodes"]}))
    bytes_per_node = d["onnx_bytes"]["forest"] / max(d["forest_nodes"], 1)
    free_mb = d["free_nodes"] * bytes_per_node / 1e6
    oob_default = d["oob"].get("r2")
    cost = (d["free_oob_r2"] - oob_default) if oob_default is not None else None
    figures.append(Figure("OOB r2 cost of the defaults vs unconstrained trees", cost, "(shown)", None,
                          {"oob_r2_defaults": oob_default, "oob_r2_unconstrained": d["free_oob_r2"],
                           "forest_settings": d["forest_settings"],
                           "unconstrained_onnx_mb_estimate": free_mb},
                          f"OOB r2 {oob_default:.4f} with the defaults ({mb:.1f} MB) vs {d['free_oob_r2']:.4f} "
                          f"unconstrained (about {free_mb:.0f} MB at {bytes_per_node:.0f} bytes per node)"))
    return figures, {"distill": d, "baseline": base, "plain_copy": plain, "score": sc, "score_tree": sc_tree,
                     "session": sess}
