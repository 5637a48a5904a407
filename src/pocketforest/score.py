"""`score`: predictions from a bundle's ONNX model, streamed chunk by chunk in the input's order."""
from __future__ import annotations

import os
import sys
import tempfile
from pathlib import Path
from typing import Iterator

import numpy as np
import pandas as pd

from .bundle_io import read_manifest
from .errors import InputError
from .intake import Feature, coerce_for_scoring
from .runtime import Scorer, envelope_count

NA_TOKENS = ["", "NA", "N/A", "NaN", "nan", "null", "NULL", "None"]
CHUNK_ROWS = 20_000  # a 100,000-row chunk of text cells peaked near 250 MB; 20,000 near 45 MB


def features_of(manifest: dict) -> list[Feature]:
    keys = ("name", "kind", "onnx_input", "missing", "min", "max", "categories")
    return [Feature(**{k: f.get(k) for k in keys}) for f in manifest["features"]]


def iter_chunks(path: str | os.PathLike, rows: int = CHUNK_ROWS) -> Iterator[pd.DataFrame]:
    """CSV/TSV (all values as text, as intake reads them) or Parquet, a chunk at a time."""
    p = Path(path)
    ext = p.suffix.lower()
    if p.is_dir():
        raise InputError(f"{p} is a directory, not a data file: give the path of a .csv, .tsv or .parquet file")
    if not p.is_file():
        raise InputError(f"data file {p} not found: check the path")
    if ext == ".parquet":
        import pyarrow.parquet as pq
        try:
            pf = pq.ParquetFile(str(p))
            for batch in pf.iter_batches(batch_size=rows):
                yield batch.to_pandas()
        except Exception as exc:  # pyarrow raises several types for damaged files
            raise InputError(f"{p} is not a readable Parquet file ({exc}): write it again") from None
        return
    if ext not in (".csv", ".tsv"):
        raise InputError(f"{p}: files ending in '{ext}' are not read; use .csv, .tsv or .parquet")
    try:
        reader = pd.read_csv(p, sep="\t" if ext == ".tsv" else ",", dtype=str, keep_default_na=False,
                             na_values=NA_TOKENS, chunksize=rows, encoding="utf-8-sig", skipinitialspace=True)
        for chunk in reader:
            chunk.columns = [str(c).strip() for c in chunk.columns]
            yield chunk.apply(lambda s: s.str.strip()).replace("", np.nan)
    except UnicodeDecodeError:
        raise InputError(f"{p} is not UTF-8 text: re-save it as UTF-8") from None
    except pd.errors.EmptyDataError:
        raise InputError(f"{p} is empty: it needs a header line and rows") from None
    except pd.errors.ParserError as exc:
        raise InputError(f"{p} could not be parsed ({str(exc).strip().splitlines()[-1]}): check its delimiters") from None


def score_file(bundle: str, data: str, model: str, out: str | None, keep: list[str] | None = None,
               quiet: bool = False) -> int:
    """Write predictions to ``out`` (CSV or Parquet by extension) or stdout; returns rows scored."""
    manifest = read_manifest(bundle)
    scorer = Scorer(bundle, model, manifest)
    features = features_of(manifest)
    keep = list(keep or [])
    if out is not None and Path(out).suffix.lower() not in (".csv", ".parquet"):
        raise InputError(f"--out {out}: write predictions to a .csv or .parquet file")
    if out is not None and not Path(out).resolve().parent.is_dir():
        raise InputError(f"--out {out}: folder {Path(out).parent} does not exist: create it first")
    tmp_path = None
    writer = None
    total = 0
    outside = 0
    try:
        if out is not None:
            fd, tmp_path = tempfile.mkstemp(prefix=".pf-score-", suffix=Path(out).suffix,
                                            dir=str(Path(out).resolve().parent))
            os.close(fd)
        first = True
        for chunk in iter_chunks(data):
            missing_keep = [k for k in keep if k not in chunk.columns]
            if missing_keep:
                raise InputError(f"--keep column(s) {', '.join(repr(k) for k in missing_keep)} not in {data}")
            typed = coerce_for_scoring(chunk, features, source=str(data), first_row=total)
            pred = scorer.columns(typed)
            pred["inputs_outside_training"] = envelope_count(typed, manifest["features"])
            outside += int((pred["inputs_outside_training"] > 0).sum())
            frame = pd.concat([chunk[keep].reset_index(drop=True), pred.reset_index(drop=True)], axis=1)
            if out is None:
                frame.to_csv(sys.stdout, index=False, header=first, lineterminator="\n")
            elif tmp_path.endswith(".parquet"):
                import pyarrow as pa
                import pyarrow.parquet as pq
                table = pa.Table.from_pandas(frame, preserve_index=False)
                if writer is None:
                    writer = pq.ParquetWriter(tmp_path, table.schema)
                writer.write_table(table)
            else:
                frame.to_csv(tmp_path, index=False, header=first, mode="w" if first else "a", lineterminator="\n")
            total += len(chunk)
            first = False
            if not quiet and total:
                print(f"\rscored {total} rows", end="", file=sys.stderr, flush=True)
        if writer is not None:
            writer.close()
            writer = None
        if total == 0:
            raise InputError(f"{data} has no rows to score")
        if tmp_path is not None:
            os.replace(tmp_path, out)
            tmp_path = None
    finally:
        if writer is not None:
            writer.close()
        if tmp_path is not None and os.path.exists(tmp_path):
            os.remove(tmp_path)
        if not quiet and total:
            print(file=sys.stderr)
    if outside and not quiet:
        print(f"warning: {outside} of {total} rows have inputs outside the training data (a number beyond the "
              "training range or an unseen category); their predictions are extrapolations: see the "
              "inputs_outside_training column", file=sys.stderr)
    return total
