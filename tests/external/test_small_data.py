"""Small data end to end: what researchers with 150-400 rows get from `distill`.

Data sets shipped with scikit-learn: Wisconsin breast cancer (Street, Wolberg & Mangasarian 1993;
569 rows, 2 classes) and wine recognition (Forina et al.; 178 rows, 3 classes). Where the
confirmation rows support fewer coefficients than suggested (Riley et al. 2020, BMJ 368:m441),
the logistic fit is penalised (Firth 1993); terms are dropped only below three rows of the rarer
class per coefficient, where even that cannot estimate them. A constructed, perfectly separated data set checks the
Firth fallback (Firth 1993). Every bundle must pass `verify` (ONNX parity with the fitting
libraries).
"""
from __future__ import annotations

import json

import jsonschema
import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer, load_wine

from conftest import ROOT, synthetic_table
from pocketforest import pipeline
from pocketforest.discovery import Discovery
from pocketforest.intake import prepare
from pocketforest.pipeline import Settings, distill
from pocketforest.terms import Term, main_effects
from pocketforest.scoring.verify import verify_bundle

pytestmark = pytest.mark.external
SCHEMA = json.loads((ROOT / "src/pocketforest/schema/manifest.schema.json").read_text())


def _ranked_discovery(forest, features, task, disc, y, importance, increases, fills, requests=None):
    """Stands in for the discovery step: main effects strongest first (by OOB permutation
    importance) and the product of the two strongest numeric columns, so the equation has a
    suggested term beyond the main effects to test."""
    order = [i.feature for i in importance]
    feats = sorted(features, key=lambda f: order.index(f.name))
    mains = main_effects(feats)
    nums = [f.name for f in feats if f.kind == "numeric"][:2]
    centres = {v: float(pd.to_numeric(disc[v]).mean()) for v in nums}
    inter = Term("interaction", nums, {"centres": centres, "power": 1}, {"reason": "test stand-in"})
    return Discovery(mains[:2] + [inter] + mains[2:], [f.name for f in feats])


def _run(df, target, tmp_path, name, monkeypatch=None, **settings):
    if monkeypatch is not None:
        monkeypatch.setattr(pipeline, "discover", _ranked_discovery)
    table = prepare(df, target, source=f"{name}.csv")
    r = distill(table, Settings(trees=40, seed=2, quiet=True, bootstrap=1000, nested_repeats=0, **settings))
    path = r.write(tmp_path / name)
    manifest = json.loads((tmp_path / name / "manifest.json").read_text())
    jsonschema.Draft202012Validator(SCHEMA).validate(manifest)
    checks = verify_bundle(path)
    assert all(c.ok for c in checks), [c.line() for c in checks]
    return r, manifest


def _frame(loader, prefix):
    d = loader(as_frame=True)
    df = d.frame.copy()
    df["target"] = np.array([f"{prefix}{t}" for t in d.target], dtype=object) if prefix else \
        np.asarray(d.target_names, dtype=object)[d.target]
    return df


def _common(manifest, k):
    eq = manifest["equation"]
    assert eq["fit_on"] == "confirmation" and "Cox 1975" in eq["note"]
    assert all(np.isfinite(c["estimate"]) and np.isfinite(c["std_error"]) for c in eq["coefficients"])
    assert [row["depth"] for row in manifest["tree"]["fidelity_by_depth"]] == list(range(1, 9))
    for m in ("tree", "equation"):
        lo = manifest["loss"][m]
        assert lo["metric"] == "accuracy" and lo["resamples"] >= 1000
        assert lo["ci_low"] <= lo["value"] <= lo["ci_high"]
    assert set(manifest["evaluation"]["forest"]) >= {"accuracy", "auc", "log_loss", "brier"}
    assert set(manifest["fidelity"]["tree"]) == {"probability_r2", "agreement", "kappa"}
    assert manifest["classes"] == sorted(manifest["classes"]) and len(manifest["classes"]) == k


def test_breast_cancer_two_classes(tmp_path, monkeypatch):
    # The three-way split forced (569 rows would get the small-data plan): the starved path,
    # where the rows cannot carry every suggested term.
    r, m = _run(_frame(load_breast_cancer, None), "target", tmp_path, "cancer", monkeypatch, tree_depth=3,
                split=(0.5, 0.25, 0.25))
    _common(m, 2)
    eq = m["equation"]
    assert eq["family"] == "binomial" and m["tree"]["depth"] <= 3
    # 142 confirmation rows, 53 of the rarer class: at most 53 // 3 = 17 coefficients can be
    # estimated; 30 main effects + 1 suggested, so the weakest are dropped and the rest penalised
    assert len(eq["coefficients"]) <= 1 + 17 and "can estimate at most about 17" in eq["note"]
    # penalised either because the rows cannot carry the terms or because they separate the classes
    assert eq["method"] == "Firth penalised likelihood"
    assert "Riley et al. 2020" in eq["note"] or "separated" in eq["note"]
    assert any(t["kind"] == "interaction" for t in m["terms"])          # the strong suggestion survives
    assert eq["block_test"]["df"] == 1 and 0 <= eq["block_test"]["p_value"] <= 1


def test_wine_three_classes(tmp_path, monkeypatch):
    r, m = _run(_frame(load_wine, "cultivar_"), "target", tmp_path, "wine", monkeypatch, tree_depth=2)
    _common(m, 3)
    eq = m["equation"]
    assert eq["family"] == "multinomial" and {c["class"] for c in eq["coefficients"]} == set(m["classes"][1:])
    assert r.equation.coef.ndim == 2 and r.equation.coef.shape[1] == 2
    assert "can estimate at most" in eq["note"]   # 44 confirmation rows cannot carry 13 main effects x 2


def test_perfectly_separated_data_warns_and_stays_finite(tmp_path):
    """Constructed: the class is exactly whether x > 0."""
    rng = np.random.default_rng(3)
    df = pd.DataFrame({"x": rng.normal(size=240), "z": rng.normal(size=240), "w": rng.normal(size=240)})
    df["y"] = np.where(df.x > 0, "pos", "neg")
    r, m = _run(df, "y", tmp_path, "separated", tree_depth=1)
    assert m["equation"]["method"] == "Firth penalised likelihood"
    assert any("separated" in w for w in m["warnings"])
    # finite coefficients still sort the classes; the boundary sits somewhere in the gap
    assert m["evaluation"]["equation"]["accuracy"] > 0.85
    x = next(c for c in m["equation"]["coefficients"] if c["term"] == "x")
    assert x["estimate"] > 2 and np.isfinite(x["std_error"])


def test_multiclass_fixture_bundle_has_a_multinomial_equation(bundles):
    m = json.loads((bundles["multiclass"] / "manifest.json").read_text())
    assert m["equation"]["family"] == "multinomial" and m["equation"]["link"] == "logit"
    ref = pd.read_csv(bundles["multiclass"] / "reference.csv")
    probs = ref[[f"prob_equation_{c}" for c in m["classes"]]].to_numpy()
    assert np.allclose(probs.sum(1), 1.0) and probs.shape[1] == 3  # double softmax: ~k * eps


def test_poisson_on_a_non_count_target_is_a_one_line_error(tmp_path, capsys):
    from pocketforest.cli import main
    data = tmp_path / "d.csv"
    synthetic_table(n=120).to_csv(data, index=False)
    rc = main(["distill", str(data), "--target", "y", "--family", "poisson", "--trees", "10", "-q",
               "--out", str(tmp_path / "b")])
    err = capsys.readouterr().err
    assert rc == 2 and err.startswith("error:") and "poisson needs counts" in err
    assert len(err.strip().splitlines()) == 1 and not (tmp_path / "b").exists()
