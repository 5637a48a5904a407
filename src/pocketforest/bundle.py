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
from .export.breakdown import labels as contribution_labels
from .export.spss import spss_names
from .export.tree_spec import tree_nodes
from .export.tree_svg import fidelity_note, tree_svg
from .reference import pick_rows, reference_csv, with_predictions



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
    if r.equation is not None:   # none when the rows could not support one (r.no_equation says why)
        files["equation.onnx"] = equation_model(r.equation, features, {**meta, "model": "equation"}).SerializeToString()
    prep = r.forest.pipeline.named_steps["prep"]
    from .design import model_frame
    Xd = np.asarray(prep.transform(model_frame(r.table.data.iloc[r.splits.discovery], features)), dtype=np.float32)
    counts = np.asarray(r.tree.model.decision_path(Xd).sum(axis=0)).ravel()
    nodes = tree_nodes(r.tree.model, r.forest.columns, r.fills, task, counts)
    if r.equation is not None:
        files["equation.txt"] = equation_text(r.equation, r.fills, r.kinds).encode()
    files["tree.txt"] = tree_text(nodes, task, r.table.target, classes).encode()
    files["tree.svg"] = tree_svg(nodes, task, r.table.target, classes,
                                 note=fidelity_note(r.fidelity["tree"], r.evaluation.get("on"))).encode()
    for name, text in _code_exports(r, nodes).items():
        files[name] = text.encode()
    rows, spellings = pick_rows(r.table.data, features, r.splits.test, r.settings.seed)
    ref = with_predictions(rows, r.predict, task, classes, r.models)
    files["reference.csv"] = reference_csv(ref, features, spellings)
    manifest = _manifest(r, created, nodes)
    files.update(_collaborator_exports(r, nodes, manifest, rows, created))
    return files, manifest


def _code_exports(r, nodes) -> dict[str, str]:
    """SQL, Python, JavaScript and LaTeX printers, where present in this version."""
    try:
        from .export import code  # noqa: F401
    except ImportError:
        return {}
    return code.all_exports(r, nodes)


def _collaborator_exports(r, nodes, manifest: dict, rows, created: str) -> dict[str, bytes]:
    """R, SPSS syntax, the workbook and the calculator page (see :mod:`export.code`)."""
    from .export import code
    from .report import CAUTIONS
    return code.collaborator_exports(r.equation, nodes, code.export_meta(r.table.target, r.table.task, r.classes),
                                     r.table.features, manifest["features"], rows, created, CAUTIONS)


def _manifest(r, created: str, nodes) -> dict:
    t = r.table
    classes = r.classes
    spss = spss_names([f.name for f in t.features])
    m = {
        "format": FORMAT, "format_version": FORMAT_VERSION, "tool_version": __version__,
        "created": created, "seed": r.settings.seed, "task": t.task, "target": t.target,
        "source": {"file": os.path.basename(t.source), "rows_used": int(len(t.data)),
                   "rows_dropped_missing_target": int(t.rows_dropped_missing_target),
                   "dropped_columns": dict(t.dropped_columns)},
        "features": [{**f.to_dict(), "fill": r.fills[f.name], "spss_name": spss[f.name],
                      **_training_profile(f, t.data.iloc[r.splits.discovery]),
                      **_term_domain(f.name, r.equation.terms if r.equation is not None else [])}
                     for f in t.features],
        "splits": r.splits.sizes(),
        "forest": {"trees": r.settings.trees, **{k: v for k, v in r.forest.settings.items() if k != "trees"},
                   "oob": r.forest.oob},
        "importance_metric": "mse_increase" if t.task == "regression" else "brier_increase",
        "importance": [i.to_dict() for i in r.importance],
        "interactions": r.discovery.interactions,
        "discovery": r.discovery.to_dict(),
        "terms": [term.to_dict() for term in r.equation.terms] if r.equation is not None else [],
        "formula": r.equation.formula if r.equation is not None else None,
        "equation": _equation_section(r.equation) if r.equation is not None else r.no_equation.to_dict(),
        "tree": {**r.tree.to_dict(), "nodes": [_node_dict(n) for n in nodes]},
        "evaluation": r.evaluation,
        "fidelity": r.fidelity,
        "loss": r.loss,
        "warnings": list(r.warnings),
    }
    if classes is not None:
        m["classes"] = classes
    if r.plan is not None:
        m["plan"] = r.plan.to_dict()
    if getattr(r, "sample", None):
        m["sample"] = r.sample
    return _clean(m)


def _equation_section(eq) -> dict:
    """For the paper: the confirmation fit's table, p-values and block test. For scoring: the
    coefficients every export carries, and which rows estimated them."""
    paper = eq.inference or eq
    out = {"family": eq.family, "link": eq.link, "fit_on": paper.fit_on, "n": paper.n,
           "coefficients": paper.table, "block_test": paper.block_test, "method": paper.method,
           "note": eq.note, "dropped_terms": [t.to_dict() for t in paper.dropped_terms],
           "contribution_labels": contribution_labels(eq)}
    out["scoring"] = {"fit_on": eq.fit_on, "n": eq.n, "method": eq.method, "tuning": eq.tuning,
                      "coefficients": [{"term": c["term"], "estimate": c["estimate"],
                                        **({"class": c["class"]} if "class" in c else {})} for c in eq.table],
                      "same_as_inference": eq.inference is None}
    return out


def _term_domain(name: str, terms) -> dict:
    """The smallest value a domain-limited term takes as it is (a log's floor): below it `score`
    counts the input as outside the training envelope, like a value beyond the observed range."""
    floors = [float(t.params["floor"]) for t in terms if t.kind == "log" and t.variables == [name]]
    return {"term_domain_min": max(floors)} if floors else {}


def _node_dict(node) -> dict:
    """A tree node as the manifest keeps it, so scoring can tell the path a row took without
    the fitting libraries: a numeric split sends float32(x) <= threshold left (a missing x takes
    fill), a categorical split sends x == level right; a leaf has no feature."""
    d = {"id": node.id, "samples": node.samples, "value": node.value}
    if not node.is_leaf:
        d.update({"feature": node.feature, "left": node.left, "right": node.right})
        d.update({"threshold": node.threshold, "fill": node.fill} if node.level is None else {"level": node.level})
    return d


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
        move_into_place(tmp, out, force=force)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return str(out)


def move_into_place(tmp: Path, out: Path, *, force: bool = False) -> None:
    """Rename the finished folder ``tmp`` to ``out``; without ``force`` never replace anything.

    The check at the start of :func:`write_bundle` can be minutes old by now: another run may
    have written ``out`` meanwhile. So the name is claimed here with ``os.mkdir(out)``, which
    creates the folder or fails if anything already has that name, atomically (POSIX mkdir(2)):
    of two racing runs exactly one gets it, the other stops with an error. ``rename(2)`` then
    swaps the folder we just made, still empty, for the bundle in one step, since a directory may
    replace an *empty* directory and nothing else. (Linux's renameat2 with RENAME_NOREPLACE would
    do it in one call, but Python does not expose it and not every file system supports it.)
    With ``force`` an existing bundle is first moved aside, and put back if the rename fails.
    """
    old = None
    if force and (out.exists() or out.is_symlink()):
        old = Path(tempfile.mkdtemp(prefix=f".{out.name}.old.", dir=out.parent))
        os.rename(out, old / "bundle")
    try:
        try:
            os.mkdir(out)
        except FileExistsError:
            raise InputError(f"{out} already exists (another run wrote it while this one worked): "
                             "choose another --out or pass --force to replace it") from None
        try:
            os.rename(tmp, out)
        except BaseException:
            os.rmdir(out)
            raise
    except BaseException:
        if old is not None and not out.exists():
            os.rename(old / "bundle", out)
        raise
    finally:
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)


def _report(r, manifest: dict, names: set[str] | None = None) -> str | None:
    from .report import render_report
    return render_report(r, manifest, names)
