"""Scoring through onnxruntime from a bundle alone (no scikit-learn, no statsmodels).

The manifest says which inputs each graph takes and how to type them; missing numbers go in as
NaN and missing categories as the empty string, exactly as the contract states.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import onnxruntime as ort
import pandas as pd

from ..errors import InputError
from .bundle_io import bundle_file, read_manifest, require_model

MODELS = ("forest", "tree", "equation")


def feeds(frame: pd.DataFrame, features: list[dict]) -> dict[str, np.ndarray]:
    """ONNX inputs from a frame whose columns are named as the data's."""
    out = {}
    for f in features:
        col = frame[f["name"]]
        if f["kind"] == "numeric":
            out[f["onnx_input"]] = pd.to_numeric(col, errors="coerce").to_numpy(dtype=np.float32).reshape(-1, 1)
        else:
            out[f["onnx_input"]] = col.fillna("").astype(str).to_numpy(dtype=object).reshape(-1, 1)
    return out


def session_options(*, threads: int | None = None, latency: bool = False) -> ort.SessionOptions:
    """Session settings for scoring, measured on this project's 2-core machines.

    * ``latency=True`` (one row at a time): one intra-op thread; a thread pool only adds
      hand-off cost for a single row.
    * batch (default): ``threads`` intra-op threads (None = onnxruntime's default, one per core).
      Scoring (:class:`Scorer`) uses ONE: onnxruntime 1.32's tree-ensemble kernel splits the trees
      between threads on batches of more than 50 rows and adds the partial sums, so with two
      threads a row's prediction changes in its last bits with the batch size and with the core
      count (measured on a 150-tree forest); with one thread it does not, so every chunking, every
      machine and every Dask worker gives the same numbers. `score` and the cluster use the cores
      by scoring several chunks at once instead.
    * Always: full graph optimisation, sequential execution (the graphs are chains), and no
      spin-waiting between calls; spinning threads burn a shared CPU and measured slower when the
      machine is busy (batch of 20,000 rows, 200 trees: 1.24 s with spinning vs 0.69 s without,
      0.49 s with one thread, at load average 8 on 2 cores).
    """
    opts = ort.SessionOptions()
    opts.log_severity_level = 3
    opts.graph_optimization_level = ort.GraphOptimizationLevel.ORT_ENABLE_ALL
    opts.execution_mode = ort.ExecutionMode.ORT_SEQUENTIAL
    opts.inter_op_num_threads = 1
    opts.intra_op_num_threads = 1 if latency else int(threads or 0)
    opts.add_session_config_entry("session.intra_op.allow_spinning", "0")
    return opts


def make_session(model: str | Path | bytes, *, threads: int | None = None,
                 latency: bool = False) -> ort.InferenceSession:
    """A CPU onnxruntime session for a model file (or its bytes) with :func:`session_options`.

    For the benchmark: ``make_session(path, latency=True)`` for single-row timing,
    ``make_session(path, threads=n)`` for batch throughput.
    """
    src = model if isinstance(model, bytes) else str(model)
    return ort.InferenceSession(src, sess_options=session_options(threads=threads, latency=latency),
                                providers=["CPUExecutionProvider"])


class Scorer:
    """One ONNX model of a bundle, ready to predict on frames."""

    def __init__(self, bundle: str | Path, model: str, manifest: dict | None = None, *, check: bool = True,
                 threads: int | None = 1, latency: bool = False):
        if model not in MODELS:
            raise InputError(f"--model '{model}' is not one of {', '.join(MODELS)}")
        self.model = model
        self.manifest = manifest or read_manifest(bundle)
        require_model(self.manifest, model)
        path = bundle_file(bundle, self.manifest, f"{model}.onnx", check=check)
        try:
            self.session = make_session(path, threads=threads, latency=latency)
        except Exception as exc:  # onnxruntime raises its own exception types
            raise InputError(f"{path} could not be loaded by onnxruntime ({exc}); the bundle is damaged") from None
        self.features = self.manifest["features"]
        self.task = self.manifest["task"]
        self.classes = self.manifest.get("classes")

    def run(self, frame: pd.DataFrame) -> dict[str, np.ndarray]:
        """Regression: {"prediction"}; classification: {"label", "probabilities"}."""
        names = [o.name for o in self.session.get_outputs()]
        result = self.session.run(None, feeds(frame, self.features))
        out = dict(zip(names, result))
        if self.task == "regression":
            return {"prediction": np.asarray(out["prediction"], dtype=np.float64).reshape(-1)}
        return {"label": np.asarray(out["label"]).astype(str).reshape(-1),
                "probabilities": np.asarray(out["probabilities"], dtype=np.float64)}

    def columns(self, frame: pd.DataFrame) -> pd.DataFrame:
        """The prediction columns `score` writes."""
        res = self.run(frame)
        if self.task == "regression":
            return pd.DataFrame({"prediction": res["prediction"]}, index=frame.index)
        cols = {"label": res["label"]}
        for k, c in enumerate(self.classes):
            cols[f"prob_{c}"] = res["probabilities"][:, k]
        return pd.DataFrame(cols, index=frame.index)


def envelope_count(frame: pd.DataFrame, features: list[dict]) -> np.ndarray:
    """Per row, how many inputs lie outside the training envelope (range, or an unseen category)."""
    count = np.zeros(len(frame), dtype=np.int64)
    for f in features:
        col = frame[f["name"]]
        if f["kind"] == "numeric":
            x = pd.to_numeric(col, errors="coerce").to_numpy(dtype=np.float64)
            # below a log term's floor the term no longer follows the input: outside too
            lo = f["min"] if f.get("term_domain_min") is None else max(f["min"], f["term_domain_min"])
            with np.errstate(invalid="ignore"):
                count += ((x < lo) | (x > f["max"])).astype(np.int64)
        else:
            known = set(f.get("categories") or []) | {""}
            count += (~col.fillna("").astype(str).isin(known)).to_numpy().astype(np.int64)
    return count
