"""A property-based fuzz test of the whole path: distill -> verify -> score, on invented tables.

Hypothesis (https://hypothesis.readthedocs.io) draws the *structure* of a small table — column
names with quotes, spaces and non-ASCII letters, column kinds, missing-value patterns spelled with
every missing-value text, rare and (when scoring) unseen categories, odd outcomes — and a seed from
which numpy draws the cells. The properties, from the command-line contract:

* every run that fails prints exactly one line, starting ``error:``, exits 2 and leaves nothing
  behind;
* every bundle that ``distill`` writes passes ``verify``;
* ``score`` of new rows (with unseen categories, values far outside the training range, now and
  then a missing column) either succeeds with one prediction per row or fails as above, and
  ``compare`` on the same rows labelled succeeds or fails as above.

The commands run through the command line's own entry point (``pocketforest.cli.main``) in this
process, so each example costs a fit and a verify, not interpreter start-ups.

Profiles (environment variable ``POCKETFOREST_FUZZ``): ``ci`` (default) — the same 25 examples on
every run (derandomised, so CI never fails on a draw it has not seen before), verify without the
engines that start a heavy program per bundle, a minute or two; ``local`` — 300 fresh examples
each run, LibreOffice and Chromium included, with failures kept in ``.hypothesis/`` and shrunk to
a small case, for a long run before a release (R and GNU PSPP run in both):
``POCKETFOREST_FUZZ=local .venv/bin/python -m pytest tests/test_fuzz.py --hypothesis-show-statistics``.
"""
from __future__ import annotations

import contextlib
import csv
import io
import json
import math
import os
import tempfile
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from pocketforest.cli import main
from pocketforest.intake import MISSING_TOKENS

settings.register_profile("ci", max_examples=25, deadline=None, derandomize=True, database=None,
                          suppress_health_check=list(HealthCheck), print_blob=True)
settings.register_profile("local", max_examples=300, deadline=None,
                          suppress_health_check=list(HealthCheck), print_blob=True)
PROFILE = os.environ.get("POCKETFOREST_FUZZ", "ci")
settings.load_profile(PROFILE)
#: verify's engines left out: LibreOffice and Chromium start a heavy program per bundle (up to a
#: minute per example here), so only the local profile runs them. R and PSPP add about a second.
SKIPPED_ENGINES = ("libreoffice", "chromium") if PROFILE == "ci" else ()

# Letters a column name or a category may hold: quotes, spaces, separators, non-ASCII.
ODD = list("abxyzAB019") + [" ", "'", '"', ",", ";", "-", "_", ".", "#", "(", ")", "é", "ß", "Ø", "中", "ж", "\\"]
TOKENS = sorted(MISSING_TOKENS)


@dataclass
class Column:
    name: str
    kind: str                      # number, integer, category, flag, constant, mostly_missing
    scale: float = 1.0
    levels: list[str] = field(default_factory=list)
    missing: float = 0.0


@dataclass
class Table:
    columns: list[Column]
    target: Column
    task: str                      # regression or classification
    rows: int
    seed: int
    new_rows: int
    huge: bool                     # one new row carries 1e30 in every number column
    options: tuple[str, ...] = ()  # extra distill options
    file: str = "csv"              # csv, tsv or parquet (text cells)
    drop_new: bool = False         # the new rows lack their first column (an error to report)


# mostly names with a visible character; now and then one of spaces only (an error to report)
names = st.one_of(st.text(alphabet=st.sampled_from(ODD), min_size=1, max_size=7).filter(str.strip),
                  st.text(alphabet=st.sampled_from(ODD), min_size=1, max_size=3))
levels = st.lists(st.text(alphabet=st.sampled_from(ODD), min_size=1, max_size=5), min_size=2, max_size=5,
                  unique=True)


@st.composite
def columns(draw, name: str) -> Column:
    kind = draw(st.sampled_from(["number", "number", "integer", "category", "category", "flag", "constant",
                                 "mostly_missing", "identifier", "stray_word"]))
    return Column(name, kind, scale=draw(st.sampled_from([1e-6, 1.0, 1e3, 1e9])),
                  levels=draw(levels) if kind == "category" else [],
                  missing=draw(st.sampled_from([0.0, 0.0, 0.05, 0.3])))


@st.composite
def tables(draw) -> Table:
    n_features = draw(st.integers(1, 4))
    all_names = draw(st.lists(names, min_size=n_features + 1, max_size=n_features + 1, unique=True))
    cols = [draw(columns(n)) for n in all_names[:-1]]
    task = draw(st.sampled_from(["regression", "classification"]))
    if task == "regression":
        target = Column(all_names[-1], draw(st.sampled_from(["number", "integer"])),
                        scale=draw(st.sampled_from([1.0, 1e5, 1e-3])), missing=draw(st.sampled_from([0.0, 0.05])))
    else:
        labels = draw(st.one_of(levels, st.just(["0", "1"]), st.just(["1", "2", "3"])))
        target = Column(all_names[-1], "category", levels=labels, missing=draw(st.sampled_from([0.0, 0.05])))
    rows = draw(st.sampled_from([20, 45, 60, 80, 100, 150]))
    return Table(cols, target, task, rows=rows, seed=draw(st.integers(0, 2**31 - 1)),
                 new_rows=draw(st.integers(1, 12)), huge=draw(st.booleans()),
                 options=draw(st.sampled_from([(), (), (), ("--task", task), ("--tree-depth", "2"),
                                               (f"--categorical={cols[0].name}",), ("--synthetic-rows", "50")])),
                 file=draw(st.sampled_from(["csv", "csv", "tsv", "parquet"])),
                 drop_new=draw(st.sampled_from([False, False, False, True])))


def _missing_text(rng: np.random.Generator) -> str:
    token = TOKENS[rng.integers(len(TOKENS))]
    return rng.choice(["", " ", "  "]) + token + rng.choice(["", " "]) if token else ""


def _cells(col: Column, n: int, rng: np.random.Generator, signal: np.ndarray, *, new: bool = False,
           huge: bool = False) -> list[str]:
    """The text of one column: numbers written as a CSV would hold them, categories with a rare
    level, missing values spelled as any missing-value text."""
    if col.kind == "number":
        values = [repr(float(v)) for v in (signal + rng.normal(0, 1, n)) * col.scale * (30 if new else 1)]
    elif col.kind == "integer":
        values = [str(int(v)) for v in rng.integers(-3, 40, n)]
    elif col.kind == "category":
        p = np.array([0.02] + [1.0] * (len(col.levels) - 1))   # the first level is rare
        values = list(rng.choice(col.levels, n, p=p / p.sum()))
        if new:
            values = [v if rng.uniform() > 0.3 else "never seen" for v in values]
    elif col.kind == "flag":
        values = list(rng.choice(["yes", "no"], n))
    elif col.kind == "constant":
        values = ["7"] * n
    elif col.kind == "identifier":
        values = [f"id{int(v)}" for v in rng.permutation(n)]
    elif col.kind == "stray_word":   # a number column with one word in it: an error to report
        values = [repr(float(v)) for v in rng.normal(0, 1, n)]
        values[rng.integers(n)] = "oops"
    else:   # mostly_missing
        values = [repr(float(v)) if rng.uniform() < 0.05 else "" for v in rng.normal(0, 1, n)]
    if huge and col.kind in ("number", "integer"):
        values[0] = "1e30"
    missing = rng.uniform(size=n) < col.missing
    return [_missing_text(rng) if m else v for v, m in zip(values, missing)]


def _target_cells(t: Table, rng: np.random.Generator, signal: np.ndarray) -> list[str]:
    col, n = t.target, len(signal)
    if t.task == "regression" and col.kind == "integer":   # counts
        cells = [str(int(v)) for v in rng.poisson(np.exp(1.0 + signal) * col.scale ** 0.25)]
    elif t.task == "regression":
        y = (2.0 * signal + rng.normal(0, 0.5, n)) * col.scale
        cells = [repr(float(v)) for v in y]
    else:
        k = len(col.levels)
        cut = np.quantile(signal + rng.normal(0, 0.5, n), np.linspace(0, 1, k + 1)[1:-1])
        cells = [col.levels[i] for i in np.searchsorted(cut, signal)]
        if n > 3:
            cells[rng.integers(n)] = col.levels[0]   # classes may be rare, never absent by design
    missing = rng.uniform(size=n) < col.missing
    return [_missing_text(rng) if m else v for v, m in zip(cells, missing)]


def _write(path: Path, header: list[str], cols: list[list[str]]) -> None:
    """CSV or TSV through the csv module (quoting as a spreadsheet would), Parquet as text
    columns through pyarrow."""
    if path.suffix == ".parquet":
        import pyarrow as pa
        import pyarrow.parquet as pq
        pq.write_table(pa.table({name: pa.array(col, pa.string()) for name, col in zip(header, cols)}), path)
        return
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, delimiter="\t" if path.suffix == ".tsv" else ",")
        w.writerow(header)
        w.writerows(zip(*cols))


def _run(*args: str) -> tuple[int, str, str]:
    """One command through the command line's entry point, its output captured. A Python
    warning would reach a user's terminal as stderr lines, so it is added to stderr here."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err), \
            warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        code = main(list(args))
    # Python's default filters hide these from a user; an unclosed file (ResourceWarning) is
    # counted all the same, since it is a leak in our code
    hidden = (DeprecationWarning, PendingDeprecationWarning, ImportWarning)
    shown = "".join(f"{w.filename}:{w.lineno}: {w.category.__name__}: {w.message}\n" for w in caught
                    if not issubclass(w.category, hidden))
    for w in caught:
        event(f"warning during {args[0]}: {w.category.__name__}: {str(w.message)[:50]} "
              f"({Path(w.filename).name}:{w.lineno})")
    return code, out.getvalue(), shown + err.getvalue()


def _assert_clean_failure(code: int, err: str, what: str) -> None:
    lines = err.strip("\n").split("\n")
    assert code == 2, f"{what}: exit {code}\n{err}"
    assert len(lines) == 1 and lines[0].startswith("error: "), f"{what}: not one error line:\n{err}"


@given(tables())
def test_every_failure_is_one_error_line_and_every_bundle_verifies(t: Table):
    rng = np.random.default_rng(t.seed)
    signal = rng.uniform(-1, 1, t.rows)
    with tempfile.TemporaryDirectory(prefix="pf-fuzz-") as tmp:
        base = Path(tmp)
        data, out = base / f"table.{t.file}", base / "bundle"
        header = [c.name for c in t.columns] + [t.target.name]
        _write(data, header, [_cells(c, t.rows, rng, signal) for c in t.columns] + [_target_cells(t, rng, signal)])
        code, _, err = _run("distill", str(data), f"--target={t.target.name}", "--out", str(out), "--trees", "5",
                            "--nested-repeats", "1", "--seed", str(t.seed % 1000), "-q", *t.options)
        event(f"distill exit {code}")
        if code != 0:
            _assert_clean_failure(code, err, "distill")
            event("distill error: " + err.replace(str(data), "DATA").strip()[7:70])
            assert sorted(p.name for p in base.iterdir()) == [data.name], "distill left files behind"
            return
        code, report, err = _run("verify", str(out), "-q", *(("--skip", *SKIPPED_ENGINES) if SKIPPED_ENGINES else ()))
        assert code == 0, f"the bundle does not verify:\n{report}\n{err}"
        manifest = json.loads((out / "manifest.json").read_text(encoding="utf-8"))
        task, classes = manifest["task"], manifest.get("classes") or []   # auto may differ from the draw

        new_signal = rng.uniform(-1, 1, t.new_rows)
        new = base / f"new.{t.file}"
        kept = t.columns[1:] if t.drop_new else t.columns
        new_cells = [_cells(c, t.new_rows, rng, new_signal, new=True, huge=t.huge) for c in kept]
        _write(new, [c.name for c in kept], new_cells)
        for model in ("forest", "tree", "equation"):
            scored = base / f"scored_{model}.csv"
            code, _, err = _run("score", str(out), str(new), "--model", model, "--out", str(scored), "-q")
            event(f"score exit {code}")
            if code != 0:
                _assert_clean_failure(code, err, f"score --model {model}")
                event("score error: " + err.replace(str(new), "DATA").strip()[7:70])
                assert not scored.exists()
                continue
            with open(scored, newline="", encoding="utf-8") as fh:
                rows = list(csv.DictReader(fh))
            assert len(rows) == t.new_rows
            # a prediction everywhere, or an empty one where the equation has no finite value (README)
            if task == "regression":
                values = [r["prediction"] for r in rows]
                assert all(v == "" or math.isfinite(float(v)) for v in values), values
            else:
                values = [r["label"] for r in rows]
                assert all(v == "" or v in classes for v in values), (values, classes)
            if model != "equation":
                assert all(v != "" for v in values), values

        # compare: the same new rows, labelled
        labelled = base / f"labelled.{t.file}"
        _write(labelled, [c.name for c in kept] + [t.target.name], new_cells + [_target_cells(t, rng, new_signal)])
        code, _, err = _run("compare", str(out), str(labelled), "--json")
        event(f"compare exit {code}")
        if code != 0:
            _assert_clean_failure(code, err, "compare")
            event("compare error: " + err.replace(str(labelled), "DATA").strip()[7:70])
