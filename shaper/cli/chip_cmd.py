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
    parser.add_argument("--wait-workers", metavar="TIME",
                        help="with --scheduler: how long to wait for a worker (at the start, "
                             "or after the cluster lost its last one) before giving up with "
                             "exit 3 (default '3 min')")
    parser.add_argument("--resume", action="store_true",
                        help="continue a run in --out: finished gates are kept")
    parser.add_argument("--force", action="store_true", help="start over in --out")
    from shaper.cli import budget

    budget.add_arguments(parser, what="the whole chip (tasks not finished are left for "
                                      "--resume)")
    parser.add_argument("--quiet", action="store_true", help="no progress bar")


def _status(args: argparse.Namespace) -> str:
    """What the chip is at, from its chip.json (written as each task and unit finishes):
    tasks recorded, units submitted and not finished (running or queued)."""
    import json

    folder = getattr(args, "folder", None)
    try:
        state = json.loads((folder / "chip.json").read_text()) if folder else None
    except (OSError, ValueError):
        return ""
    if not isinstance(state, dict):
        return ""
    from shaper.jobs.chip import UNIT_WORDS

    running = [f"{UNIT_WORDS[kind]} {key}" for kind in UNIT_WORDS
               for key, unit in (state.get(kind) or {}).items()
               if isinstance(unit, dict) and unit.get("result") is None]
    return (f"{len(state.get('tasks') or {})} task(s) recorded in chip.json"
            + (f"; submitted, not finished: {', '.join(running)}" if running else ""))


def _again(args: argparse.Namespace, *options) -> str:
    """This chip's command again, on its file and folder, with ``options``."""
    from shaper.jobs.next_steps import shaper

    folder = getattr(args, "folder", None) or args.out
    return shaper("chip", args.chip, *(["--out", folder] if folder else []),
                  *(["--scheduler", args.scheduler] if args.scheduler else []), *options)


GRACE_S = 5.0  # a stop signal ends the chip within this even while it computes (summary)


def run(args: argparse.Namespace) -> int:
    import time

    from shaper.io.heartbeat import Heartbeat
    from shaper.optimizer.interrupt import Interrupted, stop_on_signals

    started = time.monotonic()
    # first: no signal is lost; and no long silence (the chip's state says what runs)
    with stop_on_signals(grace_s=GRACE_S) as stop, Heartbeat(status=lambda: _status(args)):
        stop.log = lambda text: print(f"shaper chip: interrupted ({text}); the finished "
                                      f"gates are kept in chip.json: go on with "
                                      f"`{_again(args, '--resume')}`",
                                      file=sys.stderr, flush=True)
        try:
            code = _run(args, stop)  # an error is one line (exit 2/3): no time after it
        except Interrupted as exc:
            print(f"shaper chip: {exc}; the workers are stopped and the finished gates kept "
                  f"in {args.folder / 'chip.json'}: go on with `{_again(args, '--resume')}`",
                  file=sys.stderr)
            return exc.exit_code
    print(f"the whole command took {time.monotonic() - started:.1f} s", file=sys.stderr)
    return stop.exit_code if stop else code


def _options(args: argparse.Namespace) -> tuple[dict, float | None]:
    """The options, each checked and named: the budget, --workers, --scheduler and
    --wait-workers (only with --scheduler), --out."""
    from shaper.cli import budget
    from shaper.errors import InputError

    limits = budget.read(args)  # and --workers
    if args.scheduler is not None and args.workers:
        raise InputError("--workers is for local runs; a Dask cluster has its own workers")
    if args.wait_workers is not None and args.scheduler is None:
        raise InputError("--wait-workers applies to a Dask cluster (--scheduler); local "
                         "workers start with the chip")
    wait = None
    if args.scheduler is not None:  # "" too: an address, refused as one
        from shaper.jobs.executors import WAIT_WORKERS_S, check_address
        from shaper.recipe.units import parse_quantity

        args.scheduler = check_address(args.scheduler)
        wait = WAIT_WORKERS_S if args.wait_workers is None else parse_quantity(
            args.wait_workers, "time", key="--wait-workers", bare_check=False)
        if not 0 < wait <= 7 * 86400:
            raise InputError(f"--wait-workers must be a positive time up to a week, got "
                             f"{args.wait_workers!r}")
    if args.out:
        from shaper.io.runfolder import check_out
        check_out(args.out)
    return limits, wait


def _run(args: argparse.Namespace, stop) -> int:
    from shaper.recipe.chip import load_chip

    limits, wait = _options(args)
    chip = load_chip(args.chip)
    folder = args.folder = Path(args.out) if args.out else Path("results") / chip.name
    from shaper.io import atomic
    from shaper.jobs.chip import run_chip
    from shaper.jobs.executors import DaskExecutor, LocalExecutor

    atomic.lock_folder(folder)
    echo = lambda text: print(text, file=sys.stderr, flush=True)  # noqa: E731
    executor = DaskExecutor(args.scheduler, wait_workers_s=wait, echo=echo, stop=stop,
                            debug=getattr(args, "debug", False)) if args.scheduler is not None \
        else LocalExecutor(args.workers or os.cpu_count() or 1, stop=stop)
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
        print(f"{unfinished} task(s) not finished within --hours")
        command = _again(args, "--resume", "--hours", "1")
        print(f"next: finish them, the finished ones kept: `{command}`")
        return 1
    if failing:
        print(f"targets NOT met by {len(failing)} gate(s) (every judged figure: alone and "
              f"beside the neighbours, rotating and lab frame): {', '.join(failing)}")
        for r in rows:
            if not r.met:
                print(f"{r.subject} {r.gate}: missed {r.missed}"
                      + (f"; {r.why}" if r.why else ""))
        return 1
    print(f"targets met by all {len(rows)} gates (every judged figure)")
    return 0
