"""`verify`: is this bundle intact, and does every exported form reproduce the reference rows?

Each check compares one form's predictions on ``reference.csv`` with the predictions the fitting
libraries wrote there, and passes when the largest difference is within the form's tolerance:

* ONNX graphs (float32 inside, as tree ensembles must be; Python and Node.js onnxruntime):
  regression values |difference| <= 1e-4 * max(1, largest |reference value|); probabilities
  |difference| <= 1e-4;
* SQL (SQLite, DuckDB), Python and JavaScript exports compute in double precision, with tree
  splits written so a double comparison equals scikit-learn's float32 one
  (:func:`pocketforest.thresholds.double_split`): values within 1e-7 * max(1, largest |reference|),
  probabilities within 1e-7 (summation order and libm differ, nothing more);
* R (equation.R, tree.R), LibreOffice Calc (equation.xlsx and the one-cell formulas of
  equation.txt), GNU PSPP (equation.sps) and Chromium (calculator.html) compute in double
  precision too and are held to the same 1e-7 (:mod:`pocketforest.scoring.engine_checks`);
* labels: identical, except on rows where the reference's top two probabilities are closer than
  the form's probability tolerance;
* a missing prediction (an empty field: the equation has no finite value there) must be missing
  in the form too.

The reference's closing rows spell their inputs as intake's missing-value texts (``NA``,
`` null ``, ...); the code forms receive those cells as text, so a form whose list of such texts
has drifted from intake's fails here.

The forms run where they will live (:mod:`pocketforest.scoring.runners`): nothing from the bundle is
imported or executed in this process. A check whose runtime is absent (no Node.js, or npm could
not install onnxruntime-node; no Rscript, soffice, pspp, or Chromium with chromedriver and
selenium) is reported as skipped with the reason; a skip does not fail verify. ``skip`` leaves
chosen engines out on purpose (``verify --skip libreoffice chromium``), reported the same way.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from ..errors import BundleError, InputError
from . import runners
from ..intake.coerce import coerce_for_scoring
from .bundle_io import bundle_file, equation_absent, models_of, read_manifest, sha256
from .runtime import Scorer
from .score import features_of

VALUE_RTOL = 1e-4
PROB_ATOL = 1e-4
CODE_RTOL = 1e-7
CODE_PROB_ATOL = 1e-7


@dataclass
class Check:
    form: str
    ok: bool
    max_diff: float | None
    tolerance: float | None
    detail: str = ""
    skipped: bool = False

    def line(self) -> str:
        mark = "skip" if self.skipped else ("ok  " if self.ok else "FAIL")
        diff = "" if self.max_diff is None else f"  max diff {self.max_diff:.3g} (tolerance {self.tolerance:.3g})"
        return f"{mark}  {self.form}{diff}{('  ' + self.detail) if self.detail else ''}"


def read_reference_text(bundle: str | Path, manifest: dict) -> pd.DataFrame:
    """reference.csv exactly as written: every cell its text."""
    path = bundle_file(bundle, manifest, "reference.csv")
    return pd.read_csv(path, dtype=str, keep_default_na=False, na_filter=False)


def read_reference(bundle: str | Path, manifest: dict, text: pd.DataFrame | None = None) -> pd.DataFrame:
    """The reference rows typed as ``score`` types new rows: inputs through intake's coercion (a
    missing-value text such as ``NA`` is a missing value), predictions as numbers (an empty field
    is a missing prediction), labels as text ("" when missing)."""
    text = read_reference_text(bundle, manifest) if text is None else text
    names = [f["name"] for f in manifest["features"]]
    typed = coerce_for_scoring(text, features_of(manifest), source="reference.csv")
    for c in text.columns:
        if c not in names:
            typed[c] = text[c] if c.startswith("label_") else pd.to_numeric(text[c].replace("", np.nan))
    return typed


def _max_diff(have: np.ndarray, want: np.ndarray) -> float:
    """Largest |difference|; a value missing (NaN) on one side only, or a wrong shape, counts as
    an infinite difference. Missing on both sides agrees: the documented missing prediction."""
    have, want = np.asarray(have, dtype=float), np.asarray(want, dtype=float)
    if have.shape != want.shape:
        return float("inf")
    both = np.isnan(have) & np.isnan(want)
    d = np.abs(have - want)[~both]
    return float("inf") if np.isnan(d).any() else float(np.max(d, initial=0.0))


def compare_predictions(form: str, manifest: dict, ref: pd.DataFrame, model: str,
                        got: dict[str, np.ndarray], *, rtol: float = VALUE_RTOL,
                        prob_atol: float = PROB_ATOL) -> Check:
    """Compare one form's output (``prediction`` or ``label``/``probabilities``) with reference.csv."""
    if manifest["task"] == "regression":
        want = ref[f"pred_{model}"].to_numpy(dtype=float)
        have = np.asarray(got["prediction"], dtype=float).reshape(-1)
        tol = rtol * max(1.0, float(np.max(np.abs(want), initial=0.0, where=~np.isnan(want))))
        diff = _max_diff(have, want)
        return Check(form, bool(diff <= tol), diff, tol)
    classes = manifest["classes"]
    want_p = ref[[f"prob_{model}_{c}" for c in classes]].to_numpy(dtype=float)
    have_p = np.asarray(got["probabilities"], dtype=float)
    diff = _max_diff(have_p, want_p)
    top2 = np.sort(want_p, axis=1)[:, -2:]
    clear = ((top2[:, 1] - top2[:, 0]) > prob_atol) | np.isnan(want_p).any(axis=1)
    want_l = ref[f"label_{model}"].astype(str).to_numpy()
    have_l = np.asarray(got["label"]).astype(str).reshape(-1)
    bad = int(np.sum((want_l != have_l) & clear)) if have_l.shape == want_l.shape else len(want_l)
    detail = f"{bad} label(s) differ" if bad else ""
    return Check(form, bool(diff <= prob_atol and bad == 0), diff, prob_atol, detail)


def _checksums(bundle: str | Path, manifest: dict) -> Check:
    bad = []
    for name, digest in manifest.get("artifacts", {}).items():
        path = Path(bundle) / name
        if not path.is_file():
            bad.append(f"{name} missing")
        elif sha256(path) != digest:
            bad.append(f"{name} altered")
    return Check("checksums", not bad, None, None, "; ".join(bad) if bad else
                 f"{len(manifest.get('artifacts', {}))} files match manifest.json")


def _onnx_checks(bundle, manifest, ref) -> list[Check]:
    out = []
    for model in models_of(manifest):
        scorer = Scorer(bundle, model, manifest, check=False)
        out.append(compare_predictions(f"{model}.onnx (onnxruntime, Python)", manifest, ref, model, scorer.run(ref)))
    return out


def _node_onnx_checks(bundle, manifest, ref, quiet: bool = False) -> list[Check]:
    models = models_of(manifest)
    forms = [f"{m}.onnx (onnxruntime-node, Node.js)" for m in models]
    try:
        paths = {m: bundle_file(bundle, manifest, f"{m}.onnx") for m in models}
        raw = runners.run_onnx_node(paths, ref, manifest["features"], quiet=quiet)
    except runners.RunnerUnavailable as exc:
        return [Check(f, True, None, None, f"skipped: {exc}", skipped=True) for f in forms]
    except runners.RunnerFailed as exc:
        return [Check(f, False, None, None, str(exc)) for f in forms]
    out = []
    for model, form in zip(models, forms):
        res = raw[model]
        if manifest["task"] == "regression":
            got = {"prediction": np.asarray(res["prediction"], dtype=float).reshape(-1)}
        else:
            got = {"label": np.asarray(res["label"]).astype(str).reshape(-1),
                   "probabilities": np.asarray(res["probabilities"], dtype=float)}
        out.append(compare_predictions(form, manifest, ref, model, got))
    return out


def _code_check(form: str, bundle, manifest, ref, model: str, file: str, run) -> Check:
    """Run one code export with ``run(path) -> predictions`` and compare (double tolerances)."""
    if file not in manifest.get("artifacts", {}):
        return Check(form, False, None, None, f"{file} is not in this bundle")
    try:
        got = run(bundle_file(bundle, manifest, file))
    except runners.RunnerUnavailable as exc:
        return Check(form, True, None, None, f"skipped: {exc}", skipped=True)
    except runners.RunnerFailed as exc:
        return Check(form, False, None, None, str(exc))
    return compare_predictions(form, manifest, ref, model, got, rtol=CODE_RTOL, prob_atol=CODE_PROB_ATOL)


def _code_checks(bundle, manifest, ref, text, skip_node: bool = False) -> list[Check]:
    """The code forms get the reference's missing-value texts as text, where their inputs can
    hold text: every cell for Python and JavaScript and in SQLite's dynamically typed table,
    the category cells in DuckDB's (its DOUBLE columns take NULL)."""
    task, classes, features = manifest["task"], manifest.get("classes"), manifest["features"]
    rows = runners.text_rows(text, ref, features)
    sql_rows = {"sqlite": rows, "duckdb": runners.text_rows(text, ref, features, numbers_as_text=False)}
    out = []
    surrogates = [m for m in ("equation", "tree") if m in models_of(manifest)]
    for model in surrogates:
        sql = f"{model}.sql"
        for engine, label in (("sqlite", "SQLite"), ("duckdb", "DuckDB")):
            out.append(_code_check(f"{sql} ({label})", bundle, manifest, ref, model, sql,
                                   lambda p, e=engine: runners.sql_predictions(
                                       runners.run_sql(e, p.read_text(encoding="utf-8"), ref, features,
                                                       rows=sql_rows[e]), task, classes)))
    for model in surrogates:
        out.append(_code_check(f"{model}.py (Python, separate isolated interpreter)", bundle, manifest, ref, model,
                               f"{model}.py",
                               lambda p: runners.collect(runners.run_python_export(p, rows), task, classes)))
    for model in surrogates:
        if skip_node:
            out.append(Check(f"{model}.js (Node.js)", True, None, None, "skipped: --skip node", skipped=True))
            continue
        out.append(_code_check(f"{model}.js (Node.js)", bundle, manifest, ref, model, f"{model}.js",
                               lambda p: runners.collect(runners.run_js_export(p, rows), task, classes)))
    return out


# Further forms (other runtimes) register here: functions (bundle, manifest, reference) -> [Check].
EXTRA_CHECKS: list[Callable[[str | Path, dict, pd.DataFrame], list[Check]]] = []


#: Engines ``verify --skip`` may leave out (each is reported as skipped, with the reason).
ENGINES = ("node", "r", "libreoffice", "pspp", "chromium")


def verify_bundle(bundle: str | Path, *, quiet: bool = False, skip: tuple[str, ...] = ()) -> list[Check]:
    """Every check, in order; ``skip``: engines (of :data:`ENGINES`) not to start."""
    from .engine_checks import collaborator_checks
    unknown = [e for e in skip if e not in ENGINES]
    if unknown:
        raise InputError(f"--skip {unknown[0]}: not an engine verify starts; choose from {', '.join(ENGINES)}")
    manifest = read_manifest(bundle)
    checks = [_checksums(bundle, manifest)]
    if not checks[0].ok:
        return checks
    absent = equation_absent(manifest)
    if absent is not None:   # said once; only the forest's and the tree's forms are checked below
        checks.append(Check("equation", True, None, None, f"none in this bundle: {absent.get('reason')}",
                            skipped=True))
    text = read_reference_text(bundle, manifest)
    ref = read_reference(bundle, manifest, text)
    checks += _onnx_checks(bundle, manifest, ref)
    if "node" in skip:
        checks += [Check(f"{m}.onnx (onnxruntime-node, Node.js)", True, None, None, "skipped: --skip node",
                         skipped=True) for m in models_of(manifest)]
    else:
        checks += _node_onnx_checks(bundle, manifest, ref, quiet=quiet)
    checks += _code_checks(bundle, manifest, ref, text, skip_node="node" in skip)
    checks += collaborator_checks(bundle, manifest, ref, skip)
    for extra in EXTRA_CHECKS:
        checks += extra(bundle, manifest, ref)
    return checks


__all__ = ["Check", "verify_bundle", "compare_predictions", "read_reference", "read_reference_text",
           "BundleError"]
