"""Write and read bundles: a folder of inert files (JSON, ONNX, text) with a manifest of checksums.

Writes are atomic: the bundle is built in a temporary folder beside the target and renamed into
place, so a failure leaves nothing half-written and an existing bundle is never lost.
"""
from __future__ import annotations

import json
import os
import shutil
import tempfile
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from . import __version__
from .scoring.bundle_io import FORMAT, FORMAT_VERSION, sha256
from .errors import InputError
from .export.onnx_models import convert_pipeline, equation_model
from .export.text import equation_text, tree_text
from .export.tree_spec import tree_nodes
from .reference import pick_rows, with_predictions



def _clean(value):
    """JSON-safe: numpy scalars to Python, NaN/inf to null."""
    if isinstance(value, dict):
        return {str(k): _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (np.floating, float)):
        v = float(value)
        return v if np.isfinite(v) else None
    if isinstance(value, np.ndarray):
        return _clean(value.tolist())
    return value


def build_files(r, created: str) -> tuple[dict[str, bytes], dict]:
    """Every artifact's bytes, and the manifest without its artifacts section."""
    task, classes = r.table.task, r.classes
    features = r.table.features
    meta = {"tool_version": __version__, "target": r.table.target, "task": task,
            "classes": json.dumps(classes) if classes else "", "created": created}
    files: dict[str, bytes] = {}
    files["forest.onnx"] = convert_pipeline(r.forest.pipeline, features, task, "forest", {**meta, "model": "forest"}).SerializeToString()
    files["tree.onnx"] = convert_pipeline(r.tree.pipeline, features, task, "tree", {**meta, "model": "tree"}).SerializeToString()
    files["equation.onnx"] = equation_model(r.equation, features, {**meta, "model": "equation"}).SerializeToString()
    prep = r.forest.pipeline.named_steps["prep"]
    from .design import model_frame
    Xd = np.asarray(prep.transform(model_frame(r.table.data.iloc[r.splits.discovery], features)), dtype=np.float32)
    counts = np.asarray(r.tree.model.decision_path(Xd).sum(axis=0)).ravel()
    nodes = tree_nodes(r.tree.model, r.forest.columns, r.fills, task, counts)
    files["equation.txt"] = equation_text(r.equation, r.fills, r.kinds).encode()
    files["tree.txt"] = tree_text(nodes, task, r.table.target, classes).encode()
    for name, text in _code_exports(r, nodes).items():
        files[name] = text.encode()
    rows = pick_rows(r.table.data, features, r.splits.test, r.settings.seed)
    ref = with_predictions(rows, r.predict, task, classes)
    files["reference.csv"] = ref.to_csv(index=False, float_format=None, lineterminator="\n").encode()
    manifest = _manifest(r, created, nodes)
    return files, manifest


def _code_exports(r, nodes) -> dict[str, str]:
    """SQL, Python, JavaScript and LaTeX printers, where present in this version."""
    try:
        from .export import code  # noqa: F401
    except ImportError:
        return {}
    return code.all_exports(r, nodes)


def _manifest(r, created: str, nodes) -> dict:
    t = r.table
    classes = r.classes
    m = {
        "format": FORMAT, "format_version": FORMAT_VERSION, "tool_version": __version__,
        "created": created, "seed": r.settings.seed, "task": t.task, "target": t.target,
        "source": {"file": os.path.basename(t.source), "rows_used": int(len(t.data)),
                   "rows_dropped_missing_target": int(t.rows_dropped_missing_target),
                   "dropped_columns": dict(t.dropped_columns)},
        "features": [{**f.to_dict(), "fill": r.fills[f.name], **_training_profile(f, t.data.iloc[r.splits.discovery])}
                     for f in t.features],
        "splits": r.splits.sizes(),
        "forest": {"trees": r.settings.trees, **{k: v for k, v in r.forest.settings.items() if k != "trees"},
                   "oob": r.forest.oob},
        "importance_metric": "mse_increase" if t.task == "regression" else "error_rate_increase",
        "importance": [i.to_dict() for i in r.importance],
        "interactions": r.discovery.interactions,
        "discovery": r.discovery.to_dict(),
        "terms": [term.to_dict() for term in r.equation.terms],
        "formula": r.equation.formula,
        "equation": {"family": r.equation.family, "link": r.equation.link, "fit_on": r.equation.fit_on,
                     "n": r.equation.n, "coefficients": r.equation.table,
                     "block_test": r.equation.block_test, "method": r.equation.method,
                     "note": r.equation.note,
                     "dropped_terms": [t.to_dict() for t in r.equation.dropped_terms]},
        "tree": {"depth": r.tree.depth, "leaves": r.tree.leaves, "chosen_by": r.tree.chosen_by,
                 "fidelity_by_depth": r.tree.fidelity_by_depth, "synthetic_rows": r.tree.synthetic_rows},
        "evaluation": r.evaluation,
        "fidelity": r.fidelity,
        "loss": r.loss,
        "warnings": list(r.warnings),
    }
    if classes is not None:
        m["classes"] = classes
    if getattr(r, "sample", None):
        m["sample"] = r.sample
    return _clean(m)


def _training_profile(f, rows) -> dict:
    """What `compare` measures drift against: mean and sd (numeric) or level shares (categorical)
    of the present values in the discovery rows, the rows the forest was fitted on."""
    col = rows[f.name]
    if f.kind == "numeric":
        x = col.to_numpy(dtype=np.float64, na_value=np.nan)
        x = x[~np.isnan(x)]
        return {"mean": float(x.mean()) if len(x) else None,
                "sd": float(x.std(ddof=1)) if len(x) > 1 else None}
    present = col.dropna().astype(str)
    present = present[present != ""]
    counts = present.value_counts()
    total = max(int(counts.sum()), 1)
    return {"shares": {str(lv): float(counts.get(lv, 0)) / total for lv in (f.categories or [])}}


def write_bundle(r, out: str | os.PathLike, *, force: bool = False) -> str:
    """Build every file in a temporary folder beside ``out``, then move it into place."""
    out = Path(out)
    if out.exists() and not force:
        raise InputError(f"{out} already exists: choose another --out or pass --force to replace it")
    if out.exists() and not out.is_dir():
        raise InputError(f"{out} exists and is not a folder: choose another --out")
    out.parent.mkdir(parents=True, exist_ok=True)
    created = datetime.now(timezone.utc).replace(microsecond=0).isoformat()
    files, manifest = build_files(r, created)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.", dir=out.parent))
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o777 & ~umask)
    try:
        for name, data in files.items():
            (tmp / name).write_bytes(data)
        report = _report(r, manifest, set(files) | {"report.html", "manifest.json"})
        if report is not None:
            (tmp / "report.html").write_text(report, encoding="utf-8")
        manifest["artifacts"] = {name: sha256(tmp / name) for name in sorted(os.listdir(tmp))}
        manifest["artifact_sizes"] = {name: (tmp / name).stat().st_size for name in sorted(os.listdir(tmp))}
        (tmp / "manifest.json").write_text(json.dumps(manifest, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")
        if out.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{out.name}.old.", dir=out.parent))
            os.rename(out, old / "bundle")
            os.rename(tmp, out)
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.rename(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return str(out)


def _report(r, manifest: dict, names: set[str] | None = None) -> str | None:
    from .report import render_report
    return render_report(r, manifest, names)
