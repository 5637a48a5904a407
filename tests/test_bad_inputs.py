"""The bad-input corpus: every malformed or hostile input gets one `error:` line and exit 2.

Contract (CONTRACT.md, "Exit codes"): bad input or usage → one line starting `error:` on stderr
that names the file/column/value, exit 2, no traceback, nothing half-written left behind. Where
continuing is right (an empty feature column, unseen categories, values beyond the training
range, a byte-order mark) the run succeeds and says so with a `warning:` line or a flag column.

Files live in tests/bad_inputs/ (see its README); inputs that need odd bytes (latin-1, BOM,
truncated Parquet, damaged bundles) or are copies of the valid table in another spelling
(semicolons and decimal commas) are built here. All cases run once, in parallel, in a module
fixture; each case has its own working folder so leftovers can be checked.
"""
from __future__ import annotations

import shutil
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import pandas as pd
import pytest

from conftest import run_cli

CORPUS = Path(__file__).parent / "bad_inputs"
TREES = ["--trees", "10", "--nested-repeats", "0", "-q"]


def _distill(data, *extra: str, target: str = "y") -> list[str]:
    return ["distill", str(data), "--target", target, *TREES, *extra]


# case id -> (argument builder(ctx) -> argv with "{OUT}" for the output path, expected exit code)
def _cases(ctx: dict) -> dict[str, tuple[list[str], int]]:
    c, b = CORPUS, ctx["bundle"]
    out = "{OUT}"
    score = lambda data, *x, bundle=b: (["score", str(bundle), str(data), "--model", "forest", "--out", out, *x], 2)  # noqa: E731
    cases = {
        # distill: the data file
        "empty file": (_distill(c / "empty.csv", "--out", out), 2),
        "header only": (_distill(c / "header_only.csv", "--out", out), 2),
        "one row": (_distill(c / "one_row.csv", "--out", out), 2),
        "too few rows": (_distill(c / "too_few_rows.csv", "--out", out), 2),
        "all-missing target": (_distill(c / "all_missing_target.csv", "--out", out), 2),
        "constant target": (_distill(c / "constant_target.csv", "--out", out), 2),
        "single class": (_distill(c / "single_class.csv", "--out", out), 2),
        "class with one row": (_distill(c / "class_with_one_row.csv", "--out", out), 2),
        "text in numeric column": (_distill(c / "text_in_numeric.csv", "--out", out), 2),
        "inf value": (_distill(c / "inf_value.csv", "--out", out), 2),
        "duplicate headers": (_distill(c / "duplicate_headers.csv", "--out", out), 2),
        "unnamed column": (_distill(c / "unnamed_columns.csv", "--out", out), 2),
        "mixed delimiters": (_distill(c / "mixed_delimiters.csv", "--out", out), 2),
        "semicolons in a .csv": (_distill(c / "semicolon_separated.csv", "--out", out), 2),
        "decimal commas without --decimal-comma": (_distill(ctx["comma_tsv"], "--out", out), 2),
        "thousands separators in a number column": (_distill(c / "thousands_separators.csv", "--out", out), 2),
        "--decimal-comma on a Parquet file": (_distill(ctx["parquet"], "--out", out, "--decimal-comma"), 2),
        "ragged row": (_distill(c / "ragged_rows.csv", "--out", out), 2),
        "target is a row id": (_distill(c / "target_is_id.csv", "--out", out, target="id"), 2),
        "huge category count": (_distill(c / "huge_category_count.csv", "--out", out), 2),
        "only the target column": (_distill(c / "only_target.csv", "--out", out), 2),
        "wrong extension": (_distill(c / "wrong_extension.xlsx", "--out", out), 2),
        "latin-1 bytes": (_distill(ctx["latin1"], "--out", out), 2),
        "truncated parquet": (_distill(ctx["truncated"], "--out", out), 2),
        "directory as data": (_distill(ctx["folder"], "--out", out), 2),
        "nonexistent file": (_distill(c / "no_such_file.csv", "--out", out), 2),
        "target not a column": (_distill(c / "train_valid.csv", "--out", out, target="yield"), 2),
        # distill: options
        "split of two parts": (_distill(c / "train_valid.csv", "--out", out, "--split", "0.5,0.5"), 2),
        "split not numbers": (_distill(c / "train_valid.csv", "--out", out, "--split", "a,b,c"), 2),
        "split too thin": (_distill(c / "train_valid.csv", "--out", out, "--split", "0.98,0.01,0.01"), 2),
        "negative trees": (["distill", str(c / "train_valid.csv"), "--target", "y", "--trees", "-5", "--out", out], 2),
        "leaf size 0": (_distill(c / "train_valid.csv", "--out", out, "--leaf-size", "0"), 2),
        "nested repeats negative": (_distill(c / "train_valid.csv", "--out", out, "--nested-repeats", "-1"), 2),
        "max leaves 1": (_distill(c / "train_valid.csv", "--out", out, "--max-leaves", "1"), 2),
        "tree depth 0": (_distill(c / "train_valid.csv", "--out", out, "--tree-depth", "0"), 2),
        "tree leaves 1": (_distill(c / "train_valid.csv", "--out", out, "--tree-leaves", "1"), 2),
        "tree margin above 1": (_distill(c / "train_valid.csv", "--out", out, "--tree-margin", "3"), 2),
        "unknown option": (_distill(c / "train_valid.csv", "--out", out, "--colour-me", "red"), 2),
        "unknown command": (["fit", str(c / "train_valid.csv")], 2),
        # score
        "score: column missing": score(c / "score_missing_column.csv"),
        "score: text in numeric": score(c / "score_text_in_numeric.csv"),
        "score: header only": score(c / "score_header_only.csv"),
        "score: empty file": score(c / "empty.csv"),
        "score: directory as data": score(ctx["folder"]),
        "score: truncated parquet": score(ctx["truncated"]),
        "score: unknown model": (["score", str(b), str(c / "score_far_outside.csv"), "--model", "boosted", "--out", out], 2),
        "score: output folder missing": (["score", str(b), str(c / "score_far_outside.csv"), "--model", "forest",
                                          "--out", "{DIR}/no/such/folder/p.csv"], 2),
        "score: output type": (["score", str(b), str(c / "score_far_outside.csv"), "--model", "forest", "--out", "{DIR}/p.xlsx"], 2),
        "score: --keep unknown column": score(c / "score_far_outside.csv", "--keep", "row_id"),
        "score: decimal commas without --decimal-comma": score(ctx["comma_csv"]),
        "score: bundle missing forest.onnx": score(c / "score_far_outside.csv", bundle=ctx["no_forest"]),
        "score: bundle with altered forest.onnx": score(c / "score_far_outside.csv", bundle=ctx["altered_forest"]),
        "score: manifest not JSON": score(c / "score_far_outside.csv", bundle=ctx["bad_manifest"]),
        "score: no bundle there": score(c / "score_far_outside.csv", bundle=ctx["dir"] / "no_bundle_here"),
        # verify
        "verify: folder is not a bundle": (["verify", str(ctx["folder"])], 2),
        "verify: manifest not JSON": (["verify", str(ctx["bad_manifest"])], 2),
        "verify: bundle does not exist": (["verify", str(ctx["dir"] / "no_bundle_here")], 2),
        # compare
        "compare: target column missing": (["compare", str(b), str(c / "score_missing_column.csv")], 2),
        "compare: empty file": (["compare", str(b), str(c / "empty.csv")], 2),
        "compare: header only": (["compare", str(b), str(c / "header_only.csv")], 2),
        "compare: text in numeric column": (["compare", str(b), str(c / "text_in_numeric.csv")], 2),
        "compare: all-missing target": (["compare", str(b), str(c / "all_missing_target.csv")], 2),
        "compare: text target for a regression bundle": (["compare", str(b), str(c / "class_with_one_row.csv")], 2),
        "compare: wrong extension": (["compare", str(b), str(c / "wrong_extension.xlsx")], 2),
        "compare: directory as data": (["compare", str(b), str(ctx["folder"])], 2),
        "compare: altered forest.onnx": (["compare", str(ctx["altered_forest"]), str(c / "train_valid.csv")], 2),
        "compare: no bundle there": (["compare", str(ctx["dir"] / "no_bundle_here"), str(c / "train_valid.csv")], 2),
        "compare: --max-loss not a number": (["compare", str(b), str(c / "train_valid.csv"), "--max-loss", "abc"], 2),
    }
    return cases


@pytest.fixture(scope="module")
def corpus(tmp_path_factory) -> dict:
    base = tmp_path_factory.mktemp("bad_inputs")
    bundle = base / "valid_bundle"
    made = run_cli("distill", str(CORPUS / "train_valid.csv"), "--target", "y", *TREES, "--out", str(bundle))
    assert made.returncode == 0, made.stderr

    gen = base / "generated"
    gen.mkdir()
    valid = pd.read_csv(CORPUS / "train_valid.csv")
    text = (CORPUS / "train_valid.csv").read_text(encoding="utf-8")
    # latin-1: 'é' written as the single byte 0xE9, which is not valid UTF-8
    latin = valid.copy()
    latin["colour"] = latin["colour"].str.replace("red", "rouge-clair\u00e9", regex=False)
    (gen / "latin1.csv").write_bytes(latin.to_csv(index=False).encode("latin-1"))
    (gen / "bom.csv").write_bytes(b"\xef\xbb\xbf" + text.encode("utf-8"))
    # saved where the comma is the decimal mark: semicolons in a .csv, 6,8 in both
    valid.to_csv(gen / "decimal_comma.csv", sep=";", decimal=",", index=False)
    valid.to_csv(gen / "decimal_comma.tsv", sep="\t", decimal=",", index=False)
    valid.to_parquet(gen / "whole.parquet")
    whole = (gen / "whole.parquet").read_bytes()
    (gen / "truncated.parquet").write_bytes(whole[: len(whole) // 2])
    (gen / "folder.csv").mkdir()

    def damaged(name: str, how) -> Path:
        d = gen / name
        shutil.copytree(bundle, d)
        how(d)
        return d

    ctx = {
        "dir": base, "bundle": bundle, "latin1": gen / "latin1.csv", "bom": gen / "bom.csv",
        "comma_csv": gen / "decimal_comma.csv", "comma_tsv": gen / "decimal_comma.tsv", "parquet": gen / "whole.parquet",
        "truncated": gen / "truncated.parquet", "folder": gen / "folder.csv",
        "no_forest": damaged("no_forest", lambda d: (d / "forest.onnx").unlink()),
        "altered_forest": damaged("altered_forest", lambda d: (d / "forest.onnx").write_bytes((d / "forest.onnx").read_bytes() + b"\0")),
        "altered_text": damaged("altered_text", lambda d: (d / "equation.txt").write_text("y = 42\n")),
        "missing_tree": damaged("missing_tree", lambda d: (d / "tree.onnx").unlink()),
        "bad_manifest": damaged("bad_manifest", lambda d: (d / "manifest.json").write_text("{not json")),
    }
    cases = _cases(ctx)
    ok_cases = {
        "all-missing feature column (dropped, warned)": (["distill", str(CORPUS / "all_missing_feature.csv"), "--target", "y",
                                                          "--trees", "10", "--out", "{OUT}"], 0),
        "byte-order mark (works)": (["distill", str(ctx["bom"]), "--target", "y", "--trees", "10", "--out", "{OUT}"], 0),
        "decimal commas with --decimal-comma (works)": (_distill(ctx["comma_csv"], "--out", "{OUT}", "--decimal-comma"), 0),
        "score: decimal commas with --decimal-comma (works)": (["score", str(bundle), str(ctx["comma_tsv"]), "--model",
                                                                "equation", "--out", "{OUT}", "--decimal-comma"], 0),
        "score: unseen categories (flagged, warned)": (["score", str(bundle), str(CORPUS / "score_unseen_category.csv"),
                                                        "--model", "tree", "--out", "{OUT}"], 0),
        "score: far outside the training range (flagged, warned)": (["score", str(bundle), str(CORPUS / "score_far_outside.csv"),
                                                                     "--model", "equation", "--out", "{OUT}"], 0),
        "verify: altered equation.txt (a discrepancy, exit 1)": (["verify", str(ctx["altered_text"])], 1),
        "verify: missing tree.onnx (a discrepancy, exit 1)": (["verify", str(ctx["missing_tree"])], 1),
    }
    everything = {**cases, **ok_cases}

    def run(item):
        name, (argv, _) = item
        work = base / "runs" / name.replace(" ", "_").replace(":", "").replace("/", "_")
        work.mkdir(parents=True)
        out = work / ("out.csv" if argv[0] == "score" else "out")
        args = [a.replace("{OUT}", str(out)).replace("{DIR}", str(work)) for a in argv]
        return name, (run_cli(*args, cwd=work), work, out)

    with ThreadPoolExecutor(max_workers=4) as pool:
        results = dict(pool.map(run, everything.items()))
    return {"ctx": ctx, "expected": {k: v[1] for k, v in everything.items()}, "results": results,
            "errors": sorted(cases)}


def _leftovers(work: Path) -> list[str]:
    return sorted(p.name for p in work.rglob(".*"))


ERROR_CASES = [name for name in _cases({k: Path("/x") for k in (
    "bundle", "latin1", "truncated", "folder", "no_forest", "altered_forest", "bad_manifest", "dir",
    "comma_csv", "comma_tsv", "parquet")})]


def test_corpus_is_large_enough():
    files = [p for p in CORPUS.iterdir() if p.is_file() and p.name != "README.md"]
    assert len(ERROR_CASES) >= 25 and len(files) >= 20


@pytest.mark.parametrize("name", ERROR_CASES)
def test_bad_input_is_one_error_line_exit_2_nothing_written(corpus, name):
    proc, work, out = corpus["results"][name]
    assert proc.returncode == 2, (name, proc.returncode, proc.stderr[-2000:])
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    errors = [ln for ln in lines if ln.startswith("error: ")]
    assert len(errors) == 1, proc.stderr
    assert "Traceback" not in proc.stderr
    assert len(errors[0]) > 25  # says what is wrong and what to do, not just "error"
    assert proc.stdout == ""
    assert not out.exists(), f"{name} left {out} behind"
    assert _leftovers(work) == [], f"{name} left temporary files behind"
    assert not [p for p in work.iterdir()], f"{name} wrote into its working folder"


def test_existing_bundle_is_not_overwritten_without_force(corpus, tmp_path):
    bundle = corpus["ctx"]["bundle"]
    before = (bundle / "manifest.json").read_bytes()
    proc = run_cli(*_distill(CORPUS / "train_valid.csv", "--out", str(bundle)))
    assert proc.returncode == 2 and proc.stderr.startswith("error: ") and "--force" in proc.stderr
    assert (bundle / "manifest.json").read_bytes() == before


def _ok(corpus, name: str, code: int = 0):
    proc, work, out = corpus["results"][name]
    assert proc.returncode == code, (name, proc.stderr[-2000:])
    assert "Traceback" not in proc.stderr and "error:" not in proc.stderr
    assert _leftovers(work) == []
    return proc, out


def test_all_missing_feature_is_dropped_with_a_warning(corpus):
    proc, out = _ok(corpus, "all-missing feature column (dropped, warned)")
    assert any(ln.startswith("warning:") and "'blank'" in ln for ln in proc.stderr.splitlines())
    assert (out / "manifest.json").is_file()
    assert "blank" not in [f["name"] for f in pd.read_json(out / "manifest.json", typ="series")["features"]]


def test_byte_order_mark_works(corpus):
    proc, out = _ok(corpus, "byte-order mark (works)")
    names = [f["name"] for f in pd.read_json(out / "manifest.json", typ="series")["features"]]
    assert names[0] == "x1"  # not '\ufeffx1'


def test_a_decimal_comma_file_gives_the_bundle_of_the_decimal_point_file(corpus):
    """The same rows saved semicolon-separated with 6,8 numbers, read with --decimal-comma, give
    the valid bundle's figures exactly (same seed and options), and score like it."""
    import json
    _, out = _ok(corpus, "decimal commas with --decimal-comma (works)")
    got = json.loads((out / "manifest.json").read_text())
    want = json.loads((corpus["ctx"]["bundle"] / "manifest.json").read_text())
    assert got["features"] == want["features"]
    assert got["evaluation"] == want["evaluation"] and got["equation"]["coefficients"] == want["equation"]["coefficients"]
    _, scored = _ok(corpus, "score: decimal commas with --decimal-comma (works)")
    assert len(pd.read_csv(scored)) == len(pd.read_csv(CORPUS / "train_valid.csv"))


@pytest.mark.parametrize("name,rows", [("score: unseen categories (flagged, warned)", [1, 2]),
                                       ("score: far outside the training range (flagged, warned)", [0, 4])])
def test_unseen_and_out_of_range_rows_are_flagged_not_refused(corpus, name, rows):
    proc, out = _ok(corpus, name)
    warned = [ln for ln in proc.stderr.splitlines() if ln.startswith("warning:")]
    assert any("outside the training" in ln or "never seen in training" in ln for ln in warned), proc.stderr
    pred = pd.read_csv(out)
    assert len(pred) == 60 and pred.iloc[:, 0].notna().all()
    flagged = sorted(pred.index[pred["inputs_outside_training"] > 0])
    assert flagged == rows


@pytest.mark.parametrize("name,file", [("verify: altered equation.txt (a discrepancy, exit 1)", "equation.txt"),
                                       ("verify: missing tree.onnx (a discrepancy, exit 1)", "tree.onnx")])
def test_verify_reports_a_damaged_bundle_as_a_discrepancy(corpus, name, file):
    proc, _ = _ok(corpus, name, code=1)
    assert any(ln.startswith("FAIL") and file in ln for ln in proc.stdout.splitlines()), proc.stdout
