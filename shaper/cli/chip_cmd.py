"""``shaper chip CHIP.toml``: every qubit's gate set and every pair's gate, then one summary."""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("chip", help="the chip file (TOML): qubits, couplings, gate template")
    parser.add_argument("--out", help="folder for the run (default: results/<chip name>)")
    parser.add_argument("--workers", type=int,
                        help="local worker processes (default: one per core)")
    parser.add_argument("--scheduler", metavar="ADDRESS",
                        help="run the tasks on a Dask distributed scheduler, e.g. "
                             "tcp://10.0.0.5:8786 (pip install \".[cluster]\")")
    parser.add_argument("--wait-workers", default="3 min", metavar="TIME",
                        help="with --scheduler: how long to wait for a first worker before "
                             "giving up with exit 3 (default '3 min')")
    parser.add_argument("--resume", action="store_true",
                        help="continue a run in --out: finished gates are kept")
    parser.add_argument("--force", action="store_true", help="start over in --out")
    from shaper.cli import budget

    budget.add_arguments(parser, what="the whole chip (tasks not finished are left for "
                                      "--resume)")
    parser.add_argument("--quiet", action="store_true", help="no progress bar")


def run(args: argparse.Namespace) -> int:
    import time

    started = time.monotonic()
    code = _run(args)  # an error is one line (exit 2/3): no time after it
    print(f"the whole command took {time.monotonic() - started:.1f} s", file=sys.stderr)
    return code


def _run(args: argparse.Namespace) -> int:
    from shaper.errors import InputError
    from shaper.recipe.chip import load_chip

    if args.workers is not None and args.workers < 1:
        raise InputError(f"--workers must be at least 1, got {args.workers}")
    if args.scheduler and args.workers:
        raise InputError("--workers is for local runs; a Dask cluster has its own workers")
    from shaper.recipe.units import parse_quantity

    wait = parse_quantity(args.wait_workers, "time", key="--wait-workers", bare_check=False)
    if not 0 < wait <= 7 * 86400:
        raise InputError(f"--wait-workers must be a positive time up to a week, got "
                         f"{args.wait_workers!r}")
    from shaper.cli import budget

    limits = budget.read(args)
    chip = load_chip(args.chip)
    folder = Path(args.out) if args.out else Path("results") / chip.name
    from shaper.io import atomic
    from shaper.jobs.chip import DaskExecutor, LocalExecutor, run_chip

    atomic.lock_folder(folder)
    echo = lambda text: print(text, file=sys.stderr, flush=True)  # noqa: E731
    executor = DaskExecutor(args.scheduler, wait_workers_s=wait, echo=echo,
                            debug=getattr(args, "debug", False)) if args.scheduler else \
        LocalExecutor(args.workers or os.cpu_count() or 1)
    try:
        rows = run_chip(chip, folder, executor=executor, resume=args.resume, force=args.force,
                        echo=echo, progress=not args.quiet,
                        budget={k: limits[k] for k in ("iterations", "starts", "deadline")})
    finally:
        executor.close()
    print((folder / "chip.md").read_text(), end="")
    print(f"wrote chip.csv, chip.md, chip-durations.png, chip-errors.png and chip.html in "
          f"{folder}")
    from shaper.io.waveio import CAUTION
    print(f"CAUTION: {CAUTION}")
    failing = [f"{r.subject} {r.gate}" for r in rows if not r.met]
    unfinished = len(chip.tasks) - len({(r.subject, r.derived_from or r.gate) for r in rows})
    if unfinished > 0:
        print(f"{unfinished} task(s) not finished within --hours; run again with --resume")
        return 1
    if failing:
        print(f"targets NOT met by {len(failing)} gate(s): {', '.join(failing)}")
        return 1
    print(f"targets met by all {len(rows)} gates")
    return 0
