"""Every term kind the discovery step can suggest, built by hand, reproduced by every equation form.

For each kind the equation is fitted with statsmodels (through ``fit_equation``), then the ONNX
graph (onnxruntime), the SQL (SQLite and DuckDB), the Python export (separate isolated
interpreter), the JavaScript export (Node.js), the R export (Rscript) and the SPSS syntax (GNU
PSPP) are run on fresh rows that include missing values, an unseen category and values outside
the training range. The reference is ``EquationFit.predict`` (numpy, double precision); ONNX
computes in double from float32 inputs and returns double (probabilities as float32), the code
forms compute in double. The graph's ``contributions`` output is checked against the design matrix
times the coefficients, summed by term (numpy).
"""
from __future__ import annotations

import shutil

import numpy as np
import onnx
import pandas as pd
import pytest

from pocketforest.scoring import engines, runners
from pocketforest.equation import fit_equation
from pocketforest.export.jscode import equation_js
from pocketforest.export.onnx_models import equation_model
from pocketforest.export.pycode import equation_py
from pocketforest.export.rcode import equation_r
from pocketforest.export.spss import equation_sps, spss_names
from pocketforest.export.sql import equation_sql
from pocketforest.intake import prepare
from pocketforest.scoring.runtime import feeds
from pocketforest.terms import Term

from conftest import synthetic_table

HAVE_NODE = shutil.which("node") is not None
HAVE_R = shutil.which("Rscript") is not None
HAVE_PSPP = shutil.which("pspp") is not None

KINDS = {
    "linear": [Term("linear", ["x1"])],
    "quadratic": [Term("linear", ["x1"]), Term("quadratic", ["x1"], {"centre": 0.1})],
    "hinge_above": [Term("linear", ["x2"]), Term("hinge", ["x2"], {"knot": 0.2, "direction": "above"})],
    "hinge_below": [Term("linear", ["x2"]), Term("hinge", ["x2"], {"knot": -0.3, "direction": "below"})],
    "log": [Term("log", ["pos"], {"floor": 0.5})],          # pos > 0.5 in the data: the guard never acts
    "log_floor": [Term("log", ["pos"], {"floor": 1.0})],    # half the rows below the floor
    "categorical": [Term("categorical", ["colour"])],
    "num_x_num": [Term("linear", ["x2"]), Term("linear", ["x3"]),
                  Term("interaction", ["x2", "x3"], {"centres": {"x2": 0.05, "x3": -0.1}, "power": 1})],
    "num_x_num_power2": [Term("linear", ["x2"]), Term("linear", ["x3"]),
                         Term("interaction", ["x2", "x3"], {"centres": {"x2": 0.0, "x3": 0.0}, "power": 2})],
    # centre 0: with a non-zero centre patsy does not see x2 and I(x2 - c) as one factor and codes
    # the interaction with every level (reported to the equation's owner)
    "num_x_cat": [Term("linear", ["x2"]), Term("categorical", ["colour"]),
                  Term("interaction", ["x2", "colour"], {"centres": {"x2": 0.0}})],
    "cat_x_cat": [Term("categorical", ["colour"]), Term("categorical", ["site"]),
                  Term("interaction", ["colour", "site"])],
}


def _data(task: str, k: int = 2, n: int = 400, seed: int = 21) -> pd.DataFrame:
    df = synthetic_table(n=n, seed=seed, task=task, n_classes=k)
    df.insert(0, "pos", df["x1"] + 1.5)  # strictly positive, for log terms
    return df


def _fresh_rows(seed: int = 22) -> pd.DataFrame:
    rows = _data("regression", seed=seed, n=60).drop(columns="y")
    rows.loc[::4, "x2"] = np.nan
    rows.loc[1::5, "colour"] = np.nan
    rows.loc[2::6, "site"] = "east"          # never seen in training: scores as the reference level
    rows.loc[3::7, "x3"] = 2.5                # outside the training range [-1, 1]
    return rows


def _as_float32_inputs(rows: pd.DataFrame) -> pd.DataFrame:
    """The rows as the ONNX graph receives them: numeric inputs rounded to float32 (the contract's
    input type), then widened again, so the double reference sees exactly the graph's inputs."""
    out = rows.copy()
    for col in out.select_dtypes("number").columns:
        out[col] = out[col].astype(np.float32).astype(np.float64)
    return out


def _fit(terms, task="regression", k=2):
    df = _data(task, k)
    table = prepare(df, "y", source="terms.csv")
    kinds = {f.name: f.kind for f in table.features}
    fills = {f.name: (float(np.nanmedian(table.data[f.name].astype(float))) if f.kind == "numeric" else "")
             for f in table.features}
    y = table.data["y"].to_numpy()
    y = y.astype(float) if task == "regression" else y.astype(str).astype(object)
    eq = fit_equation(terms, table.data, y, task=task, target="y", fills=fills, kinds=kinds,
                      classes=table.classes, fit_on="all")
    return eq, table


def _onnx_outputs(eq, table, rows):
    import onnxruntime as ort
    model = equation_model(eq, table.features, {"tool_version": "test"})
    onnx.checker.check_model(model, full_check=True)
    sess = ort.InferenceSession(model.SerializeToString(), providers=["CPUExecutionProvider"])
    feats = [f.to_dict() for f in table.features]
    names = [o.name for o in sess.get_outputs()]
    return dict(zip(names, sess.run(None, feeds(rows, feats))))


def _code_outputs(eq, table, rows, tmp_path):
    meta = {"target": "y", "task": eq.task, "classes": eq.classes, "tool_version": "test"}
    feats = [f.to_dict() for f in table.features]
    (tmp_path / "equation.py").write_text(equation_py(eq, meta))
    (tmp_path / "equation.js").write_text(equation_js(eq, meta))
    sql = equation_sql(eq, meta)
    json_rows = runners.json_rows(rows, feats)
    out = {"python": runners.collect(runners.run_python_export(tmp_path / "equation.py", json_rows), eq.task, eq.classes)}
    for engine in ("sqlite", "duckdb"):
        out[engine] = runners.sql_predictions(runners.run_sql(engine, sql, rows, feats), eq.task, eq.classes)
    if HAVE_NODE:
        out["javascript"] = runners.collect(runners.run_js_export(tmp_path / "equation.js", json_rows), eq.task, eq.classes)
    if HAVE_R:
        (tmp_path / "equation.R").write_text(equation_r(eq, meta))
        out["R"] = engines.run_r_exports({"eq": tmp_path / "equation.R"}, rows, feats, eq.task, eq.classes, tmp_path)["eq"]
    if HAVE_PSPP:
        out["PSPP"] = _pspp_outputs(eq, table, rows, meta, tmp_path)
    return out


def _pspp_outputs(eq, table, rows, meta, tmp_path):
    (tmp_path / "equation.sps").write_text(equation_sps(eq, meta, table.features))
    feats = [f.to_dict() for f in table.features]
    names = spss_names([f.name for f in table.features])
    outs = (["pred_equation"] if eq.task == "regression" else
            ["label_equation"] + [f"prob_equation_{k}" for k in range(1, len(eq.classes) + 1)])
    res = engines.run_sps(tmp_path / "equation.sps", rows, feats, names, outs, tmp_path)
    if eq.task == "regression":
        return {"prediction": pd.to_numeric(res[outs[0]].str.strip(), errors="coerce").to_numpy(dtype=float)}
    # PSPP writes a system-missing value as a blank cell: missing, like the other forms' NaN
    probs = res[outs[1:]].apply(lambda c: pd.to_numeric(c.str.strip(), errors="coerce"))
    return {"label": res[outs[0]].to_numpy(), "probabilities": probs.to_numpy(dtype=float)}


def _check_contributions(eq, rows, got):
    """contributions [N, B, 1 + T] against numpy: the design on the rows as the graph reads them
    (numeric inputs are float32 in ONNX), times the coefficients, summed over each term's columns."""
    X = eq.design(_as_float32_inputs(rows))
    coef = np.asarray(eq.coef).reshape(X.shape[1], -1)
    terms = sorted({c.term for c in eq.columns})
    want = np.stack([np.column_stack([X[:, 0] * coef[0, b]] +
                                     [sum(X[:, 1 + j] * coef[1 + j, b] for j, c in enumerate(eq.columns) if c.term == t)
                                      for t in terms]) for b in range(coef.shape[1])], axis=1)
    parts, eta = got["contributions"], got["linear_predictor"]
    assert parts.shape == want.shape and eta.shape == (len(rows), coef.shape[1])
    # double precision throughout; only the order of the additions differs (common practice)
    scale = max(1.0, float(np.abs(want).max()))
    np.testing.assert_allclose(parts, want, rtol=0, atol=1e-12 * scale)
    np.testing.assert_allclose(parts.sum(axis=2), eta, rtol=0, atol=1e-12 * scale)
    np.testing.assert_allclose(eta, (X @ coef), rtol=0, atol=1e-12 * scale)


@pytest.mark.parametrize("kind", sorted(KINDS))
def test_each_term_kind_in_every_equation_form(kind, tmp_path):
    eq, table = _fit(KINDS[kind])
    rows = _fresh_rows()
    want = eq.predict(rows)
    assert np.isfinite(want).all()
    outputs = _onnx_outputs(eq, table, rows)
    _check_contributions(eq, rows, outputs)
    got = outputs["prediction"].reshape(-1)
    # The graph computes and returns double from float32 inputs: from the same float32 inputs only
    # the summation order differs (~k * eps). rtol one float32 ulp (2^-23) bounds it with room (it
    # also bounded the float32 rounding of the output, before the output became double); atol for
    # double summation order near zero.
    want32 = eq.predict(_as_float32_inputs(rows))
    np.testing.assert_allclose(got, want32, rtol=2.0 ** -23, atol=1e-12 * max(1.0, np.abs(want32).max()))
    # The code forms compute in double from the double inputs: only summation order and libm's last
    # bit differ (~k * eps * sum|terms| < 1e-13 here), so 1e-12 absolute and relative.
    for form, res in _code_outputs(eq, table, rows, tmp_path).items():
        np.testing.assert_allclose(res["prediction"], want, rtol=1e-12, atol=1e-12, err_msg=form)


@pytest.mark.parametrize("k", [2, 3])
def test_all_kinds_together_for_classification(k, tmp_path):
    terms = [Term("linear", ["x1"]), Term("quadratic", ["x1"], {"centre": 0.0}),
             Term("linear", ["x2"]), Term("hinge", ["x2"], {"knot": 0.1, "direction": "above"}),
             Term("log", ["pos"], {"floor": 1.0}), Term("categorical", ["colour"]), Term("categorical", ["site"]),
             Term("interaction", ["x2", "colour"], {"centres": {"x2": 0.0}})]
    eq, table = _fit(terms, task="classification", k=k)
    rows = _fresh_rows()
    want = eq.predict(rows)
    got = _onnx_outputs(eq, table, rows)
    _check_contributions(eq, rows, got)
    # double softmax from float32 inputs, rounded once to float32: |error| <= 2^-24 * p <= 2^-24
    # from the same float32 inputs; atol one float32 ulp at 1 (2^-23)
    np.testing.assert_allclose(got["probabilities"], eq.predict(_as_float32_inputs(rows)), rtol=0, atol=2.0 ** -23)
    np.testing.assert_array_equal(got["label"], np.asarray(eq.classes)[want.argmax(1)])
    # code forms: double throughout, only summation order and libm's last bit differ (~1e-15)
    for form, res in _code_outputs(eq, table, rows, tmp_path).items():
        np.testing.assert_allclose(res["probabilities"], want, atol=1e-12, err_msg=form)
        np.testing.assert_array_equal(res["label"], np.asarray(eq.classes)[want.argmax(1)], err_msg=form)


@pytest.mark.parametrize("program", ["Rscript", "pspp"])
def test_r_and_pspp_are_present_on_this_machine(program):
    """The R and SPSS forms above must really run where the engines are installed (CI has them)."""
    if shutil.which(program) is None:
        pytest.skip(f"{program} is not installed here, so its form was not run")


def test_node_is_present_on_this_machine():
    """The JavaScript forms above must really run where Node.js is installed (CI has it)."""
    if not HAVE_NODE:
        pytest.skip("Node.js is not installed here, so the JavaScript forms were not run")
    assert runners.node_executable()


def test_extreme_scores_give_probabilities_not_errors(tmp_path):
    """Rows far outside the training range drive the scores past exp's range (about 709):
    every form still returns probabilities (0 or 1), as numpy does."""
    eq, table = _fit([Term("linear", ["x1"]), Term("categorical", ["colour"])], task="classification", k=3)
    rows = _fresh_rows().head(6).copy()
    rows["x1"] = [-1e6, -1e4, -1.0, 1.0, 1e4, 1e6]
    want = eq.predict(rows)
    # saturated scores give exactly 0 or 1 in double; the others differ by rounding only (~1e-15)
    for form, res in _code_outputs(eq, table, rows, tmp_path).items():
        np.testing.assert_allclose(res["probabilities"], want, atol=1e-12, err_msg=form)


def _unguarded_log(eq, fills: dict):
    """The equation with its (guarded) log term replaced by a plain log of the input, which has no
    value for inputs <= 0: discovery's log terms never do that, a hand-made expression can, and
    every form must then agree on a missing prediction."""
    import dataclasses

    from pocketforest.expr import Log, Num
    eq.columns = [dataclasses.replace(c, node=Log(Num("pos", fills["pos"]))) if c.label.startswith("log") else c
                  for c in eq.columns]
    return eq


def _missing_where_not_finite(values: np.ndarray) -> np.ndarray:
    """The documented outcome (README, "Equation values that are not finite"): missing (NaN)."""
    values = np.asarray(values, dtype=float)
    return np.where(np.isfinite(values), values, np.nan)


def test_huge_inputs_and_logs_of_non_positive_values_agree_in_every_form(tmp_path):
    """An input of 1e30 in a squared term is the same finite number in every form (ONNX computes
    and returns double precision, so nothing overflows float32), and a log of a value <= 0 is a
    missing prediction everywhere: NaN from ONNX and numpy, None from Python, null from
    JavaScript, NULL from SQL."""
    eq, table = _fit([Term("linear", ["x1"]), Term("quadratic", ["x1"], {"centre": 0.1}),
                      Term("log", ["pos"], {"floor": 0.5})])
    eq = _unguarded_log(eq, {"pos": float(np.nanmedian(table.data["pos"].astype(float)))})
    rows = _fresh_rows().head(8).copy()
    rows["x1"] = [1e30, -1e30, 3.4e38, 0.2, 0.3, 1e20, 0.1, 0.5]
    rows["pos"] = [1.0, 2.0, 1.0, 0.0, -2.0, 1.0, np.nan, 1.5]
    want = eq.predict(rows)
    assert np.isfinite(want[[0, 1, 2, 5, 6, 7]]).all() and np.isnan(want[[3, 4]]).all()
    assert abs(want[0]) > 1e59   # beyond float32's largest value, 3.4e38
    got = _onnx_outputs(eq, table, rows)["prediction"].reshape(-1)
    assert got.dtype == np.float64
    # the inputs enter ONNX as float32 (relative rounding <= 2**-24 each, doubled by the square):
    # 1e-6 relative, and 1e-6 absolute for the predictions of order one
    np.testing.assert_allclose(got, want, rtol=1e-6, atol=1e-6)
    for form, res in _code_outputs(eq, table, rows, tmp_path).items():
        # double precision throughout; summation order and libm differ at most in the last bits
        np.testing.assert_allclose(res["prediction"], want, rtol=1e-12, atol=1e-12, err_msg=form)


def test_log_link_overflow_is_missing_in_every_form(tmp_path):
    """A Poisson equation's mean exp(eta) overflows a double for eta above about 709.78: the
    prediction is missing in every form, as is any other value that is not finite."""
    df = _data("regression")
    rng = np.random.default_rng(5)
    df["y"] = rng.poisson(np.exp(0.5 * df["x1"])).astype(float)
    table = prepare(df, "y", source="counts.csv")
    kinds = {f.name: f.kind for f in table.features}
    fills = {f.name: (float(np.nanmedian(table.data[f.name].astype(float))) if f.kind == "numeric" else "")
             for f in table.features}
    eq = fit_equation([Term("linear", ["x1"])], table.data, table.data["y"].to_numpy(dtype=float),
                      task="regression", target="y", fills=fills, kinds=kinds, classes=None, family="poisson",
                      fit_on="all")
    rows = _fresh_rows().head(4).copy()
    rows["x1"] = [0.5, 1e6, -1e6, 3e38]
    want = _missing_where_not_finite(eq.predict(rows))
    assert np.isnan(want[[1, 3]]).all() and np.isfinite(want[[0, 2]]).all()
    got = _onnx_outputs(eq, table, rows)["prediction"].reshape(-1)
    np.testing.assert_allclose(got, want, rtol=1e-6, atol=1e-6)   # float32 inputs, as above
    # R and SPSS syntax included: equation.sps gives 0 where PSPP's EXP would underflow to
    # system-missing, as the other forms do
    for form, res in _code_outputs(eq, table, rows, tmp_path).items():
        np.testing.assert_allclose(res["prediction"], want, rtol=1e-12, atol=1e-12, err_msg=form)


def test_generated_graph_names_never_meet_an_input_name():
    """Columns named 1, 2, ... reach ONNX as inputs c_1, c_2, ...; the graph's own constants are
    also numbered names, and once took an input's name (found by tests/test_fuzz.py)."""
    rng = np.random.default_rng(3)
    df = pd.DataFrame({str(k): rng.normal(size=200) for k in range(1, 13)})
    df["y"] = df["1"] - 2 * df["9"] + rng.normal(0, 0.1, 200)
    table = prepare(df, "y", source="numbered.csv")
    assert {f.onnx_input for f in table.features} >= {"c_1", "c_9", "c_12"}
    kinds = {f.name: f.kind for f in table.features}
    fills = {f.name: 0.0 for f in table.features}
    terms = [Term("linear", [str(k)]) for k in range(1, 13)]
    eq = fit_equation(terms, table.data, table.data["y"].to_numpy(dtype=float), task="regression", target="y",
                      fills=fills, kinds=kinds, classes=None, fit_on="all")
    rows = df.drop(columns="y").head(20)
    got = _onnx_outputs(eq, table, rows)["prediction"].reshape(-1)
    # float32 inputs of order one: 1e-6 (as in test_each_term_kind_in_every_equation_form)
    np.testing.assert_allclose(got, eq.predict(rows), rtol=1e-6, atol=1e-6)


@pytest.mark.parametrize("k", [2, 3])
def test_classification_without_a_finite_score_is_missing_in_every_form(k, tmp_path):
    """A log of a value <= 0 leaves the class scores without a value: every form returns
    no label ("" from ONNX, None/null/NULL from the code forms, read as "") and missing
    probabilities, instead of a label chosen from NaNs."""
    eq, table = _fit([Term("linear", ["x1"]), Term("log", ["pos"], {"floor": 0.5})], task="classification", k=k)
    eq = _unguarded_log(eq, {"pos": float(np.nanmedian(table.data["pos"].astype(float)))})
    rows = _fresh_rows().head(5).copy()
    rows["pos"] = [1.0, 0.0, -1.0, 2.0, np.nan]
    want = _missing_where_not_finite(eq.predict(rows))
    gone = np.isnan(want).any(axis=1)
    assert list(gone) == [False, True, True, False, False]
    labels = np.where(gone, "", np.asarray(eq.classes)[np.nan_to_num(want).argmax(1)])
    got = _onnx_outputs(eq, table, rows)
    np.testing.assert_allclose(got["probabilities"], want, atol=1e-6)   # float32 probabilities
    np.testing.assert_array_equal(got["label"], labels)
    # R and SPSS syntax included (their missing-prediction convention is that of the other forms)
    for form, res in _code_outputs(eq, table, rows, tmp_path).items():
        np.testing.assert_allclose(res["probabilities"], want, atol=1e-12, err_msg=form)
        np.testing.assert_array_equal(res["label"], labels, err_msg=form)


@pytest.mark.parametrize("task, k", [("regression", 2), ("classification", 2), ("classification", 3)])
def test_intercept_only_equation_in_every_form(task, k, tmp_path):
    """No variable earned a term: the equation is its intercept, and every form still gives one
    value per row (equation.onnx once failed to build; found by tests/test_fuzz.py)."""
    eq, table = _fit([], task=task, k=k)
    assert not eq.columns
    rows = _fresh_rows().head(7)
    want = eq.predict(rows)
    got = _onnx_outputs(eq, table, rows)
    if task == "regression":
        # one double intercept plus zeros: exact
        np.testing.assert_allclose(got["prediction"].reshape(-1), want, rtol=1e-12)
    else:
        np.testing.assert_allclose(got["probabilities"], want, atol=1e-6)   # float32 probabilities
    # R and SPSS syntax included (their missing-prediction convention is that of the other forms)
    for form, res in _code_outputs(eq, table, rows, tmp_path).items():
        key = "prediction" if task == "regression" else "probabilities"
        np.testing.assert_allclose(res[key], want, rtol=1e-12, atol=1e-12, err_msg=form)


@pytest.mark.parametrize("kind", ["numeric", "categorical"])
def test_one_column_table_with_missing_values_in_every_form(kind, tmp_path):
    """A bundle with one input column: the rows handed to R are a one-column CSV, where an empty
    field is written quoted; R refused it as a number and skipped it as a blank line for a
    category (both found by tests/test_fuzz.py)."""
    rng = np.random.default_rng(4)
    if kind == "numeric":
        df = pd.DataFrame({"dose": rng.uniform(0, 2, 200)})
        df["y"] = 3 * df["dose"] + rng.normal(0, 0.2, 200)
        term, fills, rows = Term("linear", ["dose"]), {"dose": float(np.median(df["dose"]))}, \
            pd.DataFrame({"dose": [0.5, np.nan, 1.5, np.nan]})
    else:
        df = pd.DataFrame({"dose": rng.choice(["low", "high"], 200)})
        df.loc[::7, "dose"] = np.nan
        df["y"] = np.where(df["dose"] == "high", 2.0, 0.0) + rng.normal(0, 0.2, 200)
        term, fills, rows = Term("categorical", ["dose"]), {"dose": ""}, \
            pd.DataFrame({"dose": ["low", "", "high", "", ""]})
    table = prepare(df, "y", source="one.csv")
    eq = fit_equation([term], table.data, table.data["y"].to_numpy(dtype=float), task="regression", target="y",
                      fills=fills, kinds={"dose": kind}, classes=None, fit_on="all")
    want = eq.predict(rows)
    outs = _code_outputs(eq, table, rows, tmp_path)
    assert "R" in outs or not HAVE_R
    for form, res in outs.items():
        # double precision in every form: summation order only
        np.testing.assert_allclose(res["prediction"], want, rtol=1e-12, atol=1e-12, err_msg=form)
