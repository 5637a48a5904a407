"""The benchmark's command line: which sections run, the terminal text and the JSON file."""
from __future__ import annotations

import argparse
import json
import sys
import tempfile
from dataclasses import asdict
from pathlib import Path

from ..errors import InputError, OneLineParser
from . import anchor, cluster, honest, power, small, speed, tree
from .common import machine

#: Every section as (name, flag, module, help). flag None: always runs. A new section is a new
#: submodule with ``run(quick, root, say)`` and a line here.
SECTIONS = [
    ("speed", None, speed, "distill, scoring, memory and size figures"),
    ("honest", None, honest, "null rejection and loss-interval coverage"),
    ("anchor", "--anchor", anchor, "the equation against hand-built GLMs on public tables (issue 12)"),
    ("power", "--power", power, "planted-truth recovery and noise by size (issue 11)"),
    ("small", "--small", small, "small data: null rejection, loss coverage at 150 rows, the no-test-split threshold (issue 12)"),
    ("tree", "--tree", tree, "surrogate tree fidelity: greedy vs search, synthetic rows, default size"),
    ("cluster", "--cluster", cluster, "score on a local Dask cluster and distill --sample, 10,000,000 rows"),
]
#: A section may also offer ``add_arguments(parser)`` (its own options) and ``options(args) ->
#: dict`` (keyword arguments for its ``run``; raises InputError on a bad value).
#: Child-process functions by name, for ``--child`` (each section's own).
CHILDREN = {**speed.CHILDREN, **cluster.CHILDREN}


def run(quick: bool = False, work: str | None = None, say=print, only: set[str] | None = None,
        exactly: set[str] | None = None, options: dict[str, dict] | None = None) -> dict:
    """Run the chosen sections (the always-on ones plus ``only``, or ``exactly`` these); return one
    JSON-ready dict. ``options`` holds keyword arguments per section name."""
    tmp = tempfile.TemporaryDirectory(prefix="pf-bench-", dir=work)
    root = Path(tmp.name)
    figures, raw, sizes, lines = [], {}, {}, []
    try:
        for name, flag, module, _ in SECTIONS:
            if exactly is not None:
                if name not in exactly:
                    continue
            elif flag is not None and name not in (only or set()):
                continue
            section = module.run(quick, root, say, **(options or {}).get(name, {}))
            figures += section.figures
            raw.update(section.raw)
            sizes.update(section.sizes)
            lines += section.lines
    finally:
        tmp.cleanup()
    return {"quick": quick, "machine": machine(), "sizes": sizes, "figures": [asdict(f) for f in figures],
            "raw": raw, "_objects": figures, "_lines": lines}


def render(result: dict) -> str:
    timed = not result["quick"]
    lines = ["pocketforest benchmark" + (" (--quick: small sizes, nothing judged)" if not timed else ""),
             f"machine: {result['machine']['cpu']} x{result['machine']['cores']}, load average at end "
             f"{result['machine']['load_average_at_end']}", ""]
    lines += [f.line(timed) for f in result["_objects"]]
    lines += result["_lines"]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = OneLineParser(prog="python -m pocketforest.bench",
                           description="Measure pocketforest's contract figures on this machine.")
    parser.add_argument("--quick", action="store_true", help="small sizes, well under a minute (nothing judged)")
    parser.add_argument("--out", help="also write the results as JSON to this file")
    parser.add_argument("--work", help="folder for the temporary data and bundle (default: system temp)")
    for name, flag, _, text in SECTIONS:
        if flag is not None:
            parser.add_argument(flag, dest=f"section_{name}", action="store_true", help=f"also run: {text}")
    names = [name for name, _, _, _ in SECTIONS]
    parser.add_argument("--only", help=f"run just these sections, comma-separated ({', '.join(names)})")
    for _, _, module, _ in SECTIONS:
        if hasattr(module, "add_arguments"):
            module.add_arguments(parser)
    parser.add_argument("--child", nargs=2, help=argparse.SUPPRESS)
    try:
        args = parser.parse_args(argv)
    except InputError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    if args.child:
        kind, cfg = args.child
        print(json.dumps(CHILDREN[kind](json.loads(Path(cfg).read_text()))))
        return 0
    only = {name for name, flag, _, _ in SECTIONS if flag is not None and getattr(args, f"section_{name}")}
    try:
        exactly = None
        if args.only:
            exactly = {x.strip() for x in args.only.split(",") if x.strip()}
            unknown = sorted(exactly - set(names))
            if unknown or not exactly:
                raise InputError(f"--only {args.only!r}: choose sections from {', '.join(names)}")
        options = {name: module.options(args) for name, _, module, _ in SECTIONS if hasattr(module, "options")}
    except InputError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    result = run(args.quick, args.work, say=lambda t: print(t, file=sys.stderr, flush=True), only=only,
                 exactly=exactly, options=options)
    print(render(result))
    if args.out:
        clean = {k: v for k, v in result.items() if not k.startswith("_")}
        Path(args.out).write_text(json.dumps(clean, indent=2) + "\n", encoding="utf-8")
    return 0
