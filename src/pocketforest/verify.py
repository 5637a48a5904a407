"""`verify`: is this bundle intact, and does every exported form reproduce the reference rows?

Each check compares one form's predictions on ``reference.csv`` with the predictions the fitting
libraries wrote there, and passes when the largest difference is within the form's tolerance:

* regression values: |difference| <= 1e-4 * max(1, largest |reference value|) (float32 graphs);
* probabilities: |difference| <= 1e-4;
* labels: identical, except on rows where the reference's top two probabilities are within 1e-4.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from .bundle_io import bundle_file, read_manifest, sha256
from .errors import BundleError
from .runtime import MODELS, Scorer

VALUE_RTOL = 1e-4
PROB_ATOL = 1e-4


@dataclass
class Check:
    form: str
    ok: bool
    max_diff: float | None
    tolerance: float | None
    detail: str = ""

    def line(self) -> str:
        mark = "ok  " if self.ok else "FAIL"
        diff = "" if self.max_diff is None else f"  max diff {self.max_diff:.3g} (tolerance {self.tolerance:.3g})"
        return f"{mark}  {self.form}{diff}{('  ' + self.detail) if self.detail else ''}"


def read_reference(bundle: str | Path, manifest: dict) -> pd.DataFrame:
    path = bundle_file(bundle, manifest, "reference.csv")
    types = {f["name"]: (str if f["kind"] == "categorical" else float) for f in manifest["features"]}
    frame = pd.read_csv(path, dtype={k: v for k, v in types.items()}, keep_default_na=False, na_values=[""])
    for f in manifest["features"]:
        if f["kind"] == "categorical":
            frame[f["name"]] = frame[f["name"]].fillna("").astype(str)
    return frame


def compare_predictions(form: str, manifest: dict, ref: pd.DataFrame, model: str,
                        got: dict[str, np.ndarray]) -> Check:
    """Compare one form's output (``prediction`` or ``label``/``probabilities``) with reference.csv."""
    if manifest["task"] == "regression":
        want = ref[f"pred_{model}"].to_numpy(dtype=float)
        have = np.asarray(got["prediction"], dtype=float).reshape(-1)
        tol = VALUE_RTOL * max(1.0, float(np.max(np.abs(want))))
        diff = float(np.max(np.abs(have - want)))
        return Check(form, bool(diff <= tol), diff, tol)
    classes = manifest["classes"]
    want_p = ref[[f"prob_{model}_{c}" for c in classes]].to_numpy(dtype=float)
    have_p = np.asarray(got["probabilities"], dtype=float)
    diff = float(np.max(np.abs(have_p - want_p)))
    top2 = np.sort(want_p, axis=1)[:, -2:]
    clear = (top2[:, 1] - top2[:, 0]) > PROB_ATOL
    want_l = ref[f"label_{model}"].astype(str).to_numpy()
    have_l = np.asarray(got["label"]).astype(str)
    bad = int(np.sum((want_l != have_l) & clear))
    detail = f"{bad} label(s) differ" if bad else ""
    return Check(form, bool(diff <= PROB_ATOL and bad == 0), diff, PROB_ATOL, detail)


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
    for model in MODELS:
        scorer = Scorer(bundle, model, manifest, check=False)
        out.append(compare_predictions(f"{model}.onnx (onnxruntime, Python)", manifest, ref, model, scorer.run(ref)))
    return out


# Further forms (SQL, generated code, other runtimes) register here: (name, function).
EXTRA_CHECKS: list[Callable[[str | Path, dict, pd.DataFrame], list[Check]]] = []


def verify_bundle(bundle: str | Path) -> list[Check]:
    manifest = read_manifest(bundle)
    checks = [_checksums(bundle, manifest)]
    if not checks[0].ok:
        return checks
    ref = read_reference(bundle, manifest)
    checks += _onnx_checks(bundle, manifest, ref)
    for extra in EXTRA_CHECKS:
        checks += extra(bundle, manifest, ref)
    return checks


__all__ = ["Check", "verify_bundle", "compare_predictions", "read_reference", "BundleError"]
