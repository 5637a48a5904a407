"""Read a data table and turn it into typed features, a target and a task.

Everything a user can get wrong in a data file is caught here and raised as
:class:`~pocketforest.errors.InputError` with one line that names the file, column or value and
says what to do, so later stages can assume clean, typed input.

Modules: :mod:`.reading` (CSV/TSV/Parquet and .xlsx workbooks, whole or in chunks, file errors),
:mod:`.values` (text cleaning, ``category_text``, numbers, booleans), :mod:`.screening`
(``prepare``/``load``: target, task, column typing, ONNX input names), :mod:`.coerce`
(``coerce_for_scoring``) and
:mod:`.messages` (pieces of the error lines). The schema (``Feature``, ``Table``) is in
:mod:`pocketforest.features`; it is re-exported here with the rest of the public names.
"""
from __future__ import annotations

from ..features import Feature, Table
from .coerce import coerce_for_scoring
from .reading import iter_table, read_table
from .screening import MAX_CATEGORIES, RESERVED_ONNX_NAMES, load, prepare
from .values import MISSING_TOKENS, category_text

__all__ = [
    "Feature",
    "Table",
    "read_table",
    "iter_table",
    "prepare",
    "load",
    "coerce_for_scoring",
    "category_text",
    "MISSING_TOKENS",
    "MAX_CATEGORIES",
    "RESERVED_ONNX_NAMES",
]
