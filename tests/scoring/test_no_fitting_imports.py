"""The scoring folder runs from a bundle alone: importing it loads no fitting library.

DESIGN.md: scoring needs only the bundle and onnxruntime. Each module of ``pocketforest.scoring``
(found by listing the package, so a new module is covered too), and the schema and scoring
coercion it uses from outside the folder, is imported in a fresh interpreter and ``sys.modules``
is inspected.

One documented exception: ``compare`` judges the models with scikit-learn's metrics, the reference
library for every figure (METHODS.md). It may load exactly what ``import sklearn.metrics`` loads in
a fresh interpreter (measured here, so the rule follows the installed scikit-learn), and never an
estimator module, statsmodels, patsy or skl2onnx.
"""
from __future__ import annotations

import json
import os
import pkgutil
import subprocess
import sys
from concurrent.futures import ThreadPoolExecutor

import pytest

import pocketforest.scoring

from conftest import SRC

FITTING_ROOTS = ("sklearn", "statsmodels", "patsy", "skl2onnx")
#: scikit-learn packages that fit models; compare must never load one, whatever sklearn.metrics does.
ESTIMATOR_PACKAGES = ("sklearn.ensemble", "sklearn.tree", "sklearn.linear_model", "sklearn.inspection",
                      "sklearn.pipeline", "sklearn.model_selection", "sklearn.neighbors", "sklearn.svm",
                      "sklearn.compose", "sklearn.impute", "sklearn.cluster", "sklearn.decomposition",
                      "sklearn.naive_bayes", "sklearn.neural_network", "sklearn.calibration",
                      "sklearn.feature_selection", "sklearn.isotonic", "sklearn.kernel_ridge",
                      "sklearn.discriminant_analysis", "sklearn.gaussian_process", "sklearn.multiclass")
#: the only scoring modules allowed scikit-learn's metrics
METRICS_ALLOWED = {"pocketforest.scoring.compare"}

SCORING_MODULES = ["pocketforest.scoring"] + sorted(
    f"pocketforest.scoring.{m.name}" for m in pkgutil.iter_modules(pocketforest.scoring.__path__))
#: what the scoring side imports from outside the folder: the schema and the scoring coercion
SCORING_MODULES += ["pocketforest.features", "pocketforest.intake.coerce"]
NEGATIVE = ["pocketforest.forest", "pocketforest.equation"]   # modules of this project that fit models


def loaded_after(statement: str) -> set[str]:
    """Module names in ``sys.modules`` after running ``statement`` in a fresh interpreter."""
    code = f"import json, sys\n{statement}\nprint(json.dumps(sorted(sys.modules)))\n"
    env = dict(os.environ, PYTHONPATH=str(SRC))
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=300)
    assert r.returncode == 0, r.stderr
    return set(json.loads(r.stdout.strip().splitlines()[-1]))


@pytest.fixture(scope="module")
def footprints() -> dict[str, set[str]]:
    """``sys.modules`` after importing each module alone (and ``sklearn.metrics`` alone), each in
    its own fresh interpreter; run side by side because importing is most of the cost."""
    names = SCORING_MODULES + NEGATIVE + ["sklearn.metrics"]
    with ThreadPoolExecutor(max_workers=3) as pool:
        return dict(zip(names, pool.map(lambda n: loaded_after(f"import {n}"), names)))


def fitting_violations(modules: set[str], metrics_allowed: bool, metrics_footprint: set[str]) -> list[str]:
    """The fitting-library modules in ``modules`` that the rule forbids. With ``metrics_allowed``,
    scikit-learn modules that ``import sklearn.metrics`` alone loads (``metrics_footprint``) pass,
    unless they are estimator packages."""
    fitting = {m for m in modules if m.split(".")[0] in FITTING_ROOTS}
    if not metrics_allowed:
        return sorted(fitting)
    allowed = {m for m in metrics_footprint if m.split(".")[0] == "sklearn"}
    estimators = {m for m in fitting if any(m == p or m.startswith(p + ".") for p in ESTIMATOR_PACKAGES)}
    return sorted({m for m in fitting if m not in allowed} | estimators)


def test_the_package_listing_finds_the_scoring_modules():
    for name in ("bundle_io", "runtime", "score", "verify", "runners", "compare"):
        assert f"pocketforest.scoring.{name}" in SCORING_MODULES


@pytest.mark.parametrize("name", SCORING_MODULES)
def test_scoring_module_loads_no_fitting_library(name, footprints):
    bad = fitting_violations(footprints[name], name in METRICS_ALLOWED, footprints["sklearn.metrics"])
    assert bad == [], f"{name} loads {bad}"


def test_compare_loads_scikit_learn_metrics_only(footprints):
    """The exception is real (compare does use the reference metrics) and no wider than that."""
    loaded = footprints["pocketforest.scoring.compare"]
    assert "sklearn.metrics" in loaded
    assert not any(m.split(".")[0] in ("statsmodels", "patsy", "skl2onnx") for m in loaded)


# The check must fail when it should: the same function on imports that break each rule.
@pytest.mark.parametrize("name, metrics_allowed, expected", [
    ("pocketforest.scoring.compare", False, "sklearn.metrics"),  # any module but compare: no sklearn at all
    ("pocketforest.forest", True, "sklearn.ensemble"),            # compare's exception: no estimator module
    ("pocketforest.equation", True, "statsmodels"),               # nor statsmodels
])
def test_the_check_catches_fitting_imports(name, metrics_allowed, expected, footprints):
    bad = fitting_violations(footprints[name], metrics_allowed, footprints["sklearn.metrics"])
    assert any(m == expected or m.startswith(expected + ".") for m in bad), bad
