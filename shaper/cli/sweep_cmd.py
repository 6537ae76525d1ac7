"""``shaper sweep RECIPE --durations 6ns:30ns:2ns``: the shortest duration meeting the targets.

Exit 0 when a duration meets the targets, 1 when none does, 2 for bad input, 130/143
when interrupted (``--resume`` continues; finished durations are not redone).
"""

from __future__ import annotations

import argparse
import contextlib
import os
import sys
from dataclasses import replace
from pathlib import Path


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("recipe", help="the recipe file (TOML); its duration is replaced")
    parser.add_argument("--durations", required=True,
                        help="start:stop:step (e.g. 6ns:30ns:2ns) or a list (10ns,12ns,20ns)")
    parser.add_argument("--out", help="output folder (default: results/<name>-sweep)")
    from shaper.cli import budget

    budget.add_arguments(parser, what="the whole sweep (durations not reached are left for "
                                      "--resume)")
    parser.add_argument("--workers", type=int,
                        help="worker processes for the starts of each duration (default: one "
                             "per core, at most one per start)")
    parser.add_argument("--seed", type=int, help="seed of the first start")
    parser.add_argument("--resume", action="store_true", help="continue an earlier sweep")
    parser.add_argument("--quiet", action="store_true", help="print only the final summary")
    parser.add_argument("--no-plots", action="store_true", help="skip the PNG plots")


def run(args: argparse.Namespace) -> int:
    import time

    from shaper.io.heartbeat import Heartbeat
    from shaper.optimizer.interrupt import stop_on_signals

    started = time.monotonic()
    # first: a signal during start-up must not be lost; and no long silence after it
    with stop_on_signals() as stop, Heartbeat(quiet=args.quiet):
        code = _run(args, stop)  # an error is one line (exit 2/3): no time after it
    print(f"the whole command took {time.monotonic() - started:.1f} s", file=sys.stderr)
    return code


def _run(args: argparse.Namespace, stop) -> int:
    from shaper.cli import budget
    from shaper.jobs.sweep import parse_durations
    from shaper.recipe import load_recipe

    args.budget = budget.read(args)  # and --seed, --workers
    from shaper.io.runfolder import check_out
    if args.out:
        check_out(args.out)
    recipe = load_recipe(args.recipe)
    if recipe.gate_set:
        return _gate_set(args, recipe, stop)
    durations = parse_durations(args.durations)
    from shaper.recipe.derive import as_options, at_samples
    with as_options({"duration": ("--durations", args.durations)}):  # the longest, up front:
        at_samples(recipe, max(1, round(max(durations) * recipe.sample_rate_hz)))  # it fits

    from shaper.jobs.painter import Painter

    # the plot helper imports matplotlib on the other core while this process loads JAX
    with (contextlib.nullcontext() if args.no_plots else Painter()) as painter:
        return _sweep(args, stop, recipe, durations, painter)


def _sweep(args: argparse.Namespace, stop, recipe, durations, painter) -> int:

    from shaper.io import atomic
    from shaper.jobs.run import finish
    from shaper.jobs.sweep import Sweep
    from shaper.recipe.units import format_quantity

    if args.starts or args.iterations:
        from shaper.recipe.derive import with_budget
        recipe = with_budget(recipe, starts=args.starts, iterations=args.iterations)
    folder = Path(args.out) if args.out else Path("results") / f"{recipe.name}-sweep"
    echo = (lambda text: None) if args.quiet else (lambda text: print(text, file=sys.stderr,
                                                                      flush=True))
    starts = recipe.optimizer.starts
    workers = args.workers or min(starts, os.cpu_count() or 1)
    if stop:
        return stop.exit_code
    atomic.lock_folder(folder)
    sweep = Sweep(recipe, folder, seed=args.seed, resume=args.resume, stop=stop, echo=echo,
                  workers=workers if starts > 1 else 1, deadline=args.budget["deadline"])
    shortest = sweep.run(durations, plots=not args.no_plots)
    chosen = shortest / recipe.sample_rate_hz if shortest else None
    print(sweep.table())
    lowest = sweep.lowest_total_error()
    if lowest is not None:
        point = sweep.points[lowest]
        print(f"lowest total error with T1/T2: {format_quantity(point.duration_s, 's')} "
              f"({lowest} samples): {point.total_error:.3e} (coherent {point.coherent_error:.2e}"
              f", incoherent {point.incoherent_error:.2e})")
    print(f"compiles: {sweep.compiles} for {len(sweep.points)} duration(s) in this session")
    if stop:
        from shaper.jobs.next_steps import Where, again
        print(f"interrupted; finished durations are kept in {folder}")
        print("next: go on from where it stopped: `" + again(Where(
            "sweep", file=args.recipe, out=str(folder), durations=args.durations),
            "--resume") + "`")
        return stop.exit_code
    from shaper.jobs.next_steps import Where

    where = Where("sweep", file=args.recipe, out=str(folder), durations=args.durations)
    if shortest is None:
        return _no_pass(sweep, folder, where, echo)
    echo(f"writing the full result of the shortest duration ({shortest} samples): judged "
         f"again as the chip plays it, with plots")
    output = finish(sweep.result_at(shortest), folder / "shortest", plots_too=not args.no_plots,
                    painter=painter, say=echo,
                    where=replace(where, run=str(folder / "shortest")))
    r = output.report
    print(f"shortest duration meeting the targets: {format_quantity(chosen, 's')} ({shortest} "
          f"samples); judged infidelity {r['infidelity']:.3e}, leakage {r['leakage']:.3e} "
          f"({r['judged_on']}; rotating frame {r['trust']['rotating_frame']['infidelity']:.3e})"
          f"; full result in {output.folder}")
    rotating = sweep.shortest_in_rotating_frame()
    if rotating is not None and rotating < chosen:
        print(f"(in the optimiser's rotating frame alone it would be "
              f"{format_quantity(rotating, 's')}: README, \"How far the figures are trusted\")")
    print(f"CAUTION: {output.report['caution']}")
    print("targets met")
    return 0


def _gate_set(args: argparse.Namespace, recipe, stop) -> int:
    """``[gate] targets``: the shortest duration of every gate that must be played (each
    its own sweep, on local workers), the others derived; a one-subject chip run
    (README, "Gate sets")."""
    from shaper.io import atomic
    from shaper.io.waveio import CAUTION
    from shaper.jobs.chip import gate_set_chip, run_chip
    from shaper.jobs.executors import LocalExecutor
    from shaper.jobs.next_steps import Where, again
    from shaper.optimizer.interrupt import Interrupted

    chip = gate_set_chip(recipe, args.durations)
    folder = Path(args.out) if args.out else Path("results") / f"{recipe.name}-sweep"
    where = Where("sweep", file=args.recipe, out=str(folder), durations=args.durations)
    atomic.lock_folder(folder)
    executor = LocalExecutor(max(1, min(args.workers or os.cpu_count() or 1, len(chip.tasks))),
                             stop=stop)
    try:
        rows = run_chip(chip, folder, executor=executor, resume=args.resume,
                        echo=lambda text: print(text, file=sys.stderr, flush=True),
                        progress=not args.quiet,
                        budget={k: args.budget[k] for k in ("iterations", "starts",
                                                            "deadline")})
    except Interrupted as exc:
        print(f"shaper sweep: {exc}; the workers are stopped and the finished gates kept in "
              f"{folder}: go on with `{again(where, '--resume')}`", file=sys.stderr)
        return exc.exit_code
    finally:
        executor.close()
    print((folder / "chip.md").read_text(), end="")
    print(f"wrote chip.csv, chip.md and chip.html (one row per gate) in {folder}")
    print(f"CAUTION: {CAUTION}")
    missing = len(chip.tasks) - len({r.derived_from or r.gate for r in rows})
    failing = [r.gate for r in rows if not r.met]
    if missing > 0:
        print(f"{missing} gate sweep(s) not finished within --hours")
        command = again(where, "--resume", "--hours", "1")
        print(f"next: finish them, the finished ones kept: `{command}`")
        return 1
    print("targets met by every gate" if not failing else
          f"targets NOT met by: {', '.join(failing)}")
    return 0 if not failing else 1


def _no_pass(sweep, folder: Path, where, echo) -> int:
    """No duration passed: the budget ran out, or the longest missed (why, and what to
    try, from its report: the next steps go on with this sweep, ``where``)."""
    from shaper.jobs.run import finish
    from shaper.recipe.units import format_quantity

    if sweep.budget_reached:
        from shaper.jobs.next_steps import again
        print(f"the --hours budget ran out after {len(sweep.points)} duration(s) without a "
              f"passing one; finished durations are kept in {folder}")
        print(f"next: go on with a new budget: `{again(where, '--resume', '--hours', '1')}`")
        return 1
    longest = sweep.points[max(sweep.points)] if sweep.points else None
    print("targets NOT met at any duration of the sweep"
          + (f"; the longest, {format_quantity(longest.duration_s, 's')}: "
             f"{longest.missed}" if longest else ""))
    if longest is not None:  # why the longest missed, and what to try: its report
        from shaper.cli.text import explanation_lines

        echo("judging the longest duration again for its explanation")
        output = finish(sweep.result_at(longest.samples), folder / "longest",
                        plots_too=False, say=echo,
                        where=replace(where, run=str(folder / "longest"), waveform=str(
                            folder / "longest" / f"{sweep.recipe.name}.csv")))
        why = explanation_lines(output.report)
        sweep.add_to_summary("Why the longest duration missed, and what to try", why)
        for text in why:
            print(text)
    return 1
