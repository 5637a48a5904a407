"""`python -m pocketforest.bench`: the contract's speed, memory and size figures, measured here.

Every figure is a ratio of two things measured side by side in the same run on the same machine
(times on a shared machine are noisy; ratios of neighbouring measurements hold better), printed
with its target and a pass/short mark. Heavy work runs in child processes so each one's peak
memory (maxrss) is its own. The data are synthetic and seeded: Friedman's test function #1
(Friedman 1991, via scikit-learn's ``make_friedman1``) widened with noise columns and two
categorical columns, so the table looks like a real 20-column file.

``--quick`` runs small sizes (a smoke run for the tests; its numbers are not the contract's).
"""
from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

FULL = {"rows": 100_000, "columns": 20, "score_rows": 1_000_000, "trees": None, "bootstrap": None,
        "batch": 10_000, "single_repeats": 300}
QUICK = {"rows": 2_000, "columns": 20, "score_rows": 20_000, "trees": 20, "bootstrap": 200, "batch": 1_000,
         "single_repeats": 30}
REGIONS = ["north", "south", "east", "west", "centre"]
GRADES = list("ABCDEFGH")


# --------------------------------------------------------------------------- data


def make_data(n: int, columns: int = 20, seed: int = 0, target: bool = True) -> pd.DataFrame:
    """Friedman #1 on the first five of ``columns - 2`` uniform columns, plus a region effect and a
    graded category; noise sd 1. Seeded, so every run sees the same table."""
    from sklearn.datasets import make_friedman1

    X, y = make_friedman1(n_samples=n, n_features=columns - 2, noise=1.0, random_state=seed)
    rng = np.random.default_rng(seed)
    df = pd.DataFrame(X, columns=[f"x{i + 1:02d}" for i in range(columns - 2)])
    region = rng.choice(REGIONS, n)
    grade_code = rng.integers(0, len(GRADES), n)
    df["region"] = region
    df["grade"] = np.asarray(GRADES, dtype=object)[grade_code]
    if target:
        df["y"] = y + np.where(region == "north", 1.5, 0.0) + 0.3 * grade_code
    return df


# --------------------------------------------------------------------------- figures


@dataclass
class Figure:
    """One contract figure: a ratio, its target and how it was obtained."""
    name: str
    value: float | None
    target: str
    passed: bool | None
    detail: dict = field(default_factory=dict)
    note: str = ""

    def line(self, timed: bool) -> str:
        mark = "n/a" if self.passed is None else ("pass" if self.passed else "SHORT")
        if not timed and self.passed is not None:
            mark = "(quick run: not judged)"
        shown = "not measured" if self.value is None else f"{self.value:,.3g}"
        text = f"{self.name:<48} {shown:>12}   target {self.target:<10} {mark}"
        return text + (f"\n    {self.note}" if self.note else "")


def _judge(value: float | None, op: str, bound: float) -> bool | None:
    if value is None or not np.isfinite(value):
        return None
    return bool(value <= bound) if op == "<=" else bool(value >= bound) if op == ">=" else bool(value < bound)


# --------------------------------------------------------------------------- child processes


def _run_child(kind: str, config: dict) -> dict:
    """Run ``_child_<kind>`` in a fresh interpreter; return its JSON result plus its own maxrss."""
    with tempfile.NamedTemporaryFile("w", suffix=".json", delete=False) as fh:
        json.dump(config, fh)
        cfg = fh.name
    try:
        env = dict(os.environ)
        src = str(Path(__file__).resolve().parents[1])
        env["PYTHONPATH"] = src + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
        proc = subprocess.Popen([sys.executable, "-m", "pocketforest.bench", "--child", kind, cfg],
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
        out, err = proc.communicate()
        if proc.returncode != 0:
            raise RuntimeError(f"benchmark child '{kind}' failed:\n{err[-3000:]}")
        return json.loads(out.strip().splitlines()[-1])
    finally:
        os.remove(cfg)


def _maxrss_mb() -> float:
    """Peak resident memory of this process so far, in MB.

    Linux's ``VmHWM`` belongs to the process's own address space, which ``exec`` renews; the
    older ``ru_maxrss`` also keeps the parent's resident size from the moment of ``fork``, so a
    child started by a large parent would report the parent's memory as its own.
    """
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024.0
    except OSError:
        pass
    import resource
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def _child_baseline(config: dict) -> dict:
    """Peak memory of an interpreter that has imported what distill imports: the floor."""
    import onnxruntime  # noqa: F401
    import skl2onnx  # noqa: F401
    import statsmodels.api  # noqa: F401

    from . import pipeline  # noqa: F401
    return {"maxrss_mb": _maxrss_mb()}


def _child_distill(config: dict) -> dict:
    """Read the CSV, distil, write the bundle (as the `distill` command does), then measure the
    bare forest fit, prediction speed and the unconstrained forest on the same rows."""
    from sklearn.base import clone

    from .design import model_frame
    from .intake import load
    from .pipeline import Settings, distill
    from .scoring.runtime import feeds

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
    peak = _maxrss_mb()
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
        out["sklearn_batch"][str(jobs)] = _best_of(lambda: pipe.predict(frame), 3) / len(batch)
    pipe.named_steps["forest"].set_params(n_jobs=1)
    features = [f.to_dict() for f in table.features]
    fd = feeds(batch, features)
    sessions = _sessions(str(Path(bundle) / "forest.onnx"))
    out["onnx_batch"] = {}
    for name, sess in sessions.items():
        for size in config.get("batch_sizes", [len(batch)]):
            parts = [{k: v[i:i + size] for k, v in fd.items()} for i in range(0, len(batch), size)]
            secs = _best_of(lambda: [sess.run(None, p) for p in parts], 3)
            out["onnx_batch"][f"{name}/batch={size}"] = secs / len(batch)
    one = batch.iloc[[0]]
    one_frame = model_frame(one, table.features)
    one_feed = feeds(one, features)
    reps = config["single_repeats"]
    out["sklearn_single_s"] = _median_of(lambda: pipe.predict(one_frame), reps)
    out["onnx_single"] = {name: _median_of(lambda: sess.run(None, one_feed), reps * 10)
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


def _best_of(fn, repeats: int) -> float:
    best = float("inf")
    fn()  # warm up
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t)
    return best


def _median_of(fn, repeats: int) -> float:
    fn()
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return float(np.median(times))


def _child_session(config: dict) -> dict:
    """What holding forest.onnx in an onnxruntime session costs in memory."""
    import onnxruntime as ort

    before = _maxrss_mb()
    opts = ort.SessionOptions()
    opts.log_severity_level = 3
    ort.InferenceSession(config["model"], sess_options=opts, providers=["CPUExecutionProvider"])
    return {"imports_mb": before, "maxrss_mb": _maxrss_mb()}


def _child_plain_copy(config: dict) -> dict:
    """The yardstick for `score`: pandas reads the whole CSV and writes it back out."""
    t = time.perf_counter()
    pd.read_csv(config["data"]).to_csv(config["out"], index=False)
    return {"seconds": time.perf_counter() - t, "maxrss_mb": _maxrss_mb()}


def _child_score(config: dict) -> dict:
    """`pocketforest score` exactly as the command line runs it, in its own process."""
    from .cli import main

    t = time.perf_counter()
    code = main(["score", config["bundle"], config["data"], "--model", config.get("model", "forest"),
                 "--out", config["out"], "-q"])
    if code != 0:
        raise RuntimeError(f"score exited {code}")
    return {"seconds": time.perf_counter() - t, "maxrss_mb": _maxrss_mb()}


CHILDREN = {"baseline": _child_baseline, "distill": _child_distill, "plain_copy": _child_plain_copy,
            "score": _child_score, "session": _child_session}


# --------------------------------------------------------------------------- the run


def run(quick: bool = False, work: str | None = None, say=print) -> dict:
    """Measure everything; return figures and raw measurements as one JSON-ready dict."""
    size = dict(QUICK if quick else FULL)
    tmp = tempfile.TemporaryDirectory(prefix="pf-bench-", dir=work)
    root = Path(tmp.name)
    try:
        return _measure(size, root, quick, say)
    finally:
        tmp.cleanup()


def _measure(size: dict, root: Path, quick: bool, say) -> dict:
    data = root / "train.csv"
    say(f"writing {size['rows']:,} x {size['columns']} training rows")
    make_data(size["rows"], size["columns"], seed=0).to_csv(data, index=False)
    bundle = root / "bundle"
    base = _run_child("baseline", {})
    say("distill, bare forest fit, unconstrained forest, prediction speed (one child process)")
    d = _run_child("distill", {"data": str(data), "bundle": str(bundle), "trees": size["trees"],
                               "bootstrap": size["bootstrap"],
                               "batch": size["batch"], "single_repeats": size["single_repeats"],
                               "batch_sizes": [size["batch"], 1000] if size["batch"] > 1000 else [size["batch"]]})
    score_data = root / "score.csv"
    say(f"writing {size['score_rows']:,} rows to score")
    make_data(size["score_rows"], size["columns"], seed=1, target=False).to_csv(score_data, index=False)
    say("plain pandas read + write of the scoring file")
    plain = _run_child("plain_copy", {"data": str(score_data), "out": str(root / "copy.csv")})
    say("pocketforest score (forest) on the same file")
    sc = _run_child("score", {"bundle": str(bundle), "data": str(score_data), "out": str(root / "pred.csv")})
    say("pocketforest score (tree) on the same file: the streaming cost without the forest's")
    sc_tree = _run_child("score", {"bundle": str(bundle), "data": str(score_data), "out": str(root / "pred.csv"),
                                   "model": "tree"})
    sess = _run_child("session", {"model": str(bundle / "forest.onnx")})

    whole = d["read_s"] + d["distill_s"] + d["write_s"]
    figures = []
    ratio = whole / d["bare_fit_s"]
    figures.append(Figure("distill wall time / bare forest fit", ratio, "<= 2.0", _judge(ratio, "<=", 2.0),
                          {"distill_s": whole, "bare_fit_s": d["bare_fit_s"]},
                          "read + distill + write vs one fit of the same forest on the same rows"))
    ratio = d["cpu_s"] / d["bare_fit_cpu_s"]
    figures.append(Figure("  the same in CPU seconds (all threads)", ratio, "<= 2.0", _judge(ratio, "<=", 2.0),
                          {"distill_cpu_s": d["cpu_s"], "bare_fit_cpu_s": d["bare_fit_cpu_s"]},
                          "steadier than wall time when other processes share the cores"))
    disc = d["stages"].get("discovery")
    ratio = disc / d["bare_fit_s"] if disc is not None else None
    figures.append(Figure("discovery time / bare forest fit", ratio, "<= 0.5", _judge(ratio, "<=", 0.5)))
    peak = d["maxrss_mb"]
    per_row_kb = max(peak - base["maxrss_mb"], 0.0) * 1024.0 / d["rows"]
    figures.append(Figure("distill peak memory, MB", peak, "(shown)", None,
                          {"imports_only_mb": base["maxrss_mb"], "kb_per_row_above_imports": per_row_kb},
                          f"{per_row_kb:.1f} KB per training row above the {base['maxrss_mb']:.0f} MB the imports take"))

    sk_batch = min(d["sklearn_batch"].values())
    best_onnx = min(d["onnx_batch"], key=d["onnx_batch"].get)
    ratio = sk_batch / d["onnx_batch"][best_onnx]
    figures.append(Figure("ONNX forest batch throughput / scikit-learn", ratio, ">= 1.5", _judge(ratio, ">=", 1.5),
                          {"sklearn_s_per_row": d["sklearn_batch"], "onnx_s_per_row": d["onnx_batch"]},
                          f"best ONNX setting {best_onnx}; scikit-learn at its best n_jobs"))
    best_single = min(d["onnx_single"], key=d["onnx_single"].get)
    ratio = d["sklearn_single_s"] / d["onnx_single"][best_single]
    figures.append(Figure("single-row latency scikit-learn / ONNX", ratio, ">= 100", _judge(ratio, ">=", 100.0),
                          {"sklearn_s": d["sklearn_single_s"], "onnx_s": d["onnx_single"]},
                          f"medians; ONNX session {best_single}"))
    ratio = plain["seconds"] / sc["seconds"]
    figures.append(Figure(f"score throughput / pandas read+write ({size['score_rows']:,} rows)", ratio, ">= 0.5",
                          _judge(ratio, ">=", 0.5), {"score_s": sc["seconds"], "plain_s": plain["seconds"],
                                                     "score_tree_s": sc_tree["seconds"]},
                          f"forest model; the surrogate tree scores the same file in {sc_tree['seconds']:.1f} s "
                          f"(plain read+write {plain['seconds']:.1f} s)"))
    figures.append(Figure("score peak memory, MB", sc["maxrss_mb"], "<= 400", _judge(sc["maxrss_mb"], "<=", 400.0),
                          {"plain_copy_mb": plain["maxrss_mb"], "forest_session_mb": sess["maxrss_mb"] - sess["imports_mb"]},
                          f"an onnxruntime session holding forest.onnx takes "
                          f"{sess['maxrss_mb'] - sess['imports_mb']:.0f} MB of it; pandas read+write of the same file "
                          f"peaks at {plain['maxrss_mb']:.0f} MB"))
    mb = d["onnx_bytes"]["forest"] / 1e6
    figures.append(Figure(f"forest.onnx size, MB ({d['rows']:,} rows, defaults)", mb, "< 50", _judge(mb, "<", 50.0),
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
    figures += honest_figures(quick)
    return {"quick": quick, "machine": machine(), "sizes": size, "figures": [asdict(f) for f in figures],
            "raw": {"distill": d, "baseline": base, "plain_copy": plain, "score": sc, "score_tree": sc_tree,
                    "session": sess}, "_objects": figures}


# --------------------------------------------------------------------------- honest-numbers figures
# The statistical figures (false discovery under a null, coverage of the loss interval) come from
# `pocketforest.simulate` (the honest-numbers work). WIRE THEM HERE at merge: call
# `simulate.null_rejection(...)` and `simulate.loss_coverage(...)` and return a Figure for each.
# Until that module exists the figures are reported as "not measured", never invented.


def honest_figures(quick: bool) -> list[Figure]:
    """Null rejection of the block test (split vs naive) and coverage of the loss interval.

    Selection on discovery rows, test on confirmation rows should reject pure noise at the
    nominal 5% (Cox 1975); testing on the rows that chose the terms rejects far more often
    (Berk et al. 2013). The paired percentile bootstrap interval should cover the true loss 95%
    of the time (Efron & Tibshirani 1993).
    """
    from .simulate import loss_coverage, null_rejection

    n_null, n_cover, truth = (20, 20, 20_000) if quick else (400, 400, 1_000_000)
    figures = []
    for family, rows in (("gaussian", 400), ("binomial", 800)):
        res = null_rejection(n_null if family == "gaussian" else max(10, n_null // 2), n_rows=rows, family=family, seed=0)
        rate = res["split_rate"]
        figures.append(Figure(f"null rejection, split ({family}, {res['n_datasets']} data sets)", rate,
                              "0.05 ± 0.02", _judge(abs(rate - 0.05), "<=", 0.02), detail=res,
                              note=f"naive (same rows chose and tested the terms): {res['naive_rate']:.3f}"))
    for task, k in (("regression", 2), ("classification", 2), ("classification", 3)):
        res = loss_coverage(n_cover, task=task, n_classes=k, truth_rows=truth, seed=0)
        label = task if task == "regression" else f"{k} classes"
        figures.append(Figure(f"loss interval coverage ({label}, {res['n_sims']} sims)", res["coverage"],
                              "0.95 ± 0.03", _judge(abs(res["coverage"] - 0.95), "<=", 0.03), detail=res,
                              note=f"Monte Carlo se {res['mc_se']:.3f}"))
    return figures


# --------------------------------------------------------------------------- output


def machine() -> dict:
    try:
        load = os.getloadavg()
    except OSError:
        load = None
    cpu = platform.processor() or ""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    import onnxruntime
    import sklearn
    return {"cpu": cpu, "cores": os.cpu_count(), "python": platform.python_version(),
            "platform": platform.platform(), "load_average_at_end": load,
            "scikit-learn": sklearn.__version__, "onnxruntime": onnxruntime.__version__}


def render(result: dict) -> str:
    timed = not result["quick"]
    lines = ["pocketforest benchmark" + (" (--quick: small sizes, nothing judged)" if not timed else ""),
             f"machine: {result['machine']['cpu']} x{result['machine']['cores']}, load average at end "
             f"{result['machine']['load_average_at_end']}", ""]
    lines += [f.line(timed) for f in result["_objects"]]
    stages = result["raw"]["distill"]["stages"]
    lines += ["", "distill stages, seconds: " + ", ".join(f"{k} {v:.1f}" for k, v in stages.items())]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m pocketforest.bench",
                                     description="Measure pocketforest's speed, memory and size figures on this machine.")
    parser.add_argument("--quick", action="store_true", help="small sizes, well under a minute (nothing judged)")
    parser.add_argument("--out", help="also write the results as JSON to this file")
    parser.add_argument("--work", help="folder for the temporary data and bundle (default: system temp)")
    parser.add_argument("--child", nargs=2, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        kind, cfg = args.child
        print(json.dumps(CHILDREN[kind](json.loads(Path(cfg).read_text()))))
        return 0
    result = run(args.quick, args.work, say=lambda t: print(t, file=sys.stderr, flush=True))
    print(render(result))
    if args.out:
        clean = {k: v for k, v in result.items() if k != "_objects"}
        Path(args.out).write_text(json.dumps(clean, indent=2) + "\n", encoding="utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main())
