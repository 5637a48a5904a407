"""The bundle's code and ONNX exports: complete, valid, following the contract, and reproducing the
fitting libraries in their own runtimes (verify runs each form where it lives)."""
from __future__ import annotations

import json
import shutil
import sqlite3
from pathlib import Path

import numpy as np
import onnx
import pandas as pd
import pytest

from pocketforest.scoring import engines, runners
from pocketforest.export.code import FILES
from pocketforest.export.latex import tex_escape
from pocketforest.intake import prepare
from pocketforest.pipeline import Settings, distill
from pocketforest.thresholds import double_split
from pocketforest.scoring.verify import verify_bundle

from conftest import synthetic_table

HAVE_NODE = shutil.which("node") is not None
NAMES = ["regression", "binary", "multiclass"]


def _manifest(path):
    return json.loads((path / "manifest.json").read_text(encoding="utf-8"))


@pytest.mark.parametrize("name", NAMES)
def test_every_form_is_in_the_bundle_with_checksum_and_size(bundles, name):
    m = _manifest(bundles[name])
    for f in FILES + ("forest.onnx", "tree.onnx", "equation.onnx", "equation.txt", "tree.txt"):
        assert f in m["artifacts"], f
        assert m["artifact_sizes"][f] == (bundles[name] / f).stat().st_size > 0


HAVE = {p: shutil.which(p) is not None for p in ("Rscript", "soffice", "pspp", "chromedriver")}


@pytest.mark.parametrize("name", NAMES)
def test_verify_runs_every_form(bundles, name):
    # LibreOffice and Chromium take seconds to start: they run here on the regression and binary
    # bundles; tests/test_hostile.py runs them on a three-class bundle
    skip = ("libreoffice", "chromium") if name == "multiclass" else ()
    checks = verify_bundle(bundles[name], quiet=True, skip=skip)
    assert all(c.ok for c in checks), [c.line() for c in checks]
    forms = " ".join(c.form for c in checks)
    for piece in ("onnxruntime, Python", "onnxruntime-node", "equation.sql (SQLite)", "equation.sql (DuckDB)",
                  "tree.sql (SQLite)", "tree.sql (DuckDB)", "equation.py", "tree.py", "equation.js", "tree.js",
                  "equation.R (R)", "tree.R (R)", "equation.sps (GNU PSPP)", "equation.xlsx (LibreOffice Calc)",
                  "equation.txt one-cell formulas", "calculator.html equation (Chromium)", "calculator.html tree"):
        assert piece in forms, piece
    ran = [c for c in checks if c.max_diff is not None]
    expected = (14 - (0 if HAVE_NODE else 5) + 2 * HAVE["Rscript"] + HAVE["pspp"]
                + (0 if skip else 2 * HAVE["soffice"] + 2 * (HAVE["chromedriver"] and shutil.which("chromium") is not None)))
    assert len(ran) == expected, [c.line() for c in checks]
    if HAVE_NODE and all(HAVE.values()) and not skip:
        assert not any(c.skipped for c in checks), [c.line() for c in checks if c.skipped]


@pytest.mark.parametrize("name", NAMES)
def test_onnx_models_pass_full_check_and_carry_metadata(bundles, name):
    m = _manifest(bundles[name])
    for model in ("forest", "tree", "equation"):
        proto = onnx.load(str(bundles[name] / f"{model}.onnx"))
        onnx.checker.check_model(proto, full_check=True)
        props = {p.key: p.value for p in proto.metadata_props}
        assert props["tool_version"] == m["tool_version"]
        assert props["target"] == m["target"] and props["task"] == m["task"]
        assert props["created"] == m["created"] and props["model"] == model
        if m["task"] == "classification":
            assert json.loads(props["classes"]) == m["classes"]
        # optional tree attributes that carry nothing are left out (about a fifth of the bytes)
        attrs = {a.name for n in proto.graph.node if n.op_type.startswith("TreeEnsemble") for a in n.attribute}
        # (regression trees are ONNX-ML opset 5's TreeEnsemble, whose thresholds are nodes_splits)
        assert "nodes_hitrates" not in attrs and (model == "equation" or {"nodes_values", "nodes_splits"} & attrs)
        # identical raw named inputs in all three graphs, typed as the contract says
        inputs = [(i.name, i.type.tensor_type.elem_type) for i in proto.graph.input]
        assert inputs == [(f["onnx_input"], onnx.TensorProto.FLOAT if f["kind"] == "numeric"
                           else onnx.TensorProto.STRING) for f in m["features"]]


def _rows(path):
    m = _manifest(path)
    ref = pd.read_csv(path / "reference.csv", keep_default_na=False, na_values=[""],
                      dtype={f["name"]: str for f in m["features"] if f["kind"] == "categorical"})
    return m, ref, runners.json_rows(ref, m["features"])


@pytest.mark.parametrize("name", NAMES)
def test_python_export_follows_the_contract(bundles, name):
    m, ref, rows = _rows(bundles[name])
    for model in ("equation", "tree"):
        out = runners.run_python_export(bundles[name] / f"{model}.py", rows)
        if m["task"] == "regression":
            assert all(isinstance(v, float) for v in out)
        else:
            for v in out:
                assert set(v) == {"label", "probabilities"} and v["label"] in m["classes"]
                assert list(v["probabilities"]) == m["classes"]
                # a double softmax: the k probabilities sum to 1 within ~k * eps
                assert abs(sum(v["probabilities"].values()) - 1) < 1e-12


@pytest.mark.skipif(not HAVE_NODE, reason="Node.js is not installed")
@pytest.mark.parametrize("name", ["regression", "multiclass"])
def test_javascript_export_follows_the_contract(bundles, name):
    m, ref, rows = _rows(bundles[name])
    out = runners.run_js_export(bundles[name] / "tree.js", rows)
    if m["task"] == "regression":
        assert all(isinstance(v, float) for v in out)
    else:
        assert all(set(v) == {"label", "probabilities"} and list(v["probabilities"]) == m["classes"] for v in out)
    text = (bundles[name] / "equation.js").read_text()
    assert "module.exports = pocketforest_equation;" in text and "require(" not in text


@pytest.mark.skipif(not HAVE_NODE, reason="Node.js is not installed")
def test_equation_and_tree_js_share_one_page(bundles, tmp_path):
    """As two <script> elements would: both files in one global scope (a fresh vm context), each
    reachable under its own name, `predict` left as the last file's (plain JavaScript semantics)."""
    import subprocess
    m, ref, rows = _rows(bundles["regression"])
    script = tmp_path / "page.js"
    script.write_text(
        "const fs = require('fs'), vm = require('vm');\n"
        "const ctx = vm.createContext({});\n"
        "for (const f of process.argv.slice(2, 4)) vm.runInContext(fs.readFileSync(f, 'utf8'), ctx);\n"
        "const rows = JSON.parse(fs.readFileSync(0, 'utf8'));\n"
        "const out = vm.runInContext('[pocketforest_equation, pocketforest_tree, predict]', ctx);\n"
        "process.stdout.write(JSON.stringify(out.map((o) => rows.map((r) => (o.predict || o)(r)))));\n")
    r = subprocess.run(["node", str(script), str(bundles["regression"] / "equation.js"),
                        str(bundles["regression"] / "tree.js")], input=json.dumps(rows), capture_output=True,
                       text=True, timeout=60)
    assert r.returncode == 0, r.stderr
    eq, tree, last = json.loads(r.stdout)
    # double in both; only summation order and libm's last bit differ, ~k * eps * sum|terms|
    # absolute, so atol scaled to the predictions guards values near zero
    scale = 1e-12 * max(1.0, float(np.abs(ref["pred_equation"]).max()))
    np.testing.assert_allclose(eq, ref["pred_equation"], rtol=1e-12, atol=scale)
    # leaf constants printed as round-trip literals: exact by construction
    np.testing.assert_allclose(tree, ref["pred_tree"], rtol=1e-12)
    assert last == tree


@pytest.mark.parametrize("name", ["regression", "binary"])
def test_sql_returns_every_input_column_and_keeps_rows(bundles, name):
    """Contract: input_rows.* (an id column the model never saw included) plus the outputs."""
    m, ref, rows = _rows(bundles[name])
    con = sqlite3.connect(":memory:")
    cols = ["row id"] + [f["name"] for f in m["features"]]
    con.execute("CREATE TABLE input_rows (" + ", ".join(f'"{c}"' for c in cols) + ")")
    con.executemany("INSERT INTO input_rows VALUES (" + ",".join("?" * len(cols)) + ")",
                    [tuple([f"id-{i}"] + [r[c] for c in cols[1:]]) for i, r in enumerate(rows)])
    for model in ("equation", "tree"):
        cur = con.execute((bundles[name] / f"{model}.sql").read_text())
        names = [d[0] for d in cur.description]
        out = cur.fetchall()
        extra = ["prediction"] if m["task"] == "regression" else ["label"] + [f"prob_{c}" for c in m["classes"]]
        assert names == cols + extra
        assert sorted(r[0] for r in out) == sorted(f"id-{i}" for i in range(len(rows)))


@pytest.fixture(scope="module")
def small_run(tmp_path_factory):
    df = synthetic_table(n=300, seed=31)
    r = distill(prepare(df, "y", source="s.csv"), Settings(trees=20, seed=2, quiet=True, bootstrap=20, tree_depth=5))
    return r, r.write(tmp_path_factory.mktemp("run") / "b")


def test_tree_code_agrees_with_scikit_learn_at_float32_split_boundaries(small_run, tmp_path):
    """scikit-learn compares float32(x) <= t; the printed trees see doubles. At each numeric split
    try t, the next float32 up, the midpoint between them (where rounding to even decides) and the
    doubles either side of it: the code forms must land in the same leaf as scikit-learn."""
    r, path = small_run
    path = Path(path)
    t = r.tree.model.tree_
    base = {f.name: r.fills[f.name] if f.kind == "numeric" else "red" for f in r.table.features}
    rows = []
    for i in np.flatnonzero(t.children_left != -1):
        col = r.forest.columns[t.feature[i]]
        if col.level is not None:
            continue
        t32 = np.float32(t.threshold[i])
        up = np.nextafter(t32, np.float32(np.inf))
        mid = (float(t32) + float(up)) / 2
        for x in (float(t32), float(up), mid, np.nextafter(mid, -np.inf), np.nextafter(mid, np.inf)):
            rows.append({**base, col.feature: float(x)})
    assert rows, "the tree has no numeric split"
    frame = pd.DataFrame(rows)
    want = r.predict(frame, "tree")
    feats = [f.to_dict() for f in r.table.features]
    got_py = runners.collect(runners.run_python_export(path / "tree.py", runners.json_rows(frame, feats)), "regression", None)
    np.testing.assert_array_equal(got_py["prediction"], want)
    for engine in ("sqlite", "duckdb"):
        res = runners.run_sql(engine, (path / "tree.sql").read_text(), frame, feats)
        np.testing.assert_array_equal(runners.sql_predictions(res, "regression", None)["prediction"], want)
    if HAVE_NODE:
        got_js = runners.collect(runners.run_js_export(path / "tree.js", runners.json_rows(frame, feats)), "regression", None)
        np.testing.assert_array_equal(got_js["prediction"], want)
    if shutil.which("Rscript"):
        got_r = engines.run_r_exports({"tree": path / "tree.R"}, frame, feats, "regression", None, tmp_path)["tree"]
        np.testing.assert_array_equal(got_r["prediction"], want)


def test_double_split_matches_float32_rounding():
    """x op bound on doubles equals float32(x) <= t32 (IEEE 754 round-to-nearest-even)."""
    rng = np.random.default_rng(0)
    for t32 in np.float32(rng.normal(0, 100, 200)):
        op, bound = double_split(float(t32))
        up = np.nextafter(t32, np.float32(np.inf))
        mid = (float(t32) + float(up)) / 2
        for x in (float(t32), float(up), mid, np.nextafter(mid, -np.inf), np.nextafter(mid, np.inf)):
            want = np.float32(x) <= t32
            have = x <= bound if op == "<=" else x < bound
            assert want == have, (t32, x)


def test_missing_column_in_a_row_is_an_error_not_a_silent_fill(small_run):
    r, path = small_run
    rows = [{"x1": 0.1}]  # every other column absent
    with pytest.raises(runners.RunnerFailed, match="missing from the row"):
        runners.run_python_export(Path(path) / "equation.py", rows)


def test_latex_escapes_every_special_character():
    hostile = r"a\b{c}$d&e#f_g%h^i~j" + "\nk"
    out = tex_escape(hostile)
    for ch in "{}$&#_%":
        assert f"\\{ch}" in out
    assert "\n" not in out and r"\textbackslash{}" in out
    stripped = out
    for esc in (r"\textquotesingle{}", r"\textasciigrave{}", r"\textbackslash{}", r"\textasciicircum{}", r"\textasciitilde{}", r"\{", r"\}", r"\$", r"\&",
                r"\#", r"\_", r"\%"):
        stripped = stripped.replace(esc, "")
    assert not set(stripped) & set("\\{}$&#_%^~")


def test_equation_tex_is_a_standalone_document(small_run, tmp_path):
    _, path = small_run
    tex = (Path(path) / "equation.tex").read_text()
    assert tex.startswith(r"\documentclass") and tex.rstrip().endswith(r"\end{document}")
    assert tex.count(r"\begin{align*}") == tex.count(r"\end{align*}") >= 1
    typeset(Path(path) / "equation.tex", tmp_path)


def typeset(tex: Path, workdir: Path) -> None:
    """Compile with pdfLaTeX where a TeX system is installed (the file must typeset, not just look right)."""
    import subprocess
    exe = shutil.which("pdflatex")
    if exe is None:
        pytest.skip("pdflatex is not installed, so equation.tex was not typeset")
    shutil.copy(tex, workdir / "equation.tex")
    r = subprocess.run([exe, "-interaction=nonstopmode", "-halt-on-error", "-no-shell-escape", "equation.tex"],
                       cwd=workdir, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0 and (workdir / "equation.pdf").is_file(), r.stdout[-2000:]
