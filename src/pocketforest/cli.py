"""The `pocketforest` command line: verbs a user would say, one-line errors, exit codes 0/1/2."""
from __future__ import annotations

import argparse
import json
import os
import sys
import traceback
from pathlib import Path

from . import __version__
from .errors import InputError, OneLineParser
from .defaults import LEAF_BUDGET, NESTED_REPEATS, TREE_LEAVES, TREE_MARGIN, TREES

DEMO_DATA = Path(__file__).resolve().parents[2] / "demo_data" / "greenhouse_trial.csv"
DEMO_TARGET = "yield_kg"


def _common(p: argparse.ArgumentParser) -> None:
    p.add_argument("-q", "--quiet", action="store_true", help="no progress messages on stderr")
    p.add_argument("--debug", action="store_true", help="show a traceback on errors")


def _decimal_comma(p: argparse.ArgumentParser) -> None:
    p.add_argument("--decimal-comma", action="store_true",
                   help="the file's numbers are written with a decimal comma (6,8), and a .csv file is "
                        "semicolon-separated, as spreadsheets save text where the comma is the decimal mark")


def _distill_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--out", help="bundle folder (default exports/<data file stem>)")
    p.add_argument("--task", choices=["auto", "regression", "classification"], default="auto")
    p.add_argument("--trees", type=int, default=TREES, help=f"trees in the forest (default {TREES})")
    p.add_argument("--leaf-size", type=int, default=5, help="minimum rows per forest leaf (default 5)")
    p.add_argument("--max-leaves", type=int, default=None, metavar="N",
                   help=f"most leaves per forest tree (default {LEAF_BUDGET:,} / trees, which keeps forest.onnx "
                        "near 16 MB and scoring memory bounded at any row count; 0 = no cap)")
    p.add_argument("--tree-leaves", type=int, metavar="N",
                   help=f"most leaves in the surrogate tree (default {TREE_LEAVES}, small enough to draw; "
                        f"the size is the smallest within --tree-margin of the most faithful tree up to N)")
    p.add_argument("--tree-margin", type=float, default=TREE_MARGIN, metavar="M",
                   help=f"fidelity (R²) the chosen tree may give up against the best tree under the cap "
                        f"(default {TREE_MARGIN}; 0 = the most faithful)")
    p.add_argument("--tree-depth", type=int, metavar="D",
                   help="grow the surrogate depth-first to depth D instead (with --tree-leaves: a depth limit)")
    p.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    p.add_argument("--split", default=None,
                   help="discovery,confirmation,test shares, e.g. 0.5,0.25,0.25 (default: that split from "
                        "800 rows; below, no test split and figures from cross-validation of the whole pipeline)")
    p.add_argument("--nested-repeats", type=int, default=NESTED_REPEATS, metavar="N",
                   help=f"below 800 rows: repeats of the nested cross-validation behind the loss interval (default "
                        f"{NESTED_REPEATS}, 10 refits each); 0 = a bootstrap over the held-out rows, faster, about the "
                        "procedure's expected loss only")
    p.add_argument("--categorical", nargs="+", default=[], metavar="COL", help="treat these columns as categories")
    p.add_argument("--ignore", nargs="+", default=[], metavar="COL", help="leave these columns out")
    p.add_argument("--family", choices=["gaussian", "binomial", "multinomial", "poisson", "negative_binomial"],
                   help="GLM family for the equation (default from the task)")
    p.add_argument("--robust", action="store_true", help="sandwich (robust) standard errors for the equation")
    p.add_argument("--synthetic-rows", type=int, default=0, metavar="N",
                   help="add N rows sampled around the discovery rows, labelled by the forest, to fit the tree")
    p.add_argument("--no-term-cap", action="store_true",
                   help="keep every suggested term even when the confirmation rows are few per coefficient")
    p.add_argument("--max-terms", type=int, metavar="N", help="at most N terms in the suggested equation")
    p.add_argument("--keep-var", nargs="+", default=[], metavar="COL",
                   help="always put these columns in the equation as main effects")
    p.add_argument("--drop-var", nargs="+", default=[], metavar="COL",
                   help="never use these columns in the equation (the forest still sees them)")
    p.add_argument("--sample", type=int, metavar="N",
                   help="distil a seeded sample of N rows, stratified on the target with every category level "
                        "kept, read through DuckDB from a file, a folder or a quoted pattern too large for memory; "
                        "then check the bundle on as many rows left out")
    p.add_argument("--force", action="store_true", help="replace an existing bundle")
    p.add_argument("--json", action="store_true", help="print the summary as JSON")


def build_parser() -> argparse.ArgumentParser:
    parser = OneLineParser(prog="pocketforest", description="Fit a random forest, distil it into an equation "
                           "and a small tree, and export a verified bundle that runs anywhere.")
    parser.add_argument("--version", action="version", version=f"pocketforest {__version__}")
    sub = parser.add_subparsers(dest="command", parser_class=OneLineParser, metavar="COMMAND")

    p = sub.add_parser("distill", help="the whole job: forest, terms, equation, tree, bundle")
    p.add_argument("data", help=".csv, .tsv or .parquet table, or an .xlsx workbook (its first sheet)")
    p.add_argument("--target", required=True, help="the outcome column")
    _distill_options(p)
    _decimal_comma(p)
    _common(p)

    p = sub.add_parser("demo", help="run distill on the committed demo data")
    p.add_argument("--out", default="exports/demo", help="bundle folder (default exports/demo)")
    p.add_argument("--force", action="store_true", default=True, help=argparse.SUPPRESS)
    p.add_argument("--json", action="store_true", help="print the summary as JSON")
    _common(p)

    p = sub.add_parser("score", help="predict new rows with a bundle's ONNX model")
    p.add_argument("bundle")
    p.add_argument("data", help="a .csv, .tsv, .parquet or .xlsx file, a folder of .csv, .tsv or .parquet files, or a quoted pattern such as 'data/*.parquet'")
    p.add_argument("--model", choices=["forest", "tree", "equation"], required=True)
    p.add_argument("--out", help=".csv or .parquet file (default: CSV on stdout); with --engine dask a folder")
    p.add_argument("--keep", nargs="+", default=[], metavar="COL", help="input columns to copy into the output")
    p.add_argument("--explain", action="store_true",
                   help="also write why: with --model equation the linear predictor and each term's contribution "
                        "(link scale, intercept included, they add up to it); with --model tree the leaf and the "
                        "rules the row followed")
    p.add_argument("--engine", choices=["single", "dask"], default="single",
                   help="single: this process streams the rows (default); dask: a Dask cluster scores the files "
                        "piece by piece and writes one Parquet file per piece into the folder --out")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="with --engine dask: the address of a running Dask scheduler (default: a local cluster, "
                        "one worker process per core)")
    _decimal_comma(p)
    _common(p)

    p = sub.add_parser("verify", help="check a bundle's files and every exported form against its reference rows")
    p.add_argument("bundle")
    p.add_argument("--skip", nargs="+", default=[], metavar="ENGINE",
                   help="leave these engines out (reported as skipped): node, r, libreoffice, pspp, chromium")
    _common(p)

    p = sub.add_parser("compare", help="loss, fidelity and drift of a bundle on new labelled rows",
                       description="Score new labelled rows with all three models of a bundle; print each "
                       "model's metrics, the surrogates' fidelity and loss with 95% intervals, and how far the "
                       "rows stray from the training data. Exit 1 when --max-loss or --max-outside is exceeded.")
    p.add_argument("bundle")
    p.add_argument("data", help=".csv, .tsv or .parquet table, or an .xlsx workbook (its first sheet), holding the target column")
    p.add_argument("--json", action="store_true", help="print the findings as JSON")
    p.add_argument("--out", help="also write the findings as JSON to this .json file")
    p.add_argument("--max-loss", type=float, metavar="X",
                   help="exit 1 when the tree or the equation loses more than X (R² or accuracy) against the forest")
    p.add_argument("--max-outside", type=float, metavar="SHARE",
                   help="exit 1 when more than SHARE (0-1) of the rows have an input outside the training envelope")
    _decimal_comma(p)
    _common(p)
    return parser


def _default_out(data: str) -> str:
    return str(Path("exports") / Path(data).stem)


def _check_distill_options(args: argparse.Namespace) -> None:
    """Option mistakes are reported before any data is read or library loaded."""
    if args.trees < 1:
        raise InputError(f"--trees {args.trees}: the forest needs at least 1 tree")
    if args.nested_repeats < 0:
        raise InputError(f"--nested-repeats {args.nested_repeats}: give 0 (bootstrap interval) or more repeats")
    if args.leaf_size < 1:
        raise InputError(f"--leaf-size {args.leaf_size}: a leaf needs at least 1 row")
    if args.max_leaves is not None and (args.max_leaves < 0 or args.max_leaves == 1):
        raise InputError(f"--max-leaves {args.max_leaves}: give 0 (no cap) or at least 2")
    if args.tree_depth is not None and args.tree_depth < 1:
        raise InputError(f"--tree-depth {args.tree_depth}: the surrogate tree needs a depth of at least 1")
    if args.tree_leaves is not None and args.tree_leaves < 2:
        raise InputError(f"--tree-leaves {args.tree_leaves}: the surrogate tree needs at least 2 leaves")
    if not 0.0 <= args.tree_margin < 1.0:
        raise InputError(f"--tree-margin {args.tree_margin:g}: give a fidelity margin from 0 to below 1, such as 0.02")
    if getattr(args, "sample", None) is not None and args.sample < 1:
        raise InputError(f"--sample {args.sample}: give the number of rows to sample (at least 1)")


def _run_distill(data: str, target: str, args: argparse.Namespace) -> int:
    from .intake import load
    from .split import parse_fractions

    _check_distill_options(args)
    if args.synthetic_rows < 0:
        raise InputError(f"--synthetic-rows {args.synthetic_rows} is negative: give 0 or more rows")
    if args.max_terms is not None and args.max_terms < 1:
        raise InputError("--max-terms must be at least 1")
    fractions = parse_fractions(args.split) if args.split is not None else None
    out = args.out or _default_out(data)
    if Path(out).exists() and not args.force:
        raise InputError(f"{out} already exists: choose another --out or pass --force to replace it")
    drawn = None
    if args.sample is not None:
        from .intake import prepare
        from .sample import draw
        drawn = draw(data, target, args.sample, args.seed, task=args.task, categorical=args.categorical,
                     ignore=args.ignore, decimal_comma=args.decimal_comma)
        table = prepare(drawn.sample, target, task=args.task, categorical=args.categorical, ignore=args.ignore,
                        source=data)
    else:
        table = load(data, target, task=args.task, categorical=args.categorical, ignore=args.ignore,
                     decimal_comma=args.decimal_comma)
    from .discovery import check_requests
    from .intake.screening import column_named
    names = [f.name for f in table.features]
    args.keep_var = [column_named(v, names) for v in args.keep_var]
    args.drop_var = [column_named(v, names) for v in args.drop_var]
    check_requests({f.name: f.kind for f in table.features}, args.keep_var, args.drop_var, args.max_terms)
    from .pipeline import Settings, distill
    from .summary import summary_dict, summary_text

    for note in table.notes:
        if not args.quiet:
            print(f"warning: {note}", file=sys.stderr)
    settings = Settings(trees=args.trees, min_samples_leaf=args.leaf_size, max_leaves=args.max_leaves,
                        tree_depth=args.tree_depth, tree_leaves=args.tree_leaves, tree_margin=args.tree_margin,
                        seed=args.seed, split=fractions,
                        family=args.family, robust=args.robust, quiet=args.quiet,
                        synthetic_rows=args.synthetic_rows, nested_repeats=args.nested_repeats, cap_terms=not args.no_term_cap,
                        max_terms=args.max_terms, keep_vars=tuple(args.keep_var), drop_vars=tuple(args.drop_var))
    result = distill(table, settings)
    if drawn is not None:
        from .sample import self_check
        if not args.quiet:
            print(f"checking on {len(drawn.check):,} rows the sample left out", file=sys.stderr)
        result.sample = {**drawn.design, "self_check": self_check(result, drawn.check, data)}
    path = result.write(out, force=args.force)
    if args.json:
        print(json.dumps(summary_dict(result, path), indent=2))
    else:
        print(summary_text(result, path))
    return 0


def _demo_args(args: argparse.Namespace) -> argparse.Namespace:
    defaults = build_parser().parse_args(["distill", str(DEMO_DATA), "--target", DEMO_TARGET])
    defaults.out, defaults.force, defaults.json, defaults.quiet = args.out, True, args.json, args.quiet
    defaults.ignore = ["marketable"]
    return defaults


def _run(args: argparse.Namespace) -> int:
    if args.command == "distill":
        return _run_distill(args.data, args.target, args)
    if args.command == "demo":
        if not DEMO_DATA.is_file():
            raise InputError(f"demo data {DEMO_DATA} not found: run `python demo_data/make_demo.py` first")
        return _run_distill(str(DEMO_DATA), DEMO_TARGET, _demo_args(args))
    if args.command == "score":
        if args.scheduler and args.engine != "dask":
            raise InputError("--scheduler needs --engine dask")
        if args.engine == "dask":
            if args.explain:
                raise InputError("--explain runs with --engine single for now: drop one of them")
            from .scoring.cluster import score_files
            n = score_files(args.bundle, args.data, args.model, args.out, args.keep, scheduler=args.scheduler,
                            quiet=args.quiet, decimal_comma=args.decimal_comma)
        else:
            from .scoring.score import score_file
            n = score_file(args.bundle, args.data, args.model, args.out, args.keep, quiet=args.quiet,
                           explain=args.explain, decimal_comma=args.decimal_comma)
        if args.out and not args.quiet:
            print(f"wrote {n} predictions to {args.out}", file=sys.stderr)
        return 0
    if args.command == "verify":
        from .scoring.verify import verify_bundle
        checks = verify_bundle(args.bundle, quiet=args.quiet, skip=tuple(args.skip))
        for c in checks:
            print(c.line())
        bad = [c for c in checks if not c.ok]
        skipped = sum(c.skipped for c in checks)
        print(f"{len(checks) - len(bad) - skipped} of {len(checks)} checks passed"
              + (f", {skipped} skipped" if skipped else "")
              + ("" if not bad else ": the bundle does NOT reproduce its reference rows"))
        return 1 if bad else 0
    if args.command == "compare":
        from .scoring.compare import check_out, compare, write_json
        if args.out:
            check_out(args.out)
        if args.max_outside is not None and not 0.0 <= args.max_outside <= 1.0:
            raise InputError(f"--max-outside {args.max_outside:g} is a share: give a number from 0 to 1")
        found = compare(args.bundle, args.data, max_loss=args.max_loss, max_outside=args.max_outside,
                        decimal_comma=args.decimal_comma)
        d = found.to_dict()
        if args.out:
            write_json(d, args.out)
        print(json.dumps(d, indent=2) if args.json else found.text())
        return found.exit_code
    build_parser().print_help()
    return 2


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    debug = "--debug" in argv
    try:
        args = build_parser().parse_args(argv)
        return _run(args)
    except InputError as exc:
        if debug:
            traceback.print_exc()
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("error: interrupted; nothing was written", file=sys.stderr)
        return 2
    except BrokenPipeError:
        os._exit(0)


if __name__ == "__main__":
    sys.exit(main())
