"""`score`: predictions from a bundle's ONNX model, streamed chunk by chunk in the input's order.

Memory stays bounded by the chunk size: the input is read with :func:`intake.iter_table` (only
the model's columns and the ``--keep`` columns), typed with :func:`intake.coerce_for_scoring`
exactly as the training data were, scored by onnxruntime and appended to the output, which is
written to a temporary file beside the target and renamed into place only when every row is done.

This path imports neither scikit-learn nor statsmodels (the tests check ``sys.modules``).

Unseen categories follow the bundle's policy (see :mod:`pocketforest.design`): the trees treat
the value as none of the known levels, the equation as the column's reference level, and the row's
``inputs_outside_training`` count includes it; a warning names the column and an example value.
"""
from __future__ import annotations

import os
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError
from ..features import Feature
from ..intake.coerce import coerce_for_scoring
from ..intake.pieces import input_files
from ..intake.reading import iter_table
from ..intake.values import spelling_key
from .bundle_io import read_manifest
from .explain import Explainer, equation_columns
from .runtime import Scorer, envelope_count
from ..threads import ordered_stream

CHUNK_ROWS = 20_000  # a 100,000-row chunk of text cells peaked near 250 MB; 20,000 near 45 MB


def features_of(manifest: dict) -> list[Feature]:
    keys = ("name", "kind", "onnx_input", "missing", "min", "max", "categories")
    return [Feature(**{k: f.get(k) for k in keys}) for f in manifest["features"]]


class Stray:
    """Running tally of values outside the training envelope, for one warning per column.

    A cluster task returns its tally as :meth:`state` (plain data) and the client adds them up
    with :meth:`merge`, in input order, so the warnings are those of single-machine `score`.
    """

    def __init__(self, features: list[Feature]):
        self.features = features
        self.unseen: dict[str, int] = {}
        self.examples: dict[str, list[str]] = {}
        self.outside: dict[str, int] = {}

    def add(self, typed: pd.DataFrame) -> None:
        for f in self.features:
            col = typed[f.name]
            if f.kind == "categorical":
                known = set(f.categories or []) | {""}
                bad = ~col.isin(known)
                if bad.any():
                    self.unseen[f.name] = self.unseen.get(f.name, 0) + int(bad.sum())
                    ex = self.examples.setdefault(f.name, [])
                    for v in pd.unique(col[bad])[: 3 - len(ex)]:
                        ex.append(str(v))
            else:
                x = col.to_numpy(dtype=float)
                with np.errstate(invalid="ignore"):
                    n = int(np.sum((x < f.min) | (x > f.max)))
                if n:
                    self.outside[f.name] = self.outside.get(f.name, 0) + n

    def state(self) -> dict:
        return {"unseen": dict(self.unseen), "examples": {k: list(v) for k, v in self.examples.items()},
                "outside": dict(self.outside)}

    def merge(self, state: dict) -> None:
        for name, n in state["unseen"].items():
            self.unseen[name] = self.unseen.get(name, 0) + n
        for name, values in state["examples"].items():
            ex = self.examples.setdefault(name, [])
            ex.extend(v for v in values if v not in ex)
            del ex[3:]
        for name, n in state["outside"].items():
            self.outside[name] = self.outside.get(name, 0) + n

    def warnings(self) -> list[str]:
        out = []
        levels = {f.name: f.categories or [] for f in self.features}
        for name, n in self.unseen.items():
            ex = ", ".join(repr(v) for v in self.examples.get(name, []))
            known = {spelling_key(k): k for k in levels.get(name, [])}
            alike = [f"{v!r} matches the known level {known[spelling_key(v)]!r} except for letter case or spacing"
                     for v in self.examples.get(name, []) if spelling_key(v) in known]
            out.append(f"column '{name}': {n} row(s) have categories never seen in training (e.g. {ex}); "
                       "the trees treat them as none of the known levels, the equation as the reference level"
                       + (f" ({'; '.join(alike)})" if alike else ""))
        for name, n in self.outside.items():
            out.append(f"column '{name}': {n} row(s) lie outside the training range; "
                       "the equation's powers, hinges and logs are not to be trusted there")
        return out


def _check_out(out: str | None) -> None:
    if out is not None and Path(out).suffix.lower() not in (".csv", ".parquet"):
        raise InputError(f"--out {out}: write predictions to a .csv or .parquet file")
    if out is not None and Path(out).is_dir():
        raise InputError(f"--out {out} is a folder: give a .csv or .parquet file name")
    if out is not None and not Path(out).resolve().parent.is_dir():
        raise InputError(f"--out {out}: folder {Path(out).parent} does not exist: create it first")


class ParquetSink:
    """Appends frames to one Parquet file with the schema fixed by the first chunk."""

    def __init__(self, path: str):
        self.path, self.writer, self.schema = path, None, None

    def write(self, frame: pd.DataFrame) -> None:
        import pyarrow as pa
        import pyarrow.parquet as pq
        if self.writer is None:
            table = pa.Table.from_pandas(frame, preserve_index=False)
            # a --keep column that is empty in the first chunk must still take text later
            fields = [pa.field(f.name, pa.string()) if pa.types.is_null(f.type) else f for f in table.schema]
            self.schema = pa.schema(fields)
            self.writer = pq.ParquetWriter(self.path, self.schema)
        self.writer.write_table(pa.Table.from_pandas(frame, schema=self.schema, preserve_index=False))

    def close(self) -> None:
        if self.writer is not None:
            self.writer.close()
            self.writer = None


def _why(bundle: str, manifest: dict, model: str):
    """(rows -> explanation columns, their names) for ``--explain`` (see :mod:`.explain`)."""
    if model == "forest":
        raise InputError("--explain explains the surrogates: use --model equation (each term's contribution) "
                         "or --model tree (the rules each row followed)")
    explainer = Explainer(bundle, manifest)
    if model == "equation":
        eta, parts = equation_columns(manifest)
        return explainer.equation, eta + parts
    explainer.rule_texts()  # an old bundle without tree nodes fails here, before any output
    return explainer.tree, ["tree_leaf", "tree_path"]


def check_keep(manifest: dict, keep: list[str], data, extra: list[str] = ()) -> None:
    """A --keep column must not take the name of an output column."""
    names = output_names(manifest) + list(extra)
    clash = [k for k in keep if k in names + ["inputs_outside_training"]]
    if clash:
        raise InputError(f"--keep column '{clash[0]}' has the name of an output column: rename it in {data}")


def output_names(manifest: dict) -> list[str]:
    if manifest["task"] == "regression":
        return ["prediction"]
    return ["label"] + [f"prob_{c}" for c in manifest["classes"]]


def score_chunk(scorer: Scorer, manifest: dict, chunk: pd.DataFrame, keep: list[str], *, source: str,
                first_row: int = 0, stray: Stray | None = None, why=None) -> pd.DataFrame:
    """One chunk of raw rows in, its output rows out (``keep`` columns, predictions,
    ``inputs_outside_training``), with a fresh 0-based index.

    THE per-partition function: single-machine `score`, the Dask engine and the Python API on a
    Dask or Spark partition all call it, so their columns and values agree by construction.
    """
    typed = coerce_for_scoring(chunk, features_of(manifest), source=source, first_row=first_row)
    pred = scorer.columns(typed)
    pred["inputs_outside_training"] = envelope_count(typed, manifest["features"])
    if why is not None:   # --explain: the surrogate's reasons per row
        pred = pd.concat([pred.reset_index(drop=True), why(typed).reset_index(drop=True)], axis=1)
    if stray is not None:
        stray.add(typed)
    return pd.concat([chunk[keep].reset_index(drop=True), pred.reset_index(drop=True)], axis=1)


def score_frame(scorer: Scorer, manifest: dict, frame: pd.DataFrame, keep: list[str], *, source: str,
                chunk_rows: int = CHUNK_ROWS) -> pd.DataFrame:
    """:func:`score_chunk` over a whole in-memory partition, ``chunk_rows`` at a time (the typed
    copies of a chunk, not the partition, bound the extra memory); the output keeps ``frame``'s
    index and row order. Error line numbers count the partition's rows from 2, as if it were a file."""
    parts = [score_chunk(scorer, manifest, frame.iloc[i:i + chunk_rows], keep, source=source, first_row=i)
             for i in range(0, len(frame), chunk_rows)] or [score_chunk(scorer, manifest, frame, keep, source=source)]
    out = pd.concat(parts, axis=0, ignore_index=True) if len(parts) > 1 else parts[0]
    out.index = frame.index
    return out


def score_file(bundle: str, data: str, model: str, out: str | None, keep: list[str] | None = None,
               quiet: bool = False, chunk_rows: int = CHUNK_ROWS, threads: int | None = -1,
               explain: bool = False, decimal_comma: bool = False) -> int:
    """Write predictions to ``out`` (CSV or Parquet by extension) or CSV on stdout; returns rows scored.

    ``data`` is a file, a folder of files or a glob pattern (:func:`pieces.input_files`); the
    files are scored one after another into the one output, in order. ``threads`` chunks are
    scored at once (-1: one per core), each with a single-threaded session call. ``explain`` adds
    the surrogate's reasons per row (:func:`_why`). ``decimal_comma``: as in :func:`intake.read_table`."""
    manifest = read_manifest(bundle)
    scorer = Scorer(bundle, model, manifest)
    features = features_of(manifest)
    keep = list(dict.fromkeys(k.strip() for k in keep or []))   # header names are read stripped
    _check_out(out)
    why, why_names = _why(bundle, manifest, model) if explain else (None, [])
    check_keep(manifest, keep, data, why_names)
    files = input_files(str(data))
    stray = Stray(features)
    tmp_path, sink, total, stream = None, None, 0, None
    try:
        if out is not None:
            fd, tmp_path = tempfile.mkstemp(prefix=".pf-score-", suffix=Path(out).suffix.lower(),
                                            dir=str(Path(out).resolve().parent))
            os.close(fd)
            if tmp_path.endswith(".parquet"):
                sink = ParquetSink(tmp_path)
        wanted = [f.name for f in features] + keep

        def chunks():
            for path in files:
                for first_row, chunk in iter_table(path, chunksize=chunk_rows, columns=wanted,
                                                   decimal_comma=decimal_comma):
                    if first_row == 0:
                        absent = [k for k in keep if k not in chunk.columns]
                        if absent:
                            raise InputError(f"{path}: --keep column(s) {', '.join(repr(k) for k in absent)} "
                                             "not found: check the names (they are case-sensitive)")
                    yield path, first_row, chunk

        def work(path, first_row, chunk):
            own = Stray(features)
            return score_chunk(scorer, manifest, chunk, keep, source=str(path), first_row=first_row, stray=own,
                               why=why), own

        started = False
        # chunks are typed and predicted on every core, one single-threaded session call each,
        # and written in input order (see runtime.session_options for why one thread per call)
        stream = chunks()
        for frame, own in ordered_stream(work, stream, threads):
            stray.merge(own.state())
            if out is None:
                frame.to_csv(sys.stdout, index=False, header=not started, lineterminator="\n")
            elif sink is not None:
                sink.write(frame)
            else:
                frame.to_csv(tmp_path, index=False, header=not started, mode="a" if started else "w",
                             lineterminator="\n")
            started = True
            total += len(frame)
            if not quiet and total:
                print(f"\rscored {total:,} rows", end="", file=sys.stderr, flush=True)
        if sink is not None:
            sink.close()
        if tmp_path is not None:
            os.replace(tmp_path, out)
            tmp_path = None
    finally:
        if stream is not None:
            stream.close()   # the input file is closed now, not when the generator is collected
        if sink is not None:
            sink.close()
        if tmp_path is not None and os.path.exists(tmp_path):
            os.remove(tmp_path)
        if not quiet and total:
            print(file=sys.stderr)
    if not quiet:
        for w in stray.warnings():
            print(f"warning: {w}", file=sys.stderr)
    return total
