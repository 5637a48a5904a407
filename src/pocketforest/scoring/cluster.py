"""Scoring on a Dask cluster: the bundle's ONNX model run partition by partition on the workers.

The public face is :mod:`pocketforest.dask` (``pocketforest.dask.score``); this module holds it.

What runs where:

* **client** (the process that calls :func:`score` or ``pocketforest score --engine dask``): reads
  the manifest, checks the model file against its checksum, checks the input's columns and the
  first rows' types, and builds the task graph. It never loads an onnxruntime session.
* **each worker process**: loads the bundle once, on first use, through :func:`worker_scorer`, a
  per-process cache keyed by the bundle's path and the checksums the client checked. Before the
  session is built the worker hashes its own copy of ``manifest.json`` and of the model file and
  refuses a copy that differs from what the client checked. Every later partition on that worker
  reuses the session.
* **per partition**: :func:`pocketforest.scoring.score.score_frame`, the very function single-machine
  ``score`` runs on each chunk, so the columns and values are the same by construction.

Order: partitions keep their order (Dask's ``map_partitions`` is one output partition per input
partition, in order; the command line numbers its output files in input order) and each partition
keeps its row order.

The bundle folder, the input files and the output folder must be visible at the same paths on
every worker (one machine, or a shared file system), like the data Dask itself reads.
"""
from __future__ import annotations

import os
import shutil
import socket
import sys
import tempfile
import threading
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from ..errors import BundleError, InputError
from .bundle_io import bundle_file, read_manifest, require_model, sha256
from .runtime import MODELS, Scorer

__all__ = ["BundleRef", "check_bundle", "score", "score_files", "worker_scorer", "local_cluster", "loads"]


@dataclass(frozen=True)
class BundleRef:
    """What a worker needs to load a bundle and prove it is the one the client checked."""
    path: str              # absolute path of the bundle folder
    model: str             # forest, tree or equation
    manifest_sha256: str   # of manifest.json, as the client read it
    model_sha256: str      # of <model>.onnx, as listed in that manifest and checked by the client
    threads: int = 1       # onnxruntime intra-op threads per session (one Dask thread per core)


def check_bundle(bundle: str | os.PathLike, model: str, *, threads: int = 1) -> BundleRef:
    """Client-side checks (manifest readable, model file matches its checksum) without a session."""
    if model not in MODELS:
        raise InputError(f"--model '{model}' is not one of {', '.join(MODELS)}")
    root = Path(bundle).resolve()
    manifest = read_manifest(root)
    require_model(manifest, model)
    bundle_file(root, manifest, f"{model}.onnx", check=True)
    return BundleRef(str(root), model, sha256(root / "manifest.json"), manifest["artifacts"][f"{model}.onnx"],
                     int(threads))


@dataclass
class Loaded:
    """A worker's checked bundle: the session, the manifest, and the features typed as `score` needs."""
    scorer: Scorer
    manifest: dict


_CACHE: dict[BundleRef, Loaded] = {}
_LOCK = threading.Lock()
_LOADS: list[BundleRef] = []


def _where() -> str:
    try:
        from distributed import get_worker
        return f"worker {get_worker().address}"
    except (ImportError, ValueError):
        return f"process {os.getpid()} on {socket.gethostname()}"


def worker_scorer(ref: BundleRef) -> Loaded:
    """The session for ``ref`` in this process, loaded and checked on first use only.

    The lock makes a worker with several threads load once; a failed check is not cached, so a
    repaired copy is picked up by the next task.
    """
    with _LOCK:
        hit = _CACHE.get(ref)
        if hit is None:
            hit = _load(ref)
            _CACHE[ref] = hit
            _LOADS.append(ref)
        return hit


def _load(ref: BundleRef) -> Loaded:
    where, root = _where(), Path(ref.path)
    mpath = root / "manifest.json"
    if not mpath.is_file():
        raise BundleError(f"{where}: bundle {root} not found there: every worker must see the bundle folder at the "
                          "same path as the client (a shared file system, or a copy in the same place)")
    if sha256(mpath) != ref.manifest_sha256:
        raise BundleError(f"{where}: {mpath} differs from the manifest the client checked: this worker's copy of the "
                          "bundle was altered or is another bundle; copy the bundle folder to the worker again")
    manifest = read_manifest(root)
    if manifest.get("artifacts", {}).get(f"{ref.model}.onnx") != ref.model_sha256:
        raise BundleError(f"{where}: {mpath} lists another checksum for {ref.model}.onnx than the client checked: "
                          "copy the bundle folder to the worker again")
    try:  # Scorer hashes the model file again against the manifest before onnxruntime reads it
        scorer = Scorer(root, ref.model, manifest, threads=ref.threads)
    except BundleError as exc:
        raise BundleError(f"{where}: {exc}") from None
    return Loaded(scorer, manifest)


def loads() -> list[tuple[str, str]]:
    """(bundle path, model) of every load in this process, for tests and the benchmark."""
    return [(r.path, r.model) for r in _LOADS]


# --------------------------------------------------------------------------- the Python API


def _score_partition(frame: pd.DataFrame, ref: BundleRef, keep: list[str], chunk_rows: int,
                     partition_info: dict | None = None) -> pd.DataFrame:
    from .score import score_frame

    loaded = worker_scorer(ref)
    number = partition_info["number"] if partition_info else 0
    return score_frame(loaded.scorer, loaded.manifest, frame, keep, source=f"Dask partition {number}",
                       chunk_rows=chunk_rows)


def _probe(ref: BundleRef, empty: pd.DataFrame, keep: list[str]) -> pd.DataFrame:
    """Runs on a worker: loads (and so checks) the bundle and scores zero rows, which gives the
    output's exact column types."""
    return _score_partition(empty, ref, keep, 1)


def score(ddf, bundle: str | os.PathLike, model: str = "forest", *, keep: Sequence[str] = (),
          chunk_rows: int | None = None, threads: int = 1):
    """Predictions for a Dask DataFrame, as a Dask DataFrame with the columns of `score`.

    The output has one partition per input partition, in order, each with the ``keep`` columns
    then the prediction columns and ``inputs_outside_training``. Checked here, before anything
    runs: the bundle (on the client, then on the one worker that takes the output's column types
    from a zero-row probe), and that ``ddf`` has every column the model needs. Values a partition
    cannot be typed with (text in a numeric column) raise the same InputError as `score` when
    the partition is computed.
    """
    import dask

    from .score import CHUNK_ROWS, check_keep, features_of

    ref = check_bundle(bundle, model, threads=threads)
    manifest = read_manifest(ref.path)
    keep = list(dict.fromkeys(keep))
    check_keep(manifest, keep, "the Dask DataFrame")
    names = [f.name for f in features_of(manifest)]
    absent = [c for c in names + keep if c not in ddf.columns]
    if absent:
        raise InputError(f"the Dask DataFrame has no column(s) {', '.join(repr(c) for c in absent)}, which "
                         f"{'--keep names' if set(absent) <= set(keep) else 'the model needs'}: add them (cells may be empty)")
    empty = ddf._meta[list(dict.fromkeys(names + keep))]
    meta = dask.delayed(_probe, pure=False)(ref, empty, keep).compute()
    return ddf.map_partitions(_score_partition, ref, keep, int(chunk_rows or CHUNK_ROWS), meta=meta,
                              enforce_metadata=False, align_dataframes=False)


# --------------------------------------------------------------------------- the command line engine


def local_cluster(workers: int | None = None, threads_per_worker: int = 1):
    """A ``distributed.LocalCluster`` sized to this machine: one single-threaded worker process per
    core the process may use, on the loopback interface, no dashboard."""
    import logging

    from distributed import LocalCluster

    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # not Linux
        cores = os.cpu_count() or 1
    return LocalCluster(n_workers=workers or cores, threads_per_worker=threads_per_worker, processes=True,
                        host="127.0.0.1", dashboard_address=None, silence_logs=logging.ERROR)


def check_out_folder(out: str | None, inputs: Sequence[Path]) -> Path:
    """--out for the cluster engine: a new (or empty) folder, not one holding the inputs."""
    if out is None:
        raise InputError("--engine dask writes one Parquet file per partition: give --out FOLDER")
    p = Path(out)
    if p.suffix.lower() in (".csv", ".parquet", ".tsv") and not p.is_dir():
        raise InputError(f"--out {out}: with --engine dask, --out is a folder (one Parquet file per partition)")
    if p.exists() and not p.is_dir():
        raise InputError(f"--out {out} exists and is not a folder: choose a new folder")
    if p.is_dir() and any(p.iterdir()):
        raise InputError(f"--out {out} is a folder that is not empty: choose a new folder or empty it first")
    if not p.resolve().parent.is_dir():
        raise InputError(f"--out {out}: folder {p.resolve().parent} does not exist: create it first")
    resolved = p.resolve()
    if any(resolved == f.resolve().parent for f in inputs):
        raise InputError(f"--out {out} is the folder that holds the input files: choose another folder")
    return p


def score_files(bundle: str | os.PathLike, data: str, model: str, out: str | None, keep: Sequence[str] = (), *,
                scheduler: str | None = None, quiet: bool = False, chunk_rows: int | None = None,
                piece_rows: int | None = None, client=None, decimal_comma: bool = False) -> int:
    """`score --engine dask`: score every file DATA names (a file, a folder or a glob pattern) on a
    Dask cluster, writing ``part-NNNNN.parquet`` files into the folder ``out`` in input order.

    Everything a user can get wrong is checked on the client first; the output folder is built
    under a temporary name beside ``out`` and renamed when every piece is done, so a failure
    leaves nothing behind. Returns the number of rows scored. ``decimal_comma``: as in
    :func:`intake.read_table`.
    """
    from ..intake.pieces import input_files, plan_pieces
    from .score import CHUNK_ROWS, Stray, check_keep, features_of

    files = input_files(data)
    dest = check_out_folder(out, files)
    ref = check_bundle(bundle, model)
    manifest = read_manifest(ref.path)
    keep = list(dict.fromkeys(keep))
    check_keep(manifest, keep, data)
    features = features_of(manifest)
    pieces = plan_pieces(files, [f.name for f in features], keep, piece_rows=piece_rows,
                         head_check=features, decimal_comma=decimal_comma)
    tmp = Path(tempfile.mkdtemp(prefix=f".{dest.name}.pf-score-", dir=str(dest.resolve().parent)))
    width = max(5, len(str(len(pieces))))
    own_client = client is None
    cluster = None
    total, stray = 0, Stray(features)
    try:
        if own_client:
            from distributed import Client
            if scheduler is None:
                cluster = local_cluster()
                client = Client(cluster)
            else:
                try:
                    client = Client(scheduler, timeout="30s")
                except OSError as exc:
                    raise InputError(f"--scheduler {scheduler}: no Dask scheduler answered ({exc}): "
                                     "check the address (such as tcp://host:8786)") from None
        outs = [str(tmp / f"part-{i:0{width}d}.parquet") for i in range(len(pieces))]
        futures = client.map(_score_piece, pieces, outs, ref=ref, keep=keep, chunk_rows=int(chunk_rows or CHUNK_ROWS),
                             decimal_comma=decimal_comma, pure=False)
        from distributed import as_completed
        index = {f.key: i for i, f in enumerate(futures)}
        states: list[dict | None] = [None] * len(futures)
        for fut in as_completed(futures):
            if fut.status == "error":  # fail fast: the first error stops the run
                exc = fut.exception()
                client.cancel(futures)
                raise exc
            rows, states[index[fut.key]] = fut.result()
            total += rows
            if not quiet:
                print(f"\rscored {total:,} rows", end="", flush=True, file=sys.stderr)
        for state in states:  # in input order, so the warnings' examples are those of `score`
            stray.merge(state)
        if dest.is_dir():
            dest.rmdir()  # empty, checked above
        os.rename(tmp, dest)
        tmp = None
    finally:
        if tmp is not None:
            shutil.rmtree(tmp, ignore_errors=True)
        if own_client and client is not None:
            client.close()
        if cluster is not None:
            cluster.close()
        if not quiet and total:
            print(file=sys.stderr)
    if not quiet:
        for w in stray.warnings():
            print(f"warning: {w}", file=sys.stderr)
    return total


def _score_piece(piece, out: str, *, ref: BundleRef, keep: list[str], chunk_rows: int,
                 decimal_comma: bool = False) -> tuple[int, dict]:
    """One piece (a file, or a run of a Parquet file's row groups) scored on a worker and written to
    ``out``; returns its row count and its tally of values outside the training envelope."""
    from ..intake.pieces import iter_piece
    from .score import ParquetSink, Stray, features_of, score_chunk

    loaded = worker_scorer(ref)
    features = features_of(loaded.manifest)
    stray, sink, rows = Stray(features), ParquetSink(out), 0
    try:
        wanted = [f.name for f in features] + keep
        for first_row, chunk in iter_piece(piece, wanted, chunk_rows, decimal_comma):
            frame = score_chunk(loaded.scorer, loaded.manifest, chunk, keep, source=str(piece.path),
                                first_row=first_row, stray=stray)
            sink.write(frame)
            rows += len(frame)
    finally:
        sink.close()
    return rows, stray.state()
