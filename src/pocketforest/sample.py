"""`distill --sample N`: a seeded, stratified sample of data larger than memory, read through DuckDB.

DuckDB scans the CSV/Parquet files (one file, a folder or a glob, as `score` takes them) out of
core; only the sample, and later the check rows, ever reach pandas. The design:

1. **Rows with an outcome** are the population (a missing target cannot train anything).
2. **Every level is kept.** For each categorical column (and the outcome when it has classes) a
   level whose proportional share of the sample would be under :data:`LEVEL_FLOOR` rows gets
   its first ``LEVEL_FLOOR`` rows in the seeded order (all of them when it has fewer), so every
   level the bundle must know is present.
3. **Stratified on the outcome.** The rest of the sample is split across outcome strata (the
   classes, or :data:`BINS` quantile bins of a numeric outcome) in proportion to their sizes,
   largest remainders rounding to exactly N, and filled with each stratum's first rows in the
   seeded order (proportional allocation; Cochran 1977, *Sampling Techniques*, 3rd ed., ch. 5).
4. **A check sample.** A simple random sample of the rows left out, in a second seeded order
   independent of the first, on which `distill` measures itself as `compare` would.

The seeded order is the MD5 digest (RFC 1321, stable across DuckDB versions and independent of
the thread schedule) of the seed and the row's place (Parquet: file number in input order, row
number within the file) or, for CSV, whose reader numbers no rows, the row's cells (identical
rows then share a key, and choosing either gives the same table): the same seed and data give
the same sample.
"""
from __future__ import annotations

import os
import shutil
import tempfile
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputError
from .intake import MAX_CATEGORIES, MISSING_TOKENS
from .intake.pieces import input_files
from .intake.reading import WORKBOOK, _check_path, _csv_header, whole_files_only
from .intake.values import DECIMAL_COMMA

#: each level gets at least this many sample rows (or all its rows when it has fewer)
LEVEL_FLOOR = 10
#: quantile bins of a numeric outcome used as strata
BINS = 10
#: an outcome with at most this many distinct values is stratified on its values
CLASS_STRATA = 50
#: DuckDB's memory budget; it spills to a temporary folder beyond it
MEMORY_LIMIT = "1GB"


@dataclass
class Drawn:
    """The training sample, the check rows and the design as the manifest records it."""
    sample: pd.DataFrame
    check: pd.DataFrame
    design: dict = field(default_factory=dict)


def _q(name: str) -> str:
    """A quoted SQL identifier (embedded quotes doubled)."""
    return '"' + str(name).replace('"', '""') + '"'


def _lit(text: str) -> str:
    """A SQL string literal (embedded quotes doubled)."""
    return "'" + text.replace("'", "''") + "'"


def _connect(tmp: str):
    """A DuckDB database file in a temporary folder: its tables live on disk, compressed, and
    the buffer manager keeps at most MEMORY_LIMIT of them in memory however large the data."""
    import duckdb

    con = duckdb.connect(str(Path(tmp) / "sample.duckdb"),
                         config={"memory_limit": MEMORY_LIMIT, "temp_directory": tmp,
                                 "preserve_insertion_order": False})
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:
        cores = os.cpu_count() or 1
    con.execute(f"SET threads = {int(cores)}")
    return con


def _source(con, files: list[Path], decimal_comma: bool = False) -> tuple[list[str], bool]:
    """A view ``src`` over the files (Parquet rows carry ``__file`` and ``__row``, their place in
    the input); returns the data's column names and whether they are text (CSV).

    ``decimal_comma`` (CSV/TSV): a .csv is semicolon-separated, and the view rewrites each cell
    that is a number written 6,8 with a point, as intake's reader does, so the strata, the
    seeded order and the sample all see the numbers intake will type."""
    paths = "[" + ", ".join(_lit(str(f)) for f in files) + "]"  # a view cannot take parameters
    _, sep = _check_path(files[0], decimal_comma)   # intake's delimiter rule (and no decimal commas in Parquet)
    if sep == WORKBOOK:
        raise whole_files_only(files[0], "--sample")
    if sep is None:
        order = "CASE filename " + " ".join(f"WHEN {_lit(str(f))} THEN {i}" for i, f in enumerate(files)) + " END"
        try:
            con.execute(f"CREATE VIEW src AS SELECT * EXCLUDE (filename, file_row_number), {order} AS __file, "
                        f"file_row_number AS __row FROM read_parquet({paths}, filename = true, file_row_number = true)")
            names = [r[0] for r in con.execute("DESCRIBE src").fetchall() if r[0] not in ("__file", "__row")]
        except Exception as exc:  # duckdb raises its own exception types
            raise InputError(f"{files[0]}: cannot be read as Parquet by DuckDB ({str(exc).splitlines()[0]}): "
                             "the files may be corrupt or have different columns") from None
        return names, False
    header = _csv_header(files[0], sep)  # intake's checks: blank and duplicate names
    for f in files[1:]:
        if _csv_header(f, sep) != header:
            raise InputError(f"{f}: its header differs from {files[0]}'s: every file must have the same columns")
    # every cell as text, so intake types the sample exactly as it types a whole file
    columns = "{" + ", ".join(f"{_lit(h)}: 'VARCHAR'" for h in header) + "}"
    cells = "*"
    if decimal_comma:
        cells = ", ".join(f"CASE WHEN regexp_full_match(trim({_q(h)}), {_lit(DECIMAL_COMMA)}) "
                          f"THEN replace(trim({_q(h)}), ',', '.') ELSE {_q(h)} END AS {_q(h)}" for h in header)
    con.execute(f"CREATE VIEW src AS SELECT {cells} FROM read_csv({paths}, header = true, delim = {_lit(sep)}, "
                f"quote = '\"', escape = '\"', auto_detect = false, columns = {columns}, strict_mode = true)")
    return header, True


def _present(col: str, text: bool) -> str:
    q = _q(col)
    if text:
        return f"({q} IS NOT NULL AND trim({q}) NOT IN (SELECT unnest($tokens)))"
    return f"({q} IS NOT NULL AND NOT (try_cast({q} AS DOUBLE) IS NOT NULL AND isnan(try_cast({q} AS DOUBLE))))"


def draw(data: str, target: str, n: int, seed: int, *, task: str = "auto", categorical: Sequence[str] = (),
         ignore: Sequence[str] = (), check_rows: int | None = None, decimal_comma: bool = False) -> Drawn:
    """Draw ``n`` rows stratified as the module describes, and ``check_rows`` left-out rows
    (``decimal_comma``: as in :func:`intake.read_table`)."""
    if n < 1:
        raise InputError(f"--sample {n}: give the number of rows to sample (at least 1)")
    import duckdb

    files = input_files(str(data))
    tmp = tempfile.mkdtemp(prefix="pf-duckdb-")
    try:
        con = _connect(tmp)
        names, text = _source(con, files, decimal_comma)
        if target not in names:
            raise InputError(f"{data}: no target column '{target}' (columns: {', '.join(names[:20])})")
        for flag, cols in (("--categorical", categorical), ("--ignore", ignore)):
            for c in cols:
                if c not in names:
                    raise InputError(f"{data}: {flag} names column '{c}', which is not in the data")
        try:
            return _draw(con, data, files, names, text, target, n, seed, task, list(categorical), list(ignore),
                         check_rows)
        except duckdb.Error as exc:  # a malformed row deep in a file: DuckDB finds it, not intake
            first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
            raise InputError(f"{data}: DuckDB could not read the data ({first[:200]}): fix the file "
                             "(quoting, field count, encoding) or convert it to Parquet") from None
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def _keyed(names: list[str], seed: int, salt: str, text: bool) -> str:
    """MD5 of the seed, a salt (one per independent order) and the row: its place in the input
    for Parquet (file number in input order, row number in the file), its cells for CSV, whose
    reader has no row numbers (there the cells are text already, so hashing them is cheap;
    casting ten million rows of numbers to text measured 25 times slower than the place)."""
    if not text:
        return f"md5_number(concat_ws('/', '{int(seed)}', '{salt}', __file, __row))"
    cells = ", ".join(f"coalesce({_q(c)}, chr(30))" for c in names)
    return f"md5_number(concat_ws(chr(31), '{int(seed)}', '{salt}', {cells}))"


def _draw(con, data, files, names, text, target, n, seed, task, categorical, ignore, check_rows) -> Drawn:
    tokens = {"tokens": sorted(MISSING_TOKENS)}
    t = _q(target)
    kinds = dict(con.execute("SELECT column_name, column_type FROM (DESCRIBE src)").fetchall())
    if text:  # every cell, since CSV rows can only be found again by their cells
        kept = "*"
    else:     # only what the design reads; the chosen rows are fetched again from the files by place
        level_cols = _level_columns(con, names, kinds, target, categorical, ignore, text, tokens)
        kept = ", ".join(["__file", "__row", t] + [_q(c) for c in level_cols])
    con.execute(f"CREATE TABLE keyed AS SELECT {_keyed(names, seed, 'sample', text)} AS __k, "
                f"{_keyed(names, seed, 'check', text)} AS __k2, {kept} FROM src WHERE {_present(target, text)}",
                tokens if text else None)
    total = con.execute("SELECT count(*) FROM src").fetchone()[0]
    population = con.execute("SELECT count(*) FROM keyed").fetchone()[0]
    if population == 0:
        raise InputError(f"{data}: target column '{target}' is empty in every row: choose another --target")

    # -- outcome strata: classes (as intake would decide the task), or quantile bins of a number
    numeric_share, distinct = con.execute(
        f"SELECT avg(CASE WHEN try_cast({t} AS DOUBLE) IS NOT NULL THEN 1 ELSE 0 END), count(DISTINCT {t}) FROM keyed"
    ).fetchone()
    by_class = (task == "classification" or
                (task == "auto" and (numeric_share < 1.0 or distinct <= 2)))
    if by_class:
        stratum, strata = f"trim(CAST({t} AS VARCHAR))", {"on": target, "kind": "classes"}
    else:
        probs = [k / BINS for k in range(1, BINS)]
        bounds = con.execute(f"SELECT quantile_cont(try_cast({t} AS DOUBLE), $1) FROM keyed", [probs]).fetchone()[0]
        bounds = sorted(set(float(b) for b in bounds))
        cases = " + ".join(f"(try_cast({t} AS DOUBLE) > {b!r})::INTEGER" for b in bounds) or "0"
        stratum = f"CAST({cases} AS VARCHAR)"
        strata = {"on": target, "kind": "quantile bins", "bins": len(bounds) + 1, "bounds": bounds}
    con.execute(f"CREATE TABLE strata AS SELECT rowid AS __id, __k, __k2, {stratum} AS __s FROM keyed")

    if n >= population:
        sample = _fetch(con, text, "TRUE", "__k")
        design = {"method": "all rows (the data have no more rows with a target than --sample asks for)",
                  "files": len(files), "rows_in_data": int(total), "rows_with_target": int(population),
                  "rows_without_target": int(total - population), "sample_rows": int(len(sample)),
                  "requested": int(n), "seed": int(seed), "strata": strata,
                  "check": {"rows": 0, "method": "none: no row was left out"}}
        return Drawn(sample, sample.iloc[:0], design)

    # -- levels that must be present: categorical columns (text, boolean, or --categorical) and classes
    if text:
        level_cols = _level_columns(con, names, kinds, target, categorical, ignore, text, tokens)
    if by_class:
        level_cols.append(target)
    con.execute("CREATE TABLE chosen (__id BIGINT)")
    levels = {c: con.execute(f"SELECT {_q(c)}, count(*) FROM keyed GROUP BY 1").fetchall() for c in level_cols}
    levels = {c: v for c, v in levels.items() if len(v) <= MAX_CATEGORIES + 1}  # more: intake reports the column
    share = n / population
    rare = [{"column": c, "level": value, "rows_in_data": int(count)}
            for c, values in levels.items() for value, count in values if count * share < LEVEL_FLOOR]
    for r in rare:
        _top_up(con, r["column"], r["level"], min(r["rows_in_data"], LEVEL_FLOOR))
    topped = con.execute("SELECT count(*) FROM chosen").fetchone()[0]

    # -- proportional allocation of the rest over the outcome strata, largest remainders
    left = con.execute("SELECT __s, count(*) FROM strata WHERE __id NOT IN (SELECT __id FROM chosen) "
                       "GROUP BY 1 ORDER BY 1").fetchall()
    quota = max(n - topped, 0)
    sizes = np.array([c for _, c in left], dtype=np.float64)
    exact = quota * sizes / sizes.sum() if sizes.sum() else sizes
    alloc = np.floor(exact).astype(int)
    for i in np.argsort(-(exact - alloc), kind="stable")[: quota - int(alloc.sum())]:
        alloc[i] += 1
    con.execute("CREATE TABLE alloc (__s VARCHAR, n BIGINT)")
    con.executemany("INSERT INTO alloc VALUES (?, ?)", [[s, int(a)] for (s, _), a in zip(left, alloc)])
    con.execute("INSERT INTO chosen SELECT x.__id FROM (SELECT __id, __s, row_number() OVER "
                "(PARTITION BY __s ORDER BY __k, __id) AS r FROM strata WHERE __id NOT IN (SELECT __id FROM chosen)) x "
                "JOIN alloc USING (__s) WHERE x.r <= alloc.n")
    # a level expected LEVEL_FLOOR or more times is absent with probability about exp(-LEVEL_FLOOR);
    # then it is topped up too, so presence is certain, not likely
    late = []
    for c, values in levels.items():
        got = {v for (v,) in con.execute(f"SELECT DISTINCT {_q(c)} FROM keyed WHERE rowid IN "
                                         "(SELECT __id FROM chosen)").fetchall()}
        for value, count in values:
            if value not in got:
                _top_up(con, c, value, min(count, LEVEL_FLOOR))
                late.append({"column": c, "level": value, "rows_in_data": int(count)})
    for r in rare + late:
        r["sample_rows"] = int(con.execute(f"SELECT count(*) FROM keyed WHERE rowid IN (SELECT __id FROM chosen) AND "
                                           f"{_is(r['column'], r['level'])}", _param(r["level"])).fetchone()[0])
        r["level"] = None if r["level"] is None else str(r["level"])

    sample = _fetch(con, text, "rowid IN (SELECT __id FROM chosen)", "__k")
    pop = dict(con.execute("SELECT __s, count(*) FROM strata GROUP BY 1").fetchall())
    got = dict(con.execute("SELECT __s, count(*) FROM strata WHERE __id IN (SELECT __id FROM chosen) GROUP BY 1").fetchall())
    strata["counts"] = [{"stratum": str(s), "rows_in_data": int(pop[s]), "sample_rows": int(got.get(s, 0))}
                        for s in sorted(pop, key=str)]

    # -- the check rows: a simple random sample of the rows left out, in the second, independent order
    c_rows = int(check_rows if check_rows is not None else min(n, population - len(sample)))
    check = _fetch(con, text, "rowid NOT IN (SELECT __id FROM chosen)", "__k2", max(c_rows, 0))
    design = {"method": "stratified on the outcome, every level kept, seeded MD5 order (DuckDB)",
              "order": "MD5 of the seed, 'sample' and the row's place (Parquet) or cells (CSV)",
              "files": len(files), "rows_in_data": int(total), "rows_with_target": int(population),
              "rows_without_target": int(total - population), "sample_rows": int(len(sample)),
              "requested": int(n), "seed": int(seed), "level_floor": LEVEL_FLOOR, "strata": strata,
              "levels_topped_up": rare + late, "rows_topped_up": int(topped),
              "check": {"rows": int(len(check)), "method": "simple random sample of the rows left out",
                        "order": "MD5 of the seed, 'check' and the row's place (Parquet) or cells (CSV)"}}
    return Drawn(sample, check, design)


def _level_columns(con, names, kinds, target, categorical, ignore, text, tokens) -> list[str]:
    """Columns whose every level must reach the sample: text (Parquet), boolean, --categorical,
    or (CSV, all text) a column with a present value that is not a number, as intake types it."""
    out = []
    for c in names:
        if c == target or c in ignore:
            continue
        if c in categorical or kinds.get(c) == "BOOLEAN" or (kinds.get(c) == "VARCHAR" and not text):
            out.append(c)
        elif text:
            bad = con.execute(f"SELECT count(*) FROM keyed WHERE {_present(c, True)} AND "
                              f"try_cast(trim({_q(c)}) AS DOUBLE) IS NULL", tokens).fetchone()[0]
            if bad:
                out.append(c)
    return out


def _fetch(con, text: bool, where: str, order: str, limit: int | None = None) -> pd.DataFrame:
    """The chosen rows, every column, in the seeded ``order``: from ``keyed`` (CSV), or read again
    from the Parquet files by their place (a second scan, cheap next to holding every column)."""
    lim = "" if limit is None else f" LIMIT {int(limit)}"
    if text:
        return con.execute(f"SELECT * EXCLUDE (__k, __k2) FROM keyed WHERE {where} ORDER BY {order}, rowid{lim}").df()
    con.execute(f"CREATE OR REPLACE TABLE pick AS SELECT __file, __row, {order} AS __o FROM keyed WHERE {where} "
                f"ORDER BY {order}, rowid{lim}")
    return con.execute("SELECT src.* EXCLUDE (__file, __row) FROM src JOIN pick USING (__file, __row) "
                       "ORDER BY pick.__o").df()


def _is(column: str, value) -> str:
    return f"{_q(column)} IS NULL" if value is None else f"{_q(column)} = $v"


def _param(value) -> dict | None:
    return None if value is None else {"v": value}


def _top_up(con, column: str, value, take: int) -> None:
    """Bring a level to ``take`` chosen rows with its first rows in the seeded order."""
    have = con.execute(f"SELECT count(*) FROM keyed WHERE {_is(column, value)} AND rowid IN (SELECT __id FROM chosen)",
                       _param(value)).fetchone()[0]
    if take > have:
        con.execute(f"INSERT INTO chosen SELECT rowid FROM keyed WHERE {_is(column, value)} AND rowid NOT IN "
                    f"(SELECT __id FROM chosen) ORDER BY __k, rowid LIMIT {int(take - have)}", _param(value))


def self_check(result, check: pd.DataFrame, source: str) -> dict:
    """`distill`'s check of itself on the left-out rows, with `compare`'s own judging function.

    Predictions are the fitted models' (the reference rows prove the ONNX models reproduce them);
    the rows are typed as `compare` types new rows.
    """
    from .intake import coerce_for_scoring
    from .scoring.compare import judge, labels
    from .scoring.runtime import envelope_count

    table, s = result.table, result.settings
    out: dict = {"rows": int(len(check)), "on": "check rows: a seeded random sample of the rows the sample left out"}
    if len(check) < 2:
        out["note"] = "fewer than 2 rows were left out: nothing to check on"
        return out
    y, unknown = labels(check[table.target], table.task, table.classes, source, table.target)
    typed = coerce_for_scoring(check, table.features, source=f"{source} (check rows)")
    outside = envelope_count(typed, [f.to_dict() for f in table.features])
    keep = ~unknown
    scored = typed.loc[keep].reset_index(drop=True)
    preds = {m: result.predict(scored, m) for m in result.models}
    evaluation, fidelity, loss = judge(y[keep], preds, table.task, table.classes, resamples=s.bootstrap, seed=s.seed)
    evaluation["on"] = "check rows"
    out.update({"rows_unknown_class": int(unknown.sum()), "rows_outside_envelope": int((outside > 0).sum()),
                "evaluation": evaluation, "fidelity": fidelity, "loss": loss})
    return out
