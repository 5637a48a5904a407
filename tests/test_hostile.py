"""Hostile column names, category values and class labels: every export still runs and matches,
and nothing in them executes.

The data are invented; what they must exercise is the quoting rules of each target language
(SQL: ISO double-quoted identifiers and single-quoted strings with the quote doubled; Python and
JavaScript string literals; HTML's ``</script>``), which is common practice for code generators.
"""
from __future__ import annotations

import json
import os
import shutil
import sqlite3
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from pocketforest.scoring import engines, runners
from pocketforest.intake import load
from pocketforest.pipeline import Settings, distill

from conftest import run_cli

HAVE_NODE = shutil.which("node") is not None
HAVE_ALL = all(shutil.which(p) for p in ("node", "Rscript", "soffice", "pspp", "chromium", "chromedriver"))

HOSTILE_NAMES = [
    'he said "hi" and \'bye\'',
    "back\\slash; -- drop table input_rows",
    "select",
    "1st value",
    "Größe (m²) 数 🌱",
    "L" * 300,
    "</script><script>alert(1)</script>",
    "two\nlines",
]


def _values(marker: Path) -> tuple[list[str], list[str]]:
    """Category values that would do something visible if any export ever ran them as code."""
    return ([
        "'); DROP TABLE input_rows; --",
        f"__import__('os').system('touch {marker}_py')",
        f"\"); require('fs').writeFileSync('{marker}_js', 'x'); (\"",
        'say "x"\\n \\u0041',
        "Ünïcode 値 🙂",
    ], ["</script>", "a;b", "${x}`y`", "plain", "drop table input_rows"])


def _hostile_csv(path: Path, marker: Path, task: str) -> str:
    rng = np.random.default_rng(5)
    n = 360
    lv1, lv2 = (np.array(v) for v in _values(marker))
    cols = {name: rng.uniform(0, 1, n) for name in HOSTILE_NAMES}
    k1, k2 = rng.choice(lv1, n), rng.choice(lv2, n)
    x = cols[HOSTILE_NAMES[0]]
    f = 3 * x + 2 * (cols[HOSTILE_NAMES[1]] > 0.5) + np.where(k1 == lv1[0], 1.5, 0) + np.where(k2 == lv2[0], -1, 0)
    df = pd.DataFrame({**cols, "drop table": k1, "x'); DROP TABLE input_rows; --": k2})
    df.loc[rng.choice(n, 20, replace=False), HOSTILE_NAMES[0]] = np.nan
    df.loc[rng.choice(n, 20, replace=False), "drop table"] = np.nan
    target = 'out "y"; --'
    if task == "regression":
        df[target] = f + rng.normal(0, 0.3, n)
    else:
        labels = np.array(["it's", 'say "no"', "</script>"])
        cut = np.quantile(f, [1 / 3, 2 / 3])
        df[target] = labels[np.searchsorted(cut, f + rng.normal(0, 0.3, n))]
    df.to_csv(path, index=False)
    return target


@pytest.fixture(scope="module", params=["regression", "classification"])
def hostile_bundle(request, tmp_path_factory):
    base = tmp_path_factory.mktemp(f"hostile_{request.param}")
    marker = base / "PWNED"
    target = _hostile_csv(base / "hostile data.csv", marker, request.param)
    # the file goes through the same reader as `distill`; a small bootstrap keeps the test quick
    table = load(base / "hostile data.csv", target)
    # every column must reach the exports: all are kept as main effects and the size cap
    # (tested elsewhere) is off here
    keep = tuple(f.name for f in table.features)
    distill(table, Settings(trees=30, seed=0, quiet=True, bootstrap=50, nested_repeats=0, cap_terms=False,
                            keep_vars=keep)).write(base / "bundle")
    return base, base / "bundle", marker


def test_verify_runs_and_matches_every_form(hostile_bundle):
    base, bundle, marker = hostile_bundle
    r = run_cli("verify", str(bundle), cwd=base)
    assert r.returncode == 0, r.stdout + r.stderr
    lines = [ln for ln in r.stdout.splitlines() if ln[:4] in ("ok  ", "FAIL", "skip")]
    assert len(lines) == 22
    if HAVE_ALL:   # CI: Node.js, R, LibreOffice, GNU PSPP and Chromium all ran and matched
        assert all(ln.startswith("ok") for ln in lines), r.stdout
    manifest = json.loads((bundle / "manifest.json").read_text(encoding="utf-8"))
    names = {f["name"] for f in manifest["features"]}
    assert set(HOSTILE_NAMES) <= names  # none was dropped or renamed on the way
    assert not list(base.glob("PWNED*")) and not Path("PWNED_py").exists()


def test_nothing_in_the_exports_executes(hostile_bundle, tmp_path):
    """Rows carrying the hostile values themselves go through every code form; no file appears,
    the SQL leaves its table intact."""
    base, bundle, marker = hostile_bundle
    manifest = json.loads((bundle / "manifest.json").read_text(encoding="utf-8"))
    feats = manifest["features"]
    lv1, lv2 = _values(marker)
    rows = pd.DataFrame([{f["name"]: (0.5 if f["kind"] == "numeric" else v) for f in feats}
                         for v in lv1 + lv2 + ["'; DELETE FROM input_rows; SELECT '"]])
    json_rows = runners.json_rows(rows, feats)
    for model in ("equation", "tree"):
        runners.run_python_export(bundle / f"{model}.py", json_rows)
        if HAVE_NODE:
            runners.run_js_export(bundle / f"{model}.js", json_rows)
        con = sqlite3.connect(":memory:")
        con.execute("CREATE TABLE input_rows (" + ", ".join('"' + f["name"].replace('"', '""') + '"' for f in feats) + ")")
        con.executemany("INSERT INTO input_rows VALUES (" + ",".join("?" * len(feats)) + ")",
                        [tuple(r[f["name"]] for f in feats) for r in json_rows])
        out = con.execute((bundle / f"{model}.sql").read_text(encoding="utf-8")).fetchall()
        assert len(out) == len(rows)
        assert con.execute("SELECT COUNT(*) FROM input_rows").fetchone()[0] == len(rows)
        for engine in ("sqlite", "duckdb"):  # run_sql also checks the table afterwards
            assert len(runners.run_sql(engine, (bundle / f"{model}.sql").read_text(encoding="utf-8"), rows, feats)) == len(rows)
    task, classes = manifest["task"], manifest.get("classes")
    if shutil.which("Rscript"):
        got = engines.run_r_exports({m: bundle / f"{m}.R" for m in ("equation", "tree")}, rows, feats, task, classes,
                                    tmp_path)
        assert all(len(next(iter(v.values()))) == len(rows) for v in got.values())
    if shutil.which("pspp"):
        names = {f["name"]: f["spss_name"] for f in feats}
        out = ["pred_equation"] if task == "regression" else ["label_equation"]
        assert len(engines.run_sps(bundle / "equation.sps", rows, feats, names, out, tmp_path)) == len(rows)
    assert not list(base.glob("PWNED*")) and not list(Path.cwd().glob("PWNED*")) and not list(tmp_path.glob("PWNED*"))


def test_equation_tex_typesets(hostile_bundle, tmp_path):
    from test_exports import typeset
    typeset(hostile_bundle[1] / "equation.tex", tmp_path)


def test_data_reaches_code_only_as_literals(hostile_bundle):
    base, bundle, _ = hostile_bundle
    for name in ("equation.js", "tree.js"):
        assert "</script" not in (bundle / name).read_text(encoding="utf-8").lower()
    for name in ("equation.py", "tree.py", "equation.js", "tree.js"):
        text = (bundle / name).read_text(encoding="utf-8")
        assert text.isascii(), name                       # every non-ASCII character escaped
        assert "two\nlines" not in text                   # a newline in a name cannot end a literal
    sql = (bundle / "equation.sql").read_text(encoding="utf-8")
    assert '"x\'); DROP TABLE input_rows; --"' in sql     # an identifier, quoted
    assert "'''); DROP TABLE input_rows; --'" in sql      # a string, its quote doubled
    for name in ("equation.R", "tree.R", "equation.sps"):
        text = (bundle / name).read_text(encoding="utf-8")
        assert text.isascii() and "two\nlines" not in text, name
    assert '"back\\\\slash; -- drop table input_rows"' in (bundle / "equation.R").read_text()  # R: backslash doubled
    sps = (bundle / "equation.sps").read_text(encoding="ascii")
    assert "'''); DROP TABLE input_rows; --'" in sps      # SPSS: the quote doubled inside '...'
    page = (bundle / "calculator.html").read_text(encoding="utf-8")
    assert page.lower().count("</script") == page.lower().count("<script")   # only the page's own closing tags
    spec = page.split("id='pf-spec'>", 1)[1].split("</script>", 1)[0]
    assert "<" not in spec and json.loads(spec)["inputs"]
    from openpyxl import load_workbook
    wb = load_workbook(bundle / "equation.xlsx")
    formulas = [c.value for ws in wb for row in ws.iter_rows() for c in row if c.data_type == "f"]
    assert formulas and not any(w in f for f in formulas for w in ("DROP", "require(", "__import__", "script"))
    header = [c.value for c in wb["inputs"][1]]
    assert "two\nlines" in header and "</script><script>alert(1)</script>" in header


@pytest.mark.parametrize("hostile_bundle", ["regression"], indirect=True)
def test_tampered_code_file_is_refused(hostile_bundle, tmp_path):
    _, bundle, _ = hostile_bundle
    copy = tmp_path / "b"
    shutil.copytree(bundle, copy)
    with open(copy / "tree.py", "a", encoding="utf-8") as fh:
        fh.write("\nimport os\nos.system('touch PWNED_tamper')\n")
    r = run_cli("verify", str(copy), cwd=tmp_path)
    assert r.returncode == 1 and "tree.py altered" in r.stdout
    assert not (tmp_path / "PWNED_tamper").exists()


@pytest.mark.parametrize("hostile_bundle", ["regression"], indirect=True)
def test_manifest_naming_a_code_file_outside_the_bundle_is_refused(hostile_bundle, tmp_path):
    _, bundle, _ = hostile_bundle
    copy = tmp_path / "b"
    shutil.copytree(bundle, copy)
    m = json.loads((copy / "manifest.json").read_text(encoding="utf-8"))
    m["artifacts"]["../equation.py"] = m["artifacts"].pop("equation.py")
    (copy / "manifest.json").write_text(json.dumps(m), encoding="utf-8")
    r = run_cli("verify", str(copy), cwd=tmp_path)
    assert r.returncode == 2 and r.stderr.startswith("error:") and "outside the bundle" in r.stderr


def test_report_r_snippet_runs_as_printed(hostile_bundle, tmp_path):
    """The report's R snippet, copied from the page as a reader would, runs in R in the bundle
    folder and gives reference.csv's predictions for its example row (the names in it are the
    hostile ones)."""
    import html
    import re
    import subprocess
    if shutil.which("Rscript") is None:
        pytest.skip("R (Rscript) is not installed")
    _, bundle, _ = hostile_bundle
    page = (bundle / "report.html").read_text(encoding="utf-8")
    code = html.unescape(re.search(r"<h3>R \(base R, no packages\)</h3><pre><code>(.*?)</code></pre>", page, re.S).group(1))
    out = tmp_path / "result.txt"
    code += ('\nres <- pocketforest_equation$predict(new_rows)\n'
             f'writeLines(if (is.data.frame(res)) sprintf("%a", unlist(res[1, -1])) else sprintf("%a", res), {json.dumps(str(out))})\n')
    r = subprocess.run(["Rscript", "--vanilla", "-e", code], cwd=bundle, capture_output=True, text=True, timeout=120,
                       env=dict(os.environ, LC_ALL="C.UTF-8"))
    assert r.returncode == 0, r.stderr
    got = [float.fromhex(v) for v in out.read_text().split()]
    from pocketforest.report.page import _example_row
    manifest = json.loads((bundle / "manifest.json").read_text(encoding="utf-8"))
    (want,) = runners.run_python_export(bundle / "equation.py", [_example_row(manifest)])
    want = [want] if not isinstance(want, dict) else [want["probabilities"][c] for c in manifest["classes"]]
    # both double precision; R's decimal reader may be one unit in the last place off
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("hostile_bundle", ["classification"], indirect=True)
def test_calculator_shows_names_and_classes_as_text(hostile_bundle, tmp_path):
    """In Chromium, the page's labels are the hostile names themselves, as text; none ran."""
    if shutil.which("chromium") is None or shutil.which("chromedriver") is None:
        pytest.skip("Chromium and chromedriver are not installed")
    from selenium.common.exceptions import NoAlertPresentException
    from selenium.webdriver.common.by import By
    _, bundle, _ = hostile_bundle
    manifest = json.loads((bundle / "manifest.json").read_text(encoding="utf-8"))
    driver = engines.open_page(bundle / "calculator.html", tmp_path)
    try:
        labels = [e.get_attribute("textContent") for e in driver.find_elements(By.CSS_SELECTOR, "#pf-inputs label")]
        assert set(HOSTILE_NAMES) <= set(labels)
        cells = [e.get_attribute("textContent")
                 for e in driver.find_elements(By.CSS_SELECTOR, ".card.equation table td:first-child")]
        assert cells == manifest["classes"]
        assert driver.execute_script("return document.querySelectorAll('script').length") == 5
        with pytest.raises(NoAlertPresentException):
            driver.switch_to.alert.text
    finally:
        driver.quit()


def test_explanations_keep_hostile_names_as_text(hostile_bundle):
    """score --explain writes names into its columns and cells: never as something a spreadsheet
    opening the CSV would run (OWASP, "CSV Injection": cells starting with =, +, - or @)."""
    from pocketforest.scoring.explain import Explainer, equation_columns
    _, bundle, _ = hostile_bundle
    ex = Explainer(bundle)
    texts = ex.rule_texts().values()
    assert texts and all(t[0].isalpha() or t[0] in '_"' for t in texts)
    eta, parts = equation_columns(ex.manifest)
    assert all(c.startswith(("linear_predictor", "contribution")) for c in eta + parts)
