"""Inputs that are many files: a folder or a glob pattern, and the pieces a cluster scores.

`score` accepts one file, a folder of files or a pattern such as ``'data/*.parquet'``; both the
single-machine loop and the Dask engine take the files in the same order (names compared with
their digit runs as numbers, so ``part.2`` comes before ``part.10``, as Dask orders a glob) and
read them with the same :mod:`.reading` functions, so every chunk is cleaned and typed
alike. A piece is one CSV/TSV file or a run of whole row groups of one Parquet file (a Parquet
file cannot be cut inside a row group without decoding it).
"""
from __future__ import annotations

import glob
import re
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from ..errors import InputError
from ..features import Feature
from .coerce import coerce_for_scoring
from .reading import (WORKBOOK, _check_path, _csv_header, _parquet_error, _parquet_selection, iter_table,
                      parquet_chunks, whole_files_only)

DATA_SUFFIXES = (".csv", ".tsv", ".parquet")
#: rows per cluster piece when a Parquet file has several row groups (a piece is one task)
PIECE_ROWS = 500_000
#: rows of the first file typed on the client before any work is sent out
HEAD_ROWS = 1_000


def _natural(path: Path) -> list:
    return [int(part) if part.isdigit() else part for part in re.split(r"(\d+)", str(path))]


def input_files(data: str) -> list[Path]:
    """The files DATA names, in order: itself, the data files directly inside a folder (names
    starting with ``_`` or ``.``, such as ``_SUCCESS``, are skipped), or a glob pattern's matches."""
    if glob.has_magic(data):
        files = [Path(p) for p in glob.glob(data) if Path(p).is_file()]
        if not files:
            raise InputError(f"{data}: no file matches this pattern: check the path (quote the pattern so the "
                             "shell does not expand it)")
    elif Path(data).is_dir():
        files = [p for p in Path(data).iterdir() if p.is_file() and p.suffix.lower() in DATA_SUFFIXES
                 and not p.name.startswith(("_", "."))]
        if not files:
            raise InputError(f"{data}: is a folder with no .csv, .tsv or .parquet files in it: give a data file, "
                             "or a folder that holds them")
    else:
        files = [Path(data)]
    files.sort(key=_natural)
    kinds = {f.suffix.lower() == ".parquet" for f in files}
    if len(kinds) > 1:
        raise InputError(f"{data}: mixes Parquet and text files: score one kind at a time")
    for f in files:
        _check_path(f)
    return files


@dataclass(frozen=True)
class Piece:
    """One task's share of the input."""
    path: str
    row_groups: tuple[int, ...] | None  # None: the whole file
    first_row: int                      # 0-based data row of the piece's first row within its file
    rows: int | None                    # None when unknown without reading (CSV)


def _parquet_names(path: Path) -> tuple[list[str], object]:
    import pyarrow.parquet as pq

    try:
        pf = pq.ParquetFile(path)
        return [str(n).strip() for n in pf.schema_arrow.names], pf
    except (OSError, ValueError) as exc:  # pyarrow's ArrowInvalid is a ValueError
        raise _parquet_error(path, exc) from None


def check_columns(path: Path, names: Sequence[str], needed: Sequence[str], keep: Sequence[str]) -> None:
    """The same messages as single-machine `score` for a missing model or --keep column."""
    missing = [c for c in needed if c not in names]
    if missing:
        raise InputError(f"{path}: missing column(s) {', '.join(repr(c) for c in missing)} that the model needs: "
                         "add them (cells may be empty)")
    absent = [k for k in keep if k not in names]
    if absent:
        raise InputError(f"{path}: --keep column(s) {', '.join(repr(k) for k in absent)} not found: "
                         "check the names (they are case-sensitive)")


def plan_pieces(files: Sequence[Path], needed: Sequence[str], keep: Sequence[str], *,
                piece_rows: int | None = None, head_check: list[Feature] | None = None,
                decimal_comma: bool = False) -> list[Piece]:
    """Pieces in input order, after checking every file's columns from its header or Parquet
    schema (no data read) and typing the first rows of the first file (``head_check``), so the
    usual mistakes fail on the client before a worker starts (``decimal_comma``: as in
    :func:`.reading.read_table`; pass the same to :func:`iter_piece`)."""
    limit = int(piece_rows or PIECE_ROWS)
    pieces: list[Piece] = []
    for path in files:
        _, sep = _check_path(path, decimal_comma)   # the delimiter rule, and no decimal commas in Parquet
        if sep == WORKBOOK:
            raise whole_files_only(path, "--engine dask")
        if sep is None:
            names, pf = _parquet_names(path)
            check_columns(path, names, needed, keep)
            meta = pf.metadata
            run, run_rows, first = [], 0, 0
            for g in range(meta.num_row_groups):
                n = meta.row_group(g).num_rows
                if run and run_rows + n > limit:
                    pieces.append(Piece(str(path), tuple(run), first, run_rows))
                    first += run_rows
                    run, run_rows = [], 0
                run.append(g)
                run_rows += n
            if run:
                pieces.append(Piece(str(path), tuple(run), first, run_rows))
        else:
            check_columns(path, _csv_header(path, sep), needed, keep)
            pieces.append(Piece(str(path), None, 0, None))
    if head_check is not None and files:
        for first_row, chunk in iter_table(files[0], chunksize=HEAD_ROWS, columns=list(needed),
                                           decimal_comma=decimal_comma):
            coerce_for_scoring(chunk, head_check, source=str(files[0]), first_row=first_row)
            break
    return pieces


def iter_piece(piece: Piece, columns: Sequence[str], chunk_rows: int,
               decimal_comma: bool = False) -> Iterator[tuple[int, pd.DataFrame]]:
    """``(first_row, frame)`` chunks of one piece, cleaned exactly as :func:`.reading.iter_table` cleans
    the whole file (first_row counts from the start of the file, for error line numbers)."""
    path = Path(piece.path)
    if piece.row_groups is None:
        yield from iter_table(path, chunksize=chunk_rows, columns=columns, decimal_comma=decimal_comma)
        return
    _, pf = _parquet_names(path)
    try:
        batches = pf.iter_batches(batch_size=chunk_rows, row_groups=list(piece.row_groups),
                                  columns=_parquet_selection(pf.schema_arrow.names, columns))
    except (OSError, ValueError) as exc:
        raise _parquet_error(path, exc) from None
    yield from parquet_chunks(path, batches, piece.first_row)
