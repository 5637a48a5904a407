"""`verify` really runs each form and notices when one is wrong; absent runtimes are skipped
with a clear reason, never silently."""
from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from pocketforest.scoring import verify
from pocketforest.scoring.bundle_io import sha256

from conftest import SRC

NODE = shutil.which("node")
#: LibreOffice and Chromium take seconds to start; the tests about other forms leave them out
#: (``verify --skip``); tests/test_exports.py, tests/test_hostile.py and the test below run them.
SLOW = ("libreoffice", "chromium")
ENGINES_HERE = all(shutil.which(p) for p in ("Rscript", "soffice", "pspp", "chromium", "chromedriver"))


_CLI = ("import sys\n"
        "from pocketforest.cli import main\n"
        "rc = main(['verify'] + sys.argv[1:])\n"
        "leaked = sorted({m.split('.')[0] for m in sys.modules} & {'sklearn', 'statsmodels', 'patsy', 'skl2onnx'})\n"
        "print('fitting libraries imported:', leaked, file=sys.stderr)\n"
        "sys.exit(rc)\n")


def _verify(bundle: Path, env_extra: dict | None = None, path: str | None = None,
            skip: tuple[str, ...] = SLOW) -> subprocess.CompletedProcess:
    """The verify command in a new interpreter; it must not import any fitting library."""
    env = dict(os.environ, PYTHONPATH=str(SRC), **(env_extra or {}))
    if path is not None:
        env["PATH"] = path
    args = [str(bundle)] + (["--skip", *skip] if skip else [])
    r = subprocess.run([sys.executable, "-c", _CLI, *args], capture_output=True, text=True, env=env, timeout=600)
    assert "fitting libraries imported: []" in r.stderr, r.stderr
    return r


def _edit(bundle: Path, name: str, change) -> None:
    """Change one artifact and re-sign it in the manifest, so only the parity checks can notice."""
    p = bundle / name
    p.write_text(change(p.read_text(encoding="utf-8")), encoding="utf-8")
    _resign(bundle, name)


def _resign(bundle: Path, name: str) -> None:
    p = bundle / name
    m = json.loads((bundle / "manifest.json").read_text(encoding="utf-8"))
    m["artifacts"][name] = sha256(p)
    m["artifact_sizes"][name] = p.stat().st_size
    (bundle / "manifest.json").write_text(json.dumps(m), encoding="utf-8")


def _lines(stdout: str, form: str) -> list[str]:
    return [ln for ln in stdout.splitlines() if form in ln]


def _verify_here(bundle: Path, monkeypatch, env_extra: dict | None = None, path: str | None = None,
                 skip: tuple[str, ...] = SLOW) -> str:
    """verify in this process (quicker than a new interpreter); the lines the CLI would print."""
    for k, v in (env_extra or {}).items():
        monkeypatch.setenv(k, v)
    if path is not None:
        monkeypatch.setenv("PATH", path)
    checks = verify.verify_bundle(bundle, skip=skip)
    return "\n".join(c.line() for c in checks)


@pytest.fixture
def copy(bundles, tmp_path):
    dst = tmp_path / "b"
    shutil.copytree(bundles["regression"], dst)
    return dst


def test_wrong_code_forms_fail_even_with_matching_checksums(copy):
    _edit(copy, "equation.py", lambda t: t + "\n_orig = predict\n\n\ndef predict(row):\n    return _orig(row) + 1e-3\n")
    _edit(copy, "tree.sql", lambda t: t.replace(') AS "prediction"', ') + 1e-3 AS "prediction"'))
    if NODE:
        _edit(copy, "tree.js", lambda t: t + "\nvar _o = predict;\nmodule.exports = { predict: function (r) { return _o(r) * 1.001; } };\n")
    r = _verify(copy)
    assert r.returncode == 1, r.stdout
    assert _lines(r.stdout, "equation.py")[0].startswith("FAIL")
    assert all(ln.startswith("FAIL") for ln in _lines(r.stdout, "tree.sql"))
    assert _lines(r.stdout, "tree.py")[0].startswith("ok")
    if NODE:
        assert _lines(r.stdout, "tree.js")[0].startswith("FAIL")
        assert _lines(r.stdout, "equation.js")[0].startswith("ok")


def test_sql_with_a_second_statement_is_not_run(copy, monkeypatch):
    _edit(copy, "equation.sql", lambda t: t + ";\nDROP TABLE input_rows;\n")
    out = _verify_here(copy, monkeypatch)
    sqlite, duck = _lines(out, "equation.sql (SQLite)")[0], _lines(out, "equation.sql (DuckDB)")[0]
    assert sqlite.startswith("FAIL") and "one statement" in sqlite
    assert duck.startswith("FAIL") and "not one SELECT" in duck


@pytest.mark.skipif(NODE is None, reason="needs Node.js to hide it")
def test_without_node_the_node_checks_are_skipped_with_a_reason(copy, tmp_path):
    empty = tmp_path / "bin"
    empty.mkdir()
    r = _verify(copy, path=str(empty), skip=())  # the command line: skips do not fail verify
    assert r.returncode == 0, r.stdout + r.stderr
    skipped = [ln for ln in r.stdout.splitlines() if ln.startswith("skip")]
    node = [ln for ln in skipped if "Node.js" in ln]
    assert len(node) == 5 and all("Node.js (node) is not installed" in ln for ln in node)
    # every other engine is absent from this PATH too: each says which one and what to install
    others = {"R (R)": "Rscript", "(LibreOffice Calc)": "soffice", "(GNU PSPP)": "pspp", "(Chromium)": "chromedriver"}
    for form, program in others.items():
        lines = [ln for ln in skipped if form in ln]
        assert lines and all(program in ln for ln in lines), (form, skipped)
    assert "10 of 22 checks passed, 12 skipped" in r.stdout


@pytest.mark.skipif(NODE is None, reason="needs Node.js")
def test_failed_npm_install_skips_only_onnx_in_node_with_a_notice(copy, tmp_path, monkeypatch, capsys):
    bindir = tmp_path / "bin"
    bindir.mkdir()
    (bindir / "node").symlink_to(NODE)
    npm = bindir / "npm"
    npm.write_text("#!/bin/sh\necho 'npm ERR! registry unreachable' >&2\nexit 1\n")
    npm.chmod(0o755)
    out = _verify_here(copy, monkeypatch, env_extra={"POCKETFOREST_NODE_DIR": str(tmp_path / "nodedir")},
                       path=str(bindir))
    assert "installing onnxruntime-node@1 into" in capsys.readouterr().err
    skipped = [ln for ln in out.splitlines() if ln.startswith("skip") and "onnxruntime-node" in ln]
    assert len(skipped) == 3 and all("failed" in ln for ln in skipped)
    assert not [ln for ln in out.splitlines() if ln.startswith("FAIL")]
    assert _lines(out, "tree.js")[0].startswith("ok")


def test_extra_checks_are_run_and_counted(bundles, monkeypatch):
    seen = []

    def extra(bundle, manifest, ref):
        seen.append(len(ref))
        return [verify.Check("custom form", False, 1.0, 0.0, "always differs")]

    monkeypatch.setattr(verify, "EXTRA_CHECKS", [extra])
    checks = verify.verify_bundle(bundles["binary"], quiet=True, skip=SLOW)
    assert seen and checks[-1].form == "custom form" and not checks[-1].ok


def test_tampered_checksum_stops_before_running_anything(copy, monkeypatch):
    with open(copy / "equation.js", "a", encoding="utf-8") as fh:
        fh.write("\n// edited\n")
    out = _verify_here(copy, monkeypatch)
    assert out.splitlines() == ["FAIL  checksums  equation.js altered"]


@pytest.mark.skipif(not ENGINES_HERE, reason="needs R, LibreOffice, GNU PSPP, Chromium and chromedriver")
def test_wrong_collaborator_forms_fail_even_with_matching_checksums(copy):
    """Each engine's check can fail: a changed coefficient in equation.R, equation.sps and the
    workbook, a changed leaf in tree.R, a calculator whose tree answers wrongly, all re-signed."""
    from openpyxl import load_workbook
    _edit(copy, "equation.R", lambda t: t.replace("  COEFFICIENTS <- c(\n    ", "  COEFFICIENTS <- c(\n    1e-3 + ", 1))
    _edit(copy, "tree.R", lambda t: t.replace("    LEAVES[k]", "    LEAVES[k] * 1.001"))
    _edit(copy, "equation.sps", lambda t: t.replace("COMPUTE pred_equation = #eta1.", "COMPUTE pred_equation = #eta1 + 1e-3."))
    _edit(copy, "calculator.html", lambda t: t.replace('showModel("pf-tree", tree.predict(r.values));',
                                                       'showModel("pf-tree", tree.predict(r.values) + 1e-3);'))
    wb = load_workbook(copy / "equation.xlsx")
    wb["coefficients"]["C2"].value = wb["coefficients"]["C2"].value + 1e-3     # the intercept
    wb.save(copy / "equation.xlsx")
    _resign(copy, "equation.xlsx")
    r = _verify(copy, skip=("node",))
    assert r.returncode == 1, r.stdout
    for form in ("equation.R (R)", "tree.R (R)", "equation.sps (GNU PSPP)", "equation.xlsx (LibreOffice Calc)",
                 "calculator.html tree (Chromium)"):
        assert _lines(r.stdout, form)[0].startswith("FAIL"), (form, r.stdout)
    for form in ("equation.txt one-cell formulas (LibreOffice Calc)", "calculator.html equation (Chromium)"):
        assert _lines(r.stdout, form)[0].startswith("ok"), (form, r.stdout)


def test_reference_rows_spell_missing_values_as_every_missing_text(bundles):
    """reference.csv's closing rows hold intake's missing-value texts in every input cell, and
    verify types them as missing (their reference predictions are the all-missing row's)."""
    from pocketforest.intake.values import MISSING_TOKENS
    from pocketforest.scoring.bundle_io import read_manifest
    bundle = bundles["regression"]
    m = read_manifest(bundle)
    text = verify.read_reference_text(bundle, m)
    names = [f["name"] for f in m["features"]]
    spelled = text[names].apply(lambda col: col.str.strip().isin(MISSING_TOKENS - {""})).all(axis=1)
    assert set(text.loc[spelled, names[0]].str.strip()) == MISSING_TOKENS - {""}
    ref = verify.read_reference(bundle, m, text)
    blank = ref[(text[names] == "").all(axis=1)]
    assert len(blank) == 1
    for model in ("forest", "tree", "equation"):
        assert (ref.loc[spelled, f"pred_{model}"] == blank[f"pred_{model}"].iloc[0]).all()


def test_a_printer_whose_missing_texts_drift_fails_verify(tmp_path, monkeypatch):
    """Printers that drop 'NA' and 'null' from their list of missing-value texts write forms that
    verify refuses, though every checksum matches and every ONNX model passes."""
    from conftest import synthetic_table
    from pocketforest.export import jscode, pycode, sql
    from pocketforest.intake import prepare
    from pocketforest.intake.values import MISSING_TOKENS
    from pocketforest.pipeline import Settings, distill
    r = distill(prepare(synthetic_table(n=300, seed=9), "y", source="drift.csv"),
                Settings(trees=20, seed=1, quiet=True, bootstrap=50, nested_repeats=0))
    for module in (pycode, jscode, sql):
        monkeypatch.setattr(module, "MISSING_TOKENS", MISSING_TOKENS - {"NA", "null"})
    checks = verify.verify_bundle(r.write(tmp_path / "drifted"), quiet=True)
    failed = sorted(c.form for c in checks if not c.ok)
    assert all(c.ok for c in checks if "onnx" in c.form or c.form == "checksums")
    for form in ("equation.py", "tree.py") + (("equation.js", "tree.js") if shutil.which("node") else ()):
        assert any(f.startswith(form) for f in failed), (form, failed)
    assert any(f.startswith("equation.sql (SQLite)") for f in failed), failed
