"""Scoring on a Dask cluster equals single-machine `score`, row for row; workers check the bundle.

The cluster is a real ``distributed.LocalCluster`` with two worker *processes* (one thread each),
started once for this file. Processes, not threads: what is under test is per-process state (each
worker loads and checks its own copy of the bundle once) and results crossing a process boundary,
which a threaded cluster inside the test process would share with the client and hide.
"""
from __future__ import annotations

import hashlib
import json
import shutil

import numpy as np
import pandas as pd
import pytest

pytest.importorskip("distributed")

from pocketforest.dask import check_bundle, local_cluster, score, score_files  # noqa: E402
from pocketforest.errors import BundleError, InputError  # noqa: E402
from pocketforest.scoring.cluster import _score_partition, loads  # noqa: E402
from pocketforest.scoring.score import score_file  # noqa: E402

from conftest import run_cli, synthetic_table  # noqa: E402


@pytest.fixture(scope="module")
def client():
    from distributed import Client

    cluster = local_cluster(workers=2)
    c = Client(cluster)
    yield c
    c.close()
    cluster.close()


def _files(folder, n_files=3, rows=240, seed=20):
    """Several Parquet files with several row groups each, missing values, an unseen category and
    a value outside the training range, plus an id column to keep."""
    folder.mkdir()
    for i in range(n_files):
        df = synthetic_table(n=rows, seed=seed + i).drop(columns="y")
        df.insert(0, "row_id", [f"f{i}-{j:03d}" for j in range(rows)])
        if i == 1:
            df.loc[5, "colour"] = "purple"
            df.loc[7, "x1"] = 9.0
        df.to_parquet(folder / f"part.{i}.parquet", index=False, row_group_size=70)
    return folder


def test_a_decimal_comma_csv_scores_on_the_cluster_like_the_plain_file(bundles, client, tmp_path):
    """Two CSV files saved where the comma is the decimal mark (semicolons, 6,8), scored with
    decimal_comma on the cluster: the single-machine predictions of the same rows written plainly."""
    plain, comma = tmp_path / "plain", tmp_path / "comma"
    plain.mkdir()
    comma.mkdir()
    for i in range(2):
        df = synthetic_table(n=150, seed=40 + i).drop(columns="y")
        df.to_csv(plain / f"part.{i}.csv", index=False)
        df.to_csv(comma / f"part.{i}.csv", index=False, sep=";", decimal=",")
    assert "," in (comma / "part.0.csv").read_text().splitlines()[1]
    single = tmp_path / "single.parquet"
    score_file(str(bundles["regression"]), str(plain), "equation", str(single), quiet=True)
    out = tmp_path / "out"
    n = score_files(str(bundles["regression"]), str(comma), "equation", str(out), client=client, quiet=True,
                    decimal_comma=True)
    assert n == 300
    # the same numbers reach the same function: equal, not merely close
    pd.testing.assert_frame_equal(pd.read_parquet(single), pd.read_parquet(out))


@pytest.mark.parametrize("kind", ["regression", "multiclass"])
def test_cluster_score_equals_single_machine_score_row_for_row(bundles, client, tmp_path, kind):
    data = _files(tmp_path / "in")
    single = tmp_path / "single.parquet"
    score_file(str(bundles[kind]), str(data / "*.parquet"), "forest", str(single), keep=["row_id"], quiet=True)
    out = tmp_path / "out"
    # piece_rows=100 cuts each file into pieces of whole row groups, so files span several tasks
    n = score_files(str(bundles[kind]), str(data / "*.parquet"), "forest", str(out), keep=["row_id"],
                    client=client, quiet=True, piece_rows=100)
    parts = sorted(p.name for p in out.iterdir())
    assert n == 720 and len(parts) == 3 * 3 and parts[0] == "part-00000.parquet"  # row groups 70+70+70+30
    a, b = pd.read_parquet(single), pd.read_parquet(out)
    # the same function on the same chunks with the same model: equal, not merely close
    pd.testing.assert_frame_equal(a, b)
    assert b["inputs_outside_training"].sum() >= 2
    # the Python API on a Dask DataFrame read by Dask itself: same predictions, partition order kept
    import dask.dataframe as dd

    ddf = dd.read_parquet(str(data / "*.parquet"))
    scored = score(ddf, bundles[kind], "forest", keep=["row_id"])
    assert scored.npartitions == ddf.npartitions
    api = scored.compute().reset_index(drop=True)
    assert list(api.columns) == list(a.columns)
    pd.testing.assert_frame_equal(a, api, check_dtype=False)  # Dask reads row_id as its own string type
    # each worker loaded the bundle once, however many partitions it scored
    per_worker = client.run(loads)
    assert all(v.count((str(bundles[kind].resolve()), "forest")) == 1 for v in per_worker.values())


def test_cli_engine_dask_with_a_scheduler_address(bundles, client, tmp_path):
    data = _files(tmp_path / "in", n_files=2, rows=100)
    out = tmp_path / "pred"
    r = run_cli("score", str(bundles["binary"]), str(data), "--model", "tree", "--engine", "dask",
                "--scheduler", client.scheduler.address, "--keep", "row_id", "--out", str(out))
    assert r.returncode == 0, r.stderr
    assert "wrote 200 predictions" in r.stderr and "categories never seen" in r.stderr
    single = tmp_path / "single.csv"
    score_file(str(bundles["binary"]), str(data), "tree", str(single), keep=["row_id"], quiet=True)
    a = pd.read_csv(single)
    b = pd.read_parquet(out)
    assert list(a.columns) == list(b.columns)
    assert (a["row_id"] == b["row_id"]).all() and (a["label"] == b["label"]).all()
    # the CSV round trip prints 17 significant digits, which read back to the same double
    np.testing.assert_array_equal(a[["prob_no", "prob_yes"]].to_numpy(), b[["prob_no", "prob_yes"]].to_numpy())


def _tampered_copy(bundle, tmp_path):
    copy = tmp_path / "copy"
    shutil.copytree(bundle, copy)
    return copy


def test_a_worker_refuses_a_bundle_that_differs_from_what_the_client_checked(bundles, client, tmp_path):
    copy = _tampered_copy(bundles["regression"], tmp_path)
    ref = check_bundle(copy, "forest")  # the client's check passes
    frame = synthetic_table(n=20, seed=5).drop(columns="y")
    # the worker's copy of forest.onnx is altered after the client checked it
    raw = bytearray((copy / "forest.onnx").read_bytes())
    raw[-10] ^= 0xFF
    (copy / "forest.onnx").write_bytes(bytes(raw))
    with pytest.raises(BundleError, match=r"worker tcp://.*does not match its checksum"):
        client.submit(_score_partition, frame, ref, [], 100, pure=False).result()
    # a consistent but different manifest (the checksum rewritten to match the altered file)
    manifest = json.loads((copy / "manifest.json").read_text())
    manifest["artifacts"]["forest.onnx"] = hashlib.sha256(bytes(raw)).hexdigest()
    (copy / "manifest.json").write_text(json.dumps(manifest))
    with pytest.raises(BundleError, match="differs from the manifest the client checked"):
        client.submit(_score_partition, frame, ref, [], 100, pure=False).result()
    # and the client itself refuses an altered bundle before any task is sent
    bad = tmp_path / "bad"
    shutil.copytree(bundles["regression"], bad)
    (bad / "forest.onnx").write_bytes(bytes(raw))
    with pytest.raises(BundleError, match="does not match its checksum"):
        score_files(str(bad), str(_files(tmp_path / "in")), "forest", str(tmp_path / "o"), client=client, quiet=True)
    assert not (tmp_path / "o").exists()


def test_bad_input_fails_on_the_client_or_stops_the_run_with_one_error(bundles, client, tmp_path):
    data = _files(tmp_path / "in", n_files=2, rows=100)
    addr = client.scheduler.address
    base = ["score", str(bundles["regression"]), str(data / "*.parquet"), "--model", "forest", "--engine", "dask",
            "--scheduler", addr]
    # a missing column, named with its file, before any task runs
    df = pd.read_parquet(data / "part.1.parquet").drop(columns="x2")
    df.to_parquet(data / "part.1.parquet", index=False)
    r = run_cli(*base, "--out", str(tmp_path / "o1"))
    assert r.returncode == 2 and r.stderr.startswith("error:") and len(r.stderr.strip().splitlines()) == 1
    assert "part.1.parquet" in r.stderr and "'x2'" in r.stderr
    assert not (tmp_path / "o1").exists()
    # text in a numeric column deep in the second file: a worker finds it, the client reports it
    df = synthetic_table(n=100, seed=21).drop(columns="y")
    df.insert(0, "row_id", "r")
    df["x2"] = [repr(v) for v in df["x2"]]  # numbers stored as text are fine (as in `score`) ...
    df.loc[90, "x2"] = "twelve"             # ... but not a word
    df.to_parquet(data / "part.1.parquet", index=False)
    r = run_cli(*base, "--out", str(tmp_path / "o2"))
    assert r.returncode == 2 and r.stderr.strip().splitlines()[-1].startswith("error:")
    assert "'x2'" in r.stderr and "twelve" in r.stderr and "line 92" in r.stderr and "part.1.parquet" in r.stderr
    assert not (tmp_path / "o2").exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]
    # usage: the cluster engine writes a folder
    r = run_cli(*base, "--out", str(tmp_path / "p.csv"))
    assert r.returncode == 2 and "is a folder" in r.stderr
    r = run_cli("score", str(bundles["regression"]), str(data), "--model", "forest", "--scheduler", addr)
    assert r.returncode == 2 and "--scheduler needs --engine dask" in r.stderr


def test_api_names_missing_columns_before_computing(bundles, client):
    import dask.dataframe as dd

    ddf = dd.from_pandas(synthetic_table(n=50, seed=2).drop(columns=["y", "x3"]), npartitions=2)
    with pytest.raises(InputError, match="'x3'.*the model needs"):
        score(ddf, bundles["regression"], "equation")


def test_cli_engine_dask_starts_its_own_local_cluster(bundles, tmp_path):
    data = _files(tmp_path / "in", n_files=2, rows=60)
    out = tmp_path / "pred"
    r = run_cli("score", str(bundles["regression"]), str(data / "*.parquet"), "--model", "equation",
                "--engine", "dask", "--out", str(out), "-q")
    assert r.returncode == 0, r.stderr
    single = tmp_path / "single.parquet"
    score_file(str(bundles["regression"]), str(data / "*.parquet"), "equation", str(single), quiet=True)
    pd.testing.assert_frame_equal(pd.read_parquet(single), pd.read_parquet(out))
