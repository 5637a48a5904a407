"""`python -m pocketforest.bench --cluster`: the figures of scoring and distilling past one machine.

Side by side in one run, each heavy step in its own child process (so each peak memory is its
own), on a folder of seeded synthetic Parquet files (the benchmark's Friedman #1 table):

* ``distill --sample N`` on the whole folder, as the command line runs it: wall time, peak
  memory, and the self-check's loss interval on rows the sample left out;
* ``score`` of the folder in one process (streaming, as shipped) and ``score --engine dask`` on
  a local cluster sized to the machine: the throughput ratio, and each worker's peak memory;
* the forest fit through joblib's Dask backend against scikit-learn's own threads, which decides
  whether ``distill --engine dask`` is worth having.
"""
from __future__ import annotations

import json
import time
from pathlib import Path

from .common import Figure, Section, judge, make_data, maxrss_mb, run_child

FULL = {"rows": 10_000_000, "files": 20, "sample": 200_000, "fit_rows": 50_000, "fit_trees": 150}
QUICK = {"rows": 20_000, "files": 2, "sample": 1_000, "fit_rows": 1_000, "fit_trees": 10}


def write_folder(folder: Path, rows: int, files: int, say) -> None:
    """``files`` Parquet files of ``rows`` rows in all (one row group each), each its own seed."""
    folder.mkdir(parents=True, exist_ok=True)
    per = rows // files
    say(f"writing {rows:,} rows as {files} Parquet files")
    for i in range(files):
        make_data(per, 20, seed=100 + i).to_parquet(folder / f"part-{i:03d}.parquet", index=False,
                                                    row_group_size=per)


def child_distill_sample(config: dict) -> dict:
    """`pocketforest distill FOLDER --target y --sample N` exactly as the command line runs it."""
    from ..cli import main

    args = ["distill", config["data"], "--target", "y", "--sample", str(config["sample"]), "--out", config["bundle"],
            "-q", "--force"]
    if config.get("trees"):
        args += ["--trees", str(config["trees"])]
    t = time.perf_counter()
    code = main(args)
    if code != 0:
        raise RuntimeError(f"distill --sample exited {code}")
    seconds = time.perf_counter() - t
    m = json.loads((Path(config["bundle"]) / "manifest.json").read_text())
    return {"seconds": seconds, "maxrss_mb": maxrss_mb(), "sample": m["sample"],
            "forest_onnx_bytes": (Path(config["bundle"]) / "forest.onnx").stat().st_size}


def _worker_peak_mb() -> float:
    return maxrss_mb()


def _worker_cpu_s() -> float:
    return time.process_time()


def child_score_cluster(config: dict) -> dict:
    """`score --engine dask` on a local cluster sized to the machine, started here and timed with
    the scoring (a user waits for both); each worker's peak memory read from the worker."""
    from distributed import Client

    from ..scoring.cluster import local_cluster, score_files

    t = time.perf_counter()
    cluster = local_cluster()
    client = Client(cluster)
    up = time.perf_counter() - t
    try:
        cpu0 = client.run(_worker_cpu_s)
        t1 = time.perf_counter()
        n = score_files(config["bundle"], config["data"], "forest", config["out"], quiet=True, client=client)
        scoring = time.perf_counter() - t1
        cpu = sum(v - cpu0.get(k, 0.0) for k, v in client.run(_worker_cpu_s).items())
        workers = client.run(_worker_peak_mb)
    finally:
        client.close()
        cluster.close()
    return {"seconds": up + scoring, "startup_s": up, "scoring_s": scoring, "rows": n, "workers_cpu_s": cpu,
            "workers": len(workers), "worker_peak_mb": sorted(workers.values()), "client_peak_mb": maxrss_mb()}


def child_fit(config: dict) -> dict:
    """The default forest on the same rows, fitted with scikit-learn's threads and through
    joblib's Dask backend on a local cluster (the cluster's start-up not counted). joblib serves
    only as scikit-learn's parallel-backend switch here; nothing is dumped or loaded with it."""
    import joblib
    from distributed import Client
    from sklearn.ensemble import RandomForestRegressor

    from ..defaults import leaf_cap
    from ..scoring.cluster import local_cluster

    df = make_data(config["rows"], 20, seed=0)
    X = df.drop(columns=["y", "region", "grade"]).to_numpy(dtype="float32")
    y = df["y"].to_numpy()

    def forest():
        return RandomForestRegressor(n_estimators=config["trees"], min_samples_leaf=5, max_features=1 / 3,
                                     max_leaf_nodes=leaf_cap(config["trees"]), random_state=0, n_jobs=-1)

    t = time.perf_counter()
    threads = forest().fit(X, y)
    t_threads = time.perf_counter() - t
    cluster = local_cluster()
    client = Client(cluster)
    try:
        t = time.perf_counter()
        with joblib.parallel_backend("dask"):
            on_dask = forest().fit(X, y)
        t_dask = time.perf_counter() - t
    finally:
        client.close()
        cluster.close()
    same = all((a.tree_.threshold == b.tree_.threshold).all() for a, b in zip(threads.estimators_, on_dask.estimators_))
    return {"threads_s": t_threads, "dask_s": t_dask, "same_trees": bool(same), "rows": config["rows"],
            "trees": config["trees"]}


CHILDREN = {"distill_sample": child_distill_sample, "score_cluster": child_score_cluster, "fit_dask": child_fit}


def run(quick: bool, root: Path, say) -> Section:
    """The cluster section: its figures and the raw measurements behind them."""
    size = dict(QUICK if quick else FULL)
    folder = root / "cluster-data"
    write_folder(folder, size["rows"], size["files"], say)
    bundle = root / "cluster-bundle"
    say(f"distill --sample {size['sample']:,} on the {size['rows']:,}-row folder")
    ds = run_child("distill_sample", {"data": str(folder), "bundle": str(bundle), "sample": size["sample"],
                                      "trees": 10 if quick else None})
    say("score: one process, streaming")
    single = run_child("score", {"bundle": str(bundle), "data": str(folder), "out": str(root / "single.parquet")})
    say("score --engine dask: a local cluster sized to this machine")
    clus = run_child("score_cluster", {"bundle": str(bundle), "data": str(folder), "out": str(root / "cluster-out")})
    say("forest fit: scikit-learn threads vs joblib's Dask backend")
    fit = run_child("fit_dask", {"rows": size["fit_rows"], "trees": size["fit_trees"]})

    figures = []
    ratio = single["seconds"] / clus["seconds"]
    figures.append(Figure(f"cluster score / one-process score ({size['rows']:,} rows)", ratio, ">= 1.6",
                          judge(ratio, ">=", 1.6), {"single": single, "cluster": clus},
                          f"one process {single['seconds']:.1f} s ({single['maxrss_mb']:.0f} MB); cluster of "
                          f"{clus['workers']} workers {clus['seconds']:.1f} s, of which start-up {clus['startup_s']:.1f} s; "
                          f"CPU s per million rows: one process {1e6 * single.get('cpu_s', float('nan')) / clus['rows']:.1f}, "
                          f"workers {1e6 * clus.get('workers_cpu_s', float('nan')) / clus['rows']:.1f}"))
    figures.append(Figure("  peak memory per cluster worker, MB", max(clus["worker_peak_mb"]), "(shown)", None,
                          {"workers": clus["worker_peak_mb"], "client": clus["client_peak_mb"]},
                          "workers " + ", ".join(f"{v:.0f}" for v in clus["worker_peak_mb"])
                          + f" MB; the client {clus['client_peak_mb']:.0f} MB"))
    chk = ds["sample"].get("self_check") or {}
    loss = chk.get("loss") or {}
    note = "; ".join(f"{m} loss {lo['value']:+.4f} ({lo['ci_low']:+.4f} to {lo['ci_high']:+.4f})" for m, lo in loss.items())
    figures.append(Figure(f"distill --sample {size['sample']:,} of {size['rows']:,} rows, wall s", ds["seconds"],
                          "(shown)", None, {"seconds": ds["seconds"], "maxrss_mb": ds["maxrss_mb"],
                                            "self_check": chk, "design": {k: v for k, v in ds["sample"].items()
                                                                          if k != "self_check"}},
                          f"peak memory {ds['maxrss_mb']:.0f} MB; on {chk.get('evaluation', {}).get('n', 0):,} rows "
                          f"left out: {note}"))
    ratio = fit["dask_s"] / fit["threads_s"]
    figures.append(Figure("forest fit on Dask (joblib backend) / threads", ratio, "< 1 to pay", judge(ratio, "<", 1.0),
                          fit, f"{fit['trees']} trees on {fit['rows']:,} rows: threads {fit['threads_s']:.1f} s, "
                          f"Dask {fit['dask_s']:.1f} s; same trees: {fit['same_trees']}"))
    raw = {"distill_sample": ds, "score_single": single, "score_cluster": clus, "fit": fit}
    return Section(figures, {"cluster": raw}, {"cluster": size})
