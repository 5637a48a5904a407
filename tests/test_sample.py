"""`distill --sample`: a seeded stratified sample read through DuckDB keeps every level, and its
design and self-check figures are the same for the same seed."""
from __future__ import annotations

import json
from pathlib import Path

import jsonschema
import numpy as np
import pandas as pd
import pytest

from pocketforest.errors import InputError
from pocketforest.intake import prepare
from pocketforest.pipeline import Settings, distill
from pocketforest.sample import LEVEL_FLOOR, draw, self_check

from conftest import ROOT, run_cli, synthetic_table

SCHEMA = json.loads((ROOT / "src/pocketforest/schema/manifest.schema.json").read_text())


@pytest.fixture(scope="module")
def folder(tmp_path_factory) -> Path:
    """6,000 invented rows over three Parquet files (and the same rows as one CSV), with a colour
    seen 3 times, a site seen once and a class seen 4 times: far below a 600-row sample's share."""
    root = tmp_path_factory.mktemp("sample")
    df = synthetic_table(n=6000, seed=9, task="classification", n_classes=3)
    df.loc[[17, 3000, 5999], "colour"] = "violet"
    df.loc[[42], "site"] = "east"
    df.loc[[5, 6, 7, 4000], "y"] = "rare"
    (root / "parts").mkdir()
    for i in range(3):
        df.iloc[i * 2000:(i + 1) * 2000].to_parquet(root / "parts" / f"p{i}.parquet", index=False)
    df.to_csv(root / "all.csv", index=False)
    df.to_csv(root / "all_decimal_comma.csv", index=False, sep=";", decimal=",")
    return root


def test_every_rare_level_and_class_is_in_the_sample(folder):
    for source in (folder / "parts", folder / "all.csv"):
        d = draw(str(source), "y", 600, seed=1)
        s = d.sample
        assert len(s) == 600 and len(d.check) == 600
        assert (s["colour"] == "violet").sum() == 3 and (s["site"] == "east").sum() == 1
        assert (s["y"] == "rare").sum() == 4
        topped = {(r["column"], r["level"]): r["sample_rows"] for r in d.design["levels_topped_up"]}
        assert topped[("colour", "violet")] == 3 and topped[("y", "rare")] == 4
        assert d.design["rows_in_data"] == 6000 and d.design["strata"]["kind"] == "classes"
        # proportional allocation: each common class within one row of its share of the rest
        for c in d.design["strata"]["counts"]:
            if c["stratum"] != "rare":
                assert abs(c["sample_rows"] - c["rows_in_data"] * (600 - 4) / (6000 - 4)) <= LEVEL_FLOOR
        # the check rows are rows the sample left out: no row of the check is in the sample
        key = ["x1", "x2", "noise"]
        assert not set(map(tuple, s[key].to_numpy())) & set(map(tuple, d.check[key].to_numpy()))
    # a numeric outcome is stratified on its quantile bins
    d = draw(str(folder / "parts"), "x1", 500, seed=1)
    assert d.design["strata"]["kind"] == "quantile bins" and len(d.sample) == 500
    bins = [c["sample_rows"] for c in d.design["strata"]["counts"]]
    assert max(bins) - min(bins) <= 1 + 2 * LEVEL_FLOOR  # equal-sized bins up to the rounding and top-ups


def test_sample_and_self_check_are_reproducible_with_the_seed(folder):
    def run(seed):
        d = draw(str(folder / "parts"), "y", 600, seed=seed)
        table = prepare(d.sample, "y", source="parts")
        r = distill(table, Settings(trees=20, seed=seed, quiet=True, bootstrap=200, nested_repeats=0))
        return d, self_check(r, d.check, "parts")

    (d1, c1), (d2, c2), (d3, _) = run(4), run(4), run(5)
    pd.testing.assert_frame_equal(d1.sample, d2.sample)
    pd.testing.assert_frame_equal(d1.check, d2.check)
    # compared as JSON text: an undefined metric is NaN, which is never == itself
    assert d1.design == d2.design and json.dumps(c1, sort_keys=True) == json.dumps(c2, sort_keys=True)
    assert not d1.sample.equals(d3.sample)
    assert c1["evaluation"]["n"] == 600 - c1["rows_unknown_class"]
    assert c1["loss"]["tree"]["ci_low"] <= c1["loss"]["tree"]["value"] <= c1["loss"]["tree"]["ci_high"]


def test_a_decimal_comma_csv_gives_the_same_sample(folder):
    """The same rows saved semicolon-separated with 6,8 numbers and drawn with decimal_comma: the
    DuckDB view rewrites the numbers as intake does, so the strata, the seeded order (a digest of
    the cells) and the sample are those of the plain file."""
    assert "," in (folder / "all_decimal_comma.csv").read_text().splitlines()[1]
    plain = draw(str(folder / "all.csv"), "y", 300, seed=2)
    comma = draw(str(folder / "all_decimal_comma.csv"), "y", 300, seed=2, decimal_comma=True)
    pd.testing.assert_frame_equal(comma.sample, plain.sample)
    pd.testing.assert_frame_equal(comma.check, plain.check)
    assert comma.design == plain.design


def test_cli_records_the_design_and_the_check_in_manifest_and_report(folder, tmp_path):
    out = tmp_path / "b"
    r = run_cli("distill", str(folder / "parts" / "*.parquet"), "--target", "y", "--sample", "600", "--trees", "15", "--nested-repeats", "0",
                "--out", str(out), "-q")
    assert r.returncode == 0, r.stderr
    m = json.loads((out / "manifest.json").read_text())
    jsonschema.Draft202012Validator(SCHEMA).validate(m)
    assert m["sample"]["rows_in_data"] == 6000 and m["sample"]["sample_rows"] == 600
    assert m["sample"]["self_check"]["evaluation"]["n"] > 500
    colour = next(f for f in m["features"] if f["name"] == "colour")
    assert "violet" in colour["categories"] and "rare" in m["classes"]
    assert "sample:" in r.stdout and "rows left out" in r.stdout
    page = (out / "report.html").read_text()
    assert "seeded sample of 600" in page and "rows the sample left out" in page


def test_bad_sample_requests_fail_with_one_line(folder, tmp_path):
    r = run_cli("distill", str(folder / "parts"), "--target", "y", "--sample", "0", "--out", str(tmp_path / "b"))
    assert r.returncode == 2 and r.stderr.startswith("error:") and "--sample 0" in r.stderr
    with pytest.raises(InputError, match="no target column 'nope'"):
        draw(str(folder / "parts"), "nope", 100, seed=0)
    with pytest.raises(InputError, match="no file matches"):
        draw(str(folder / "parts" / "*.csv"), "y", 100, seed=0)
    # a row with too many fields: DuckDB finds it; the user gets one line, not a traceback
    ragged = tmp_path / "ragged.csv"
    ragged.write_text("a,b,y\n" + "".join(f"{i},{i},{i}\n" for i in range(60)) + "1,2,3,4\n")
    r = run_cli("distill", str(ragged), "--target", "y", "--sample", "10", "--out", str(tmp_path / "b"))
    assert r.returncode == 2 and r.stderr.startswith("error:") and "Line: 62" in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "b").exists()
