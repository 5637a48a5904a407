"""Issue 12, item 4: when the confirmation rows cannot support an honest equation there is none,
the bundle says why and how many rows would be needed, and the forest and the tree still ship.

The tables are invented (synthetic cases whose truth the test constructs): 60 rows, a binary
outcome whose rarer class is the rows with the largest ``x1``. Below 800 rows the plan puts half
the rows in confirmation, stratified by class, so 10 rare rows give 5 rare confirmation rows
(under the rule's 6 = 3 per parameter x 2 parameters) and 12 give 6 (enough). The rule itself is
:func:`pocketforest.sizing.equation_support`.
"""
from __future__ import annotations

import json
from pathlib import Path

import jsonschema
import numpy as np
import pandas as pd
import pytest

from conftest import ROOT, run_cli

SCHEMA = json.loads((ROOT / "src/pocketforest/schema/manifest.schema.json").read_text())
EQUATION_FILES = ("equation.onnx", "equation.txt", "equation.tex", "equation.sql", "equation.py", "equation.js",
                  "equation.R", "equation.sps", "equation.xlsx", "calculator.html")


def rare_table(n: int, rare: int, seed: int = 5) -> pd.DataFrame:
    """``n`` rows; the ``rare`` rows with the largest x1 are class 'rare', the others 'common'."""
    rng = np.random.default_rng(seed)
    x1, x2 = rng.uniform(-1, 1, n), rng.uniform(-1, 1, n)
    y = np.full(n, "common", dtype=object)
    y[np.argsort(x1)[-rare:]] = "rare"
    return pd.DataFrame({"x1": x1, "x2": x2, "site": rng.choice(["a", "b"], n), "y": y})


# ---------------------------------------------------------------- the rule


def test_rule_counts_parameters_of_the_one_slope_model():
    from pocketforest.sizing import MIN_ROWS_PER_COEFFICIENT, equation_support
    def half(rows: int) -> float:   # a fixed confirmation share
        return 0.5
    # two classes: intercept + slope = 2 parameters, 6 rare confirmation rows needed
    assert equation_support(6, n_classes=2, rows=60, share=0.2, confirmation_share=half) is None
    d = equation_support(5, n_classes=2, rows=60, share=10 / 60, confirmation_share=half, rarest="rare")
    assert (d.parameters, d.need, d.have, d.rarest) == (2, 2 * MIN_ROWS_PER_COEFFICIENT, 5, "rare")
    # 6 rare confirmation rows at a rare share of 1/6 and half the rows in confirmation: 72 rows
    assert d.rows_needed == 72
    # three classes: 2 intercepts + 2 slopes = 4 parameters, 12 rows of the rarest class
    assert equation_support(12, n_classes=3, rows=90, share=0.3, confirmation_share=half) is None
    assert equation_support(11, n_classes=3, rows=90, share=0.3, confirmation_share=half).need == 12
    # a number: intercept + slope, 6 confirmation rows
    assert equation_support(5, n_classes=None, rows=40, share=1.0, confirmation_share=half).need == 6


def test_rows_needed_follows_the_plan_that_size_would_get():
    """At resample.SMALL_DATA_ROWS (800) the plan changes from half the rows in confirmation to a
    quarter (resample.SMALL_SPLIT vs the 0.5/0.25/0.25 split): the count needed is read at its own plan."""
    from pocketforest.resample import SMALL_DATA_ROWS, choose_plan
    from pocketforest.sizing import equation_support
    def share(rows: int) -> float:
        return choose_plan(rows, None).split[1]
    # 18 rare confirmation rows (4 classes) at a rarest share of 4%: 900 rows at half, but at
    # 900 rows the plan gives a quarter, so 1800.
    assert 900 >= SMALL_DATA_ROWS
    d = equation_support(3, n_classes=4, rows=100, share=0.04, confirmation_share=share)
    assert d.need == 18 and d.rows_needed == 1800
    assert d.rows_needed * 0.04 * share(d.rows_needed) >= d.need > (d.rows_needed - 1) * 0.04 * share(d.rows_needed - 1)


# ---------------------------------------------------------------- the whole path, through the CLI


@pytest.fixture(scope="module")
def two_bundles(tmp_path_factory) -> dict[str, Path]:
    """Distilled through the CLI: 'below' (10 rare rows) and 'above' (12), with their stdout."""
    base = tmp_path_factory.mktemp("no_equation")
    out = {}
    for name, rare in (("below", 10), ("above", 12)):
        data = base / f"{name}.csv"
        rare_table(60, rare).to_csv(data, index=False)
        done = run_cli("distill", str(data), "--target", "y", "--out", str(base / name), "--trees", "15", "--nested-repeats", "0", "--seed", "2")
        assert done.returncode == 0, done.stderr
        out[name] = base / name
        out[name + "_stdout"] = done.stdout
        out[name + "_stderr"] = done.stderr
        out[name + "_data"] = data
    return out


def test_no_equation_bundle_has_forest_and_tree_only(two_bundles):
    path = two_bundles["below"]
    m = json.loads((path / "manifest.json").read_text())
    jsonschema.Draft202012Validator(SCHEMA).validate(m)
    eq = m["equation"]
    assert eq["absent"] is True and eq["rows_needed"] == 72
    assert eq["rule"] == {"counted": "rows of the rarest class", "class": "rare", "have": 5, "need": 6,
                          "parameters": 2, "rows_per_parameter": 3, "rows": 60}
    assert m["formula"] is None and m["terms"] == []
    assert "equation" not in m["evaluation"] and set(m["fidelity"]) == set(m["loss"]) == {"tree"}
    for name in EQUATION_FILES:
        assert not (path / name).exists(), name
        assert name not in m["artifacts"]
    for name in ("forest.onnx", "tree.onnx", "tree.sql", "tree.py", "tree.js", "tree.R", "tree.txt", "tree.svg"):
        assert (path / name).is_file(), name
    head = (path / "reference.csv").read_text().splitlines()[0].split(",")
    assert "label_tree" in head and not any("equation" in c for c in head)


def test_just_above_the_rule_the_equation_is_fitted(two_bundles):
    """The same table with two more rare rows reaches 6 rare confirmation rows: an equation."""
    path = two_bundles["above"]
    m = json.loads((path / "manifest.json").read_text())
    jsonschema.Draft202012Validator(SCHEMA).validate(m)
    assert "absent" not in m["equation"] and m["equation"]["family"] == "binomial"
    assert "equation" in m["evaluation"] and all((path / name).is_file() for name in EQUATION_FILES)
    assert "No equation" not in two_bundles["above_stdout"] + two_bundles["above_stderr"]


def test_verify_checks_the_models_present(two_bundles):
    done = run_cli("verify", str(two_bundles["below"]), "--skip", "libreoffice", "chromium")
    assert done.returncode == 0, done.stdout + done.stderr
    lines = done.stdout.splitlines()
    assert any(line.startswith("skip  equation  none in this bundle") for line in lines), done.stdout
    assert any(line.startswith("ok    tree.onnx") for line in lines) and any(line.startswith("ok    tree.R") for line in lines)
    assert not any("equation." in line for line in lines), done.stdout


def test_score_equation_is_refused_forest_and_tree_score(two_bundles, tmp_path):
    path, data = two_bundles["below"], two_bundles["below_data"]
    out = tmp_path / "eq.csv"
    done = run_cli("score", str(path), str(data), "--model", "equation", "--out", str(out))
    assert done.returncode == 2
    err = done.stderr.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("error: this bundle has no equation") and "72 rows" in err[0]
    assert not out.exists()
    for model in ("forest", "tree"):
        out = tmp_path / f"{model}.csv"
        done = run_cli("score", str(path), str(data), "--model", model, "--out", str(out), "-q")
        assert done.returncode == 0, done.stderr
        scored = pd.read_csv(out)
        assert len(scored) == 60 and set(scored["label"]) <= {"common", "rare"}


def test_compare_judges_the_forest_and_the_tree(two_bundles):
    done = run_cli("compare", str(two_bundles["below"]), str(two_bundles["below_data"]), "--json")
    assert done.returncode == 0, done.stderr
    d = json.loads(done.stdout)
    assert set(d["loss"]) == {"tree"} and "equation" not in d["evaluation"]
    assert d["equation_absent"]["rows_needed"] == 72


def test_summary_and_report_say_why_and_rows_needed(two_bundles):
    stdout = two_bundles["below_stdout"]
    assert "equation: none: the 5 confirmation rows of the rarest class 'rare' are too few" in stdout
    assert "about 72 rows in the table (now 60)" in stdout
    assert not any(line.startswith("equation ") for line in stdout.splitlines())   # no scoreboard row
    report = (two_bundles["below"] / "report.html").read_text()
    assert "There is no equation in this bundle." in report and "<b>72 rows</b>" in report
    assert "could not be drawn" not in report   # every section, the tree's frontier of a small table too


# ---------------------------------------------------------------- the Python API


def test_api_result_without_equation(two_bundles):
    import pocketforest as pf
    from pocketforest.errors import BundleError
    df = rare_table(60, 10)
    result = pf.fit(df, target="y", n_trees=15, random_state=2)
    assert result.equation is None and result.models == ("forest", "tree")
    assert (result.no_equation.have, result.no_equation.need, result.no_equation.rows_needed) == (5, 6, 72)
    text = result.summary()
    assert "equation: none" in text and "about 72 rows" in text
    assert "no equation" in repr(result)
    with pytest.raises(ValueError, match="no equation"):
        result.predict(df, "equation")
    assert result.predict(df, "tree").shape == (60, 2)
    bundle = pf.load_bundle(two_bundles["below"])
    with pytest.raises(BundleError, match="no equation"):
        bundle.predict(df, model="equation")
    why = bundle.explain(df.drop(columns="y"))   # both surrogates asked for: the tree's reasons alone
    assert list(why.columns) == ["tree_leaf", "tree_path"]


def test_three_classes_count_four_parameters():
    """Three classes, 45 rows, the rarest with 8: 4 of them in confirmation, under 12 = 3 x (2
    intercepts + 2 slopes). The run still ends with the forest and the tree judged by
    cross-validation, and no equation figures anywhere."""
    from pocketforest.intake import prepare
    from pocketforest.pipeline import Settings, distill
    rng = np.random.default_rng(11)
    x = rng.uniform(-1, 1, 45)
    y = np.where(np.argsort(np.argsort(x)) < 8, "low", np.where(rng.uniform(size=45) < 0.5, "mid", "high"))
    df = pd.DataFrame({"x": x, "z": rng.normal(size=45), "y": y})
    result = distill(prepare(df, "y", source="three.csv"), Settings(trees=10, seed=1, quiet=True, bootstrap=50, nested_repeats=0))
    d = result.no_equation
    assert result.equation is None and (d.rarest, d.parameters, d.need, d.have) == ("low", 4, 12, 4)
    # 12 rarest-class confirmation rows at a share of 8/45 and half the rows in confirmation: 135
    assert d.rows_needed == 135
    assert result.evaluation["on"] == "cross-validation" and "equation" not in result.evaluation
    assert "equation" not in result.evaluation["apparent"] and set(result.loss) == {"tree"}
