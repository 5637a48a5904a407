"""The equation inside `distill`: fitted on the confirmation rows only, Poisson counts end to end.
Invented data with a known structure."""
from __future__ import annotations

import dataclasses
import json
import shutil

import numpy as np
import pandas as pd

from conftest import run_cli
from pocketforest import equation
from pocketforest.intake import prepare
from pocketforest.pipeline import Settings, distill
from pocketforest.scoring.verify import verify_bundle


def _counts(n=400, seed=0, base=0.2):
    rng = np.random.default_rng(seed)
    df = pd.DataFrame({"dose": rng.uniform(0, 2, n), "site": rng.choice(["a", "b"], n), "noise": rng.normal(size=n)})
    df["events"] = rng.poisson(np.exp(base + 0.8 * df.dose + 0.4 * (df.site == "b")))
    return df


ENGINES_HERE = all(shutil.which(p) for p in ("node", "Rscript", "soffice", "pspp", "chromium", "chromedriver"))


def test_poisson_equation_end_to_end_passes_verify(tmp_path):
    data = tmp_path / "counts.csv"
    _counts().to_csv(data, index=False)
    out = tmp_path / "bundle"
    r = run_cli("distill", str(data), "--target", "events", "--family", "poisson", "--trees", "30", "-q",
                "--split", "0.5,0.25,0.25", "--out", str(out))
    assert r.returncode == 0, r.stderr
    m = json.loads((out / "manifest.json").read_text())
    assert m["equation"]["family"] == "poisson" and m["equation"]["link"] == "log"
    dose = next(c for c in m["equation"]["coefficients"] if c["term"] == "dose")
    assert dose["ci_low"] < 0.8 < dose["ci_high"]          # the constructed rate ratio per unit dose
    r = run_cli("verify", str(out))   # every engine: the only bundle with a log link in the tests
    assert r.returncode == 0, r.stdout
    assert "skip" not in r.stdout or not ENGINES_HERE, r.stdout


def test_equation_sees_only_the_confirmation_rows():
    df = _counts(seed=1)
    result = distill(prepare(df, "events", task="regression"),
                     Settings(trees=20, seed=4, quiet=True, bootstrap=100, family="gaussian",
                              split=(0.5, 0.25, 0.25)))
    eq = result.equation.inference           # the table for the paper
    assert eq.fit_on == "confirmation" and eq.n == len(result.splits.confirmation)
    conf = df.iloc[result.splits.confirmation].reset_index(drop=True)
    # refitting the equation's own formula on exactly those rows reproduces the coefficients;
    # any other rows would not (statsmodels as the reference library)
    import statsmodels.formula.api as smf
    ref = smf.ols(eq.formula, conf).fit()
    # the same least-squares problem solved by statsmodels in both fits (pinv): rounding only,
    # ~cond(X) * eps ~ 1e-13 relative
    assert np.isclose(eq.table[0]["estimate"], ref.params.iloc[0])
    np.testing.assert_allclose(sorted(r["estimate"] for r in eq.table), sorted(ref.params), rtol=1e-8)
    other = df.iloc[result.splits.test].reset_index(drop=True)
    assert not np.isclose(smf.ols(eq.formula, other).fit().params.iloc[0], eq.table[0]["estimate"])
    assert "Cox 1975" in eq.note
    # The exported coefficients: the same formula re-estimated on discovery + confirmation rows
    # (least squares here: 300 rows carry 3 coefficients easily), statsmodels as the reference.
    scoring = result.equation
    both = df.iloc[np.sort(np.r_[result.splits.discovery, result.splits.confirmation])]
    assert scoring.fit_on == "discovery+confirmation" and scoring.n == len(both)
    assert scoring.method == "least squares"
    ref2 = smf.ols(eq.formula, both.reset_index(drop=True)).fit()
    np.testing.assert_allclose(sorted(scoring.coef), sorted(ref2.params), rtol=1e-8)


def test_count_outcome_gets_the_poisson_family_by_default():
    """Constructed Poisson counts (many zeros at low dose): the default family is Poisson with a
    log link, and the manifest says so (Cameron & Trivedi 2013: counts are not Gaussian)."""
    df = _counts(seed=2, base=-0.5)
    assert (df.events == 0).mean() > 0.1
    result = distill(prepare(df, "events", task="regression"), Settings(trees=20, seed=4, quiet=True, bootstrap=100))
    assert result.equation.family == "poisson" and result.equation.link == "log"
    assert any("Poisson GLM with a log link by default" in n for n in result.equation.notes)
    assert np.all(result.predict(df, "equation") > 0)


def test_skewed_counts_without_zeros_stay_gaussian_with_a_note_naming_the_count_family():
    """Constructed lengths of stay: 1 + Poisson counts with a long tail (no zeros, so not a count
    by the zero rule). The default stays Gaussian, and a note suggests --family poisson; a
    symmetric whole-number outcome (rounded normal scores around 100) gets no such note."""
    rng = np.random.default_rng(5)
    df = _counts(n=400, seed=5, base=0.8)
    df["stay"] = 1 + df.pop("events") + rng.poisson(np.exp(rng.normal(0, 1.0, len(df))))
    assert (df.stay == 0).sum() == 0 and equation.skewed_count(df.stay.to_numpy()) is not None
    settings = Settings(trees=20, seed=4, quiet=True, bootstrap=100, nested_repeats=0)
    result = distill(prepare(df, "stay", task="regression"), settings)
    assert result.equation.family == "gaussian"
    assert any("try --family poisson" in n for n in result.equation.notes)
    assert any("try --family poisson" in w for w in result.warnings)       # counted in the summary's notes line
    asked = distill(prepare(df, "stay", task="regression"), dataclasses.replace(settings, family="gaussian"))
    assert not any("try --family poisson" in n for n in asked.equation.notes)
    df["score"] = np.round(100 + 15 * rng.normal(size=len(df)) + 5 * df.dose)
    assert equation.skewed_count(df.score.to_numpy()) is None
    assert equation.skewed_count(np.array([0, 0, 0, 1, 2, 30] * 20)) is None     # many zeros: already a count


def test_multiclass_bundle_manifest_states_the_note(bundles):
    m = json.loads((bundles["multiclass"] / "manifest.json").read_text())
    assert "confirmation rows" in m["equation"]["note"]
    assert m["equation"]["method"] in ("maximum likelihood", "Firth penalised likelihood")
    assert m["equation"]["scoring"]["fit_on"] == "discovery+confirmation"
    assert all(c.ok for c in verify_bundle(bundles["multiclass"], skip=("libreoffice", "chromium")))
