"""``shaper bench``: time value-and-gradient against the SciPy reference, write results/."""

from __future__ import annotations

import argparse
from pathlib import Path


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--quick", action="store_true",
                        help="n = 100 and 400, eigh only, fewer repeats (under a minute)")
    parser.add_argument("--out", default="results",
                        help="folder for bench.json and bench.md (default: results)")
    parser.add_argument("--method", action="append", choices=("eigh", "pade"),
                        help="propagator method(s) to time (default: both; eigh with --quick)")
    parser.add_argument("--recipe",
                        help="recipe of the start-up, ensemble and open-system rows (default: "
                             "the bundled demo, recipes/demo-x180.toml, when run from the "
                             "repository's root; skipped elsewhere)")


def run(args: argparse.Namespace) -> int:
    from shaper.io.runfolder import check_out
    from shaper.jobs.bench import DEMO, bench
    from shaper.recipe import load_recipe

    check_out(args.out)
    if args.recipe:
        load_recipe(args.recipe)  # a missing or malformed recipe: refused before minutes of work
    bench(quick=args.quick, out=Path(args.out), methods=args.method,
          recipe=Path(args.recipe) if args.recipe else DEMO)
    return 0
