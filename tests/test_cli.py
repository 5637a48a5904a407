"""The command line: one `error:` line and exit 2 for bad input, nothing left behind."""
from __future__ import annotations

import pytest

from conftest import run_cli, synthetic_table


def _assert_clean_error(r, out, *words):
    assert r.returncode == 2, r.stderr
    lines = [ln for ln in r.stderr.splitlines() if ln.strip()]
    assert lines[-1].startswith("error:"), r.stderr
    assert "Traceback" not in r.stderr
    for w in words:
        assert w in lines[-1], (w, lines[-1])
    assert not out.exists()
    assert not [p for p in out.parent.iterdir() if p.name.startswith(".")]


@pytest.mark.parametrize("case", ["missing_file", "no_rows", "target_absent", "target_all_missing",
                                  "constant_target", "one_class", "text_in_numeric", "duplicate_columns",
                                  "too_few_rows"])
def test_bad_tables_get_one_error_line(tmp_path, case):
    df = synthetic_table(n=120, seed=3)
    src = tmp_path / "data.csv"
    target, words = "y", []
    if case == "missing_file":
        src = tmp_path / "nope.csv"
        words = ["nope.csv"]
    elif case == "no_rows":
        src.write_text("a,b,y\n")
    elif case == "target_absent":
        df.to_csv(src, index=False)
        target, words = "Y_", ["Y_", "y"]
    elif case == "target_all_missing":
        df["y"] = None
        df.to_csv(src, index=False)
    elif case == "constant_target":
        df["y"] = 3.0
        df.to_csv(src, index=False)
        words = ["y"]
    elif case == "one_class":
        df["y"] = "yes"
        df.to_csv(src, index=False)
    elif case == "text_in_numeric":
        df["x1"] = df["x1"].astype(object)
        df.loc[5, "x1"] = "oops"
        df.to_csv(src, index=False)
        words = ["x1", "oops"]
    elif case == "duplicate_columns":
        src.write_text("a,a,y\n1,2,3\n4,5,6\n")
        words = ["a"]
    elif case == "too_few_rows":
        df.head(25).to_csv(src, index=False)
    out = tmp_path / "bundle"
    r = run_cli("distill", str(src), "--target", target, "--out", str(out), "--trees", "10", "-q")
    _assert_clean_error(r, out, *words)


def test_bad_split_and_usage(tmp_path):
    src = tmp_path / "d.csv"
    synthetic_table(n=200).to_csv(src, index=False)
    out = tmp_path / "b"
    _assert_clean_error(run_cli("distill", str(src), "--target", "y", "--out", str(out), "--split", "1,x,1"), out, "--split")
    _assert_clean_error(run_cli("distill", str(src), "--out", str(out)), out, "--target")


def test_version_and_help():
    r = run_cli("--version")
    assert r.returncode == 0 and "pocketforest" in r.stdout
    for cmd in ("distill", "score", "verify", "demo"):
        h = run_cli(cmd, "--help")
        assert h.returncode == 0 and "usage" in h.stdout.lower()
