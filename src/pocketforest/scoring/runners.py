"""Run a bundle's exported forms where they will live: SQLite, DuckDB, a separate Python, Node.js.

Nothing from a bundle is imported or executed inside this process. The Python export runs in a
child interpreter in isolated mode without site-packages (``-I -S -B``), which also proves it
needs only the standard library; JavaScript runs in Node.js inside a fresh ``vm`` context; SQL
runs as exactly one ``SELECT`` in an in-memory database holding only the reference rows. Rows
travel as JSON (a missing value is ``null``).
"""
from __future__ import annotations

import json
import math
import os
import shutil
import sqlite3
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

from ..expr import sql_ident
from ..intake.values import MISSING_TOKENS

NODE_DIR_ENV = "POCKETFOREST_NODE_DIR"
ORT_NODE_PACKAGE = "onnxruntime-node@1"
SCRIPTS = Path(__file__).resolve().parent / "node"
TIMEOUT = 300

_PY_RUNNER = """
import importlib.util, json, sys
spec = importlib.util.spec_from_file_location("pocketforest_export", sys.argv[1])
module = importlib.util.module_from_spec(spec)
spec.loader.exec_module(module)
rows = json.load(sys.stdin)
json.dump([module.predict(row) for row in rows], sys.stdout)
"""


class RunnerUnavailable(Exception):
    """The runtime a check needs is not on this machine (the check is skipped, with this reason)."""


class RunnerFailed(Exception):
    """The exported form did not run (the check fails, with this reason)."""


# ---------------------------------------------------------------- rows in and out

def json_rows(frame: pd.DataFrame, features: list[dict]) -> list[dict]:
    """Rows keyed by column name: numbers as floats, categories as text, missing as None."""
    cols = {}
    for f in features:
        s = frame[f["name"]]
        if f["kind"] == "numeric":
            v = pd.to_numeric(s, errors="coerce").to_numpy(dtype=float)
            cols[f["name"]] = [None if math.isnan(x) else float(x) for x in v]
        else:
            cols[f["name"]] = [None if (x is None or (isinstance(x, float) and math.isnan(x)) or x == "")
                               else str(x) for x in s.tolist()]
    return [{name: cols[name][i] for name in cols} for i in range(len(frame))]


def text_rows(text: pd.DataFrame, typed: pd.DataFrame, features: list[dict], *,
              numbers_as_text: bool = True) -> list[dict]:
    """Rows as :func:`json_rows` gives them, except that a cell written as a missing-value text
    (``NA``, `` null ``, ...) is passed as that text, for the form to recognise (numeric cells
    only when ``numbers_as_text``)."""
    rows = json_rows(typed, features)
    for f in features:
        if f["kind"] == "numeric" and not numbers_as_text:
            continue
        for row, cell in zip(rows, text[f["name"]].tolist()):
            if cell and cell.strip() in MISSING_TOKENS:
                row[f["name"]] = cell
    return rows


def collect(results: list, task: str, classes: list[str] | None) -> dict[str, np.ndarray]:
    """predict(row) results (numbers or {label, probabilities}) as the arrays verify compares."""
    if task == "regression":
        return {"prediction": np.array([np.nan if v is None else float(v) for v in results])}
    labels = np.array(["" if r["label"] is None else str(r["label"]) for r in results])
    probs = np.array([[np.nan if r["probabilities"].get(c) is None else float(r["probabilities"][c])
                       for c in classes] for r in results])
    return {"label": labels, "probabilities": probs}


def _run(cmd: list[str], payload: str, env: dict | None = None) -> str:
    with tempfile.TemporaryDirectory(prefix="pf-run-") as cwd:
        try:
            proc = subprocess.run(cmd, input=payload, capture_output=True, text=True, cwd=cwd,
                                  timeout=TIMEOUT, env=env, encoding="utf-8")
        except subprocess.TimeoutExpired:
            raise RunnerFailed(f"{Path(cmd[0]).name} did not finish within {TIMEOUT} s") from None
    if proc.returncode != 0:
        # the message, not Node.js's stack frames ("    at ...") that follow it
        tail = [ln for ln in (proc.stderr or "").strip().splitlines() if not ln.lstrip().startswith("at ")][-3:]
        raise RunnerFailed(f"{Path(cmd[0]).name} exited with {proc.returncode}: {' | '.join(tail)}")
    return proc.stdout


# ---------------------------------------------------------------- Python and JavaScript exports

def run_python_export(path: Path, rows: list[dict]) -> list:
    out = _run([sys.executable, "-I", "-S", "-B", "-c", _PY_RUNNER, str(Path(path).resolve())], json.dumps(rows))
    return json.loads(out)


def node_executable() -> str:
    node = shutil.which("node")
    if node is None:
        raise RunnerUnavailable("Node.js (node) is not installed: install it to check the JavaScript forms")
    return node


def run_js_export(path: Path, rows: list[dict]) -> list:
    node = node_executable()
    out = _run([node, str(SCRIPTS / "run_exports.js"), str(Path(path).resolve())], json.dumps(rows))
    return json.loads(out)


# ---------------------------------------------------------------- ONNX in Node.js

def node_modules_dir() -> Path:
    """Where onnxruntime-node is installed: $POCKETFOREST_NODE_DIR or ~/.cache/pocketforest/node."""
    base = os.environ.get(NODE_DIR_ENV) or str(Path.home() / ".cache" / "pocketforest" / "node")
    return Path(base)


def ensure_onnxruntime_node(quiet: bool = False) -> Path:
    """The folder holding node_modules/onnxruntime-node, installing it with npm on first use.

    ``npm install --ignore-scripts``: the package ships its CPU binaries, so no install script
    (and no download outside the npm registry) runs.
    """
    node_executable()
    base = node_modules_dir()
    if (base / "node_modules" / "onnxruntime-node" / "package.json").is_file():
        return base
    npm = shutil.which("npm")
    if npm is None:
        raise RunnerUnavailable("npm is not installed, so onnxruntime-node cannot be installed")
    base.mkdir(parents=True, exist_ok=True)
    if not quiet:
        print(f"verify: installing {ORT_NODE_PACKAGE} into {base} (first use only; "
              f"set {NODE_DIR_ENV} to choose the folder)", file=sys.stderr, flush=True)
    try:
        proc = subprocess.run([npm, "install", "--ignore-scripts", "--no-audit", "--no-fund", "--silent",
                               "--prefix", str(base), ORT_NODE_PACKAGE],
                              capture_output=True, text=True, timeout=900)
    except subprocess.TimeoutExpired:
        raise RunnerUnavailable("npm install onnxruntime-node timed out") from None
    if proc.returncode != 0 or not (base / "node_modules" / "onnxruntime-node").is_dir():
        tail = " | ".join((proc.stderr or "").strip().splitlines()[-2:])
        raise RunnerUnavailable(f"npm install {ORT_NODE_PACKAGE} failed ({tail})")
    return base


def run_onnx_node(models: dict[str, Path], frame: pd.DataFrame, features: list[dict],
                  quiet: bool = False) -> dict[str, dict[str, np.ndarray]]:
    """Each model's outputs from onnxruntime-node, as arrays shaped like onnxruntime's in Python."""
    base = ensure_onnxruntime_node(quiet)
    rows = json_rows(frame, features)
    inputs = [{"name": f["onnx_input"], "kind": f["kind"], "values": [r[f["name"]] for r in rows]}
              for f in features]
    payload = json.dumps({"models": {k: str(Path(p).resolve()) for k, p in models.items()}, "inputs": inputs})
    env = dict(os.environ, NODE_PATH=str(base / "node_modules"))
    raw = json.loads(_run([node_executable(), str(SCRIPTS / "run_onnx.js")], payload, env=env))
    out = {}
    for model, outputs in raw.items():
        out[model] = {name: np.array([np.nan if v is None else v for v in o["data"]]).reshape(o["dims"])
                      for name, o in outputs.items()}
    return out


# ---------------------------------------------------------------- SQL

ROW_ID = "pf_row_number"


def _row_id(features: list[dict]) -> str:
    names = {f["name"] for f in features}
    rid = ROW_ID
    while rid in names:
        rid += "_"
    return rid


def _query(con, create: str, insert: str, values, statement: str, errors, label: str):
    """Load the rows into ``input_rows``, run the one statement, and count the rows left after it."""
    try:
        con.execute(create)
        con.executemany(insert, values)
        try:
            cur = con.execute(statement)
        except errors as exc:
            raise RunnerFailed(f"{label}: {exc}") from None
        names = [d[0] for d in cur.description]
        result = pd.DataFrame(cur.fetchall(), columns=names)
        intact = con.execute("SELECT COUNT(*) FROM input_rows").fetchone()[0]
    finally:
        con.close()
    return result, intact


def run_sql(engine: str, statement: str, frame: pd.DataFrame, features: list[dict],
            rows: list[dict] | None = None) -> pd.DataFrame:
    """Run the export's SELECT on a table ``input_rows`` holding ``frame``'s feature columns
    (numbers as DOUBLE, categories as text, missing as NULL) plus a row number; the result keeps
    the input order and the table is checked to be intact afterwards. ``rows`` (optional) are the
    cells to insert instead of :func:`json_rows` of ``frame`` (SQLite keeps a text in a DOUBLE
    column as text)."""
    rid = _row_id(features)
    cols = [(rid, "INTEGER")] + [(f["name"], "DOUBLE" if f["kind"] == "numeric" else "VARCHAR") for f in features]
    rows = json_rows(frame, features) if rows is None else rows
    values = [tuple([i] + [r[f["name"]] for f in features]) for i, r in enumerate(rows)]
    create = "CREATE TABLE input_rows (" + ", ".join(f"{sql_ident(n)} {t}" for n, t in cols) + ")"
    insert = "INSERT INTO input_rows VALUES (" + ", ".join("?" for _ in cols) + ")"
    if engine == "sqlite":
        # sqlite3 refuses more than one statement in execute()
        result, intact = _query(sqlite3.connect(":memory:"), create, insert, values, statement,
                                (sqlite3.Error, sqlite3.Warning), f"SQLite {sqlite3.sqlite_version}")
    elif engine == "duckdb":
        import duckdb
        try:
            parsed = duckdb.extract_statements(statement)
        except duckdb.Error as exc:
            raise RunnerFailed(f"DuckDB {duckdb.__version__}: {exc}") from None
        if len(parsed) != 1 or parsed[0].type != duckdb.StatementType.SELECT:
            raise RunnerFailed(f"the SQL file holds {len(parsed)} statement(s), not one SELECT: refusing to run it")
        result, intact = _query(duckdb.connect(":memory:"), create, insert, values, statement,
                                duckdb.Error, f"DuckDB {duckdb.__version__}")
    else:
        raise ValueError(engine)
    if intact != len(frame):
        raise RunnerFailed(f"input_rows changed while the query ran ({intact} rows, expected {len(frame)})")
    missing = [n for n, _ in cols if n not in result.columns]
    if missing:
        raise RunnerFailed(f"the result lacks input column(s) {missing[:3]}: it must return input_rows.*")
    return result.sort_values(rid, kind="stable").reset_index(drop=True)


def sql_predictions(result: pd.DataFrame, task: str, classes: list[str] | None) -> dict[str, np.ndarray]:
    """The prediction columns, read by position (they follow input_rows.*), so a data column that
    happens to be called ``prediction`` or ``label`` cannot be mistaken for them."""
    names = ["prediction"] if task == "regression" else ["label"] + [f"prob_{c}" for c in classes]
    tail = result.iloc[:, -len(names):]
    if [str(c) for c in tail.columns] != names:
        raise RunnerFailed(f"the result's last columns are {list(tail.columns)}, expected {names}")
    if task == "regression":
        return {"prediction": pd.to_numeric(tail.iloc[:, 0]).to_numpy(dtype=float)}
    probs = np.column_stack([pd.to_numeric(tail.iloc[:, k + 1]).to_numpy(dtype=float) for k in range(len(classes))])
    return {"label": tail.iloc[:, 0].fillna("").astype(str).to_numpy(), "probabilities": probs}
