"""``shaper sweep RECIPE --durations 6ns:30ns:2ns``: the shortest duration meeting the targets.

Exit 0 when a duration meets the targets, 1 when none does, 2 for bad input, 130/143
when interrupted (``--resume`` continues; finished durations are not redone).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("recipe", help="the recipe file (TOML); its duration is replaced")
    parser.add_argument("--durations", required=True,
                        help="start:stop:step (e.g. 6ns:30ns:2ns) or a list (10ns,12ns,20ns)")
    parser.add_argument("--out", help="output folder (default: results/<name>-sweep)")
    parser.add_argument("--starts", type=int, help="starts per duration (default: the recipe's)")
    parser.add_argument("--seed", type=int, help="seed of the first start")
    parser.add_argument("--resume", action="store_true", help="continue an earlier sweep")
    parser.add_argument("--quiet", action="store_true", help="print only the final summary")
    parser.add_argument("--no-plots", action="store_true", help="skip the PNG plots")


def run(args: argparse.Namespace) -> int:
    from shaper.errors import InputError
    from shaper.recipe import load_recipe
    from shaper.sweep import parse_durations

    if args.starts is not None and args.starts < 1:
        raise InputError(f"--starts must be at least 1, got {args.starts}")
    recipe = load_recipe(args.recipe)
    durations = parse_durations(args.durations)
    from dataclasses import replace

    from shaper import atomic
    from shaper.interrupt import EXIT_CODES, stop_on_signals
    from shaper.job import finish
    from shaper.plots import plot_sweep
    from shaper.sweep import Sweep
    from shaper.units import format_quantity

    if args.starts:
        recipe = replace(recipe, optimizer=replace(recipe.optimizer, starts=args.starts))
    folder = Path(args.out) if args.out else Path("results") / f"{recipe.name}-sweep"
    echo = (lambda text: None) if args.quiet else (lambda text: print(text, file=sys.stderr,
                                                                      flush=True))
    with stop_on_signals() as stop:
        sweep = Sweep(recipe, folder, seed=args.seed, resume=args.resume, stop=stop, echo=echo)
        shortest = sweep.run(durations)
    table = sweep.table()
    atomic.write_text(folder / "sweep.md", f"# Duration sweep of {recipe.name}\n\n{table}")
    o = recipe.optimizer
    chosen = shortest / recipe.sample_rate_hz if shortest else None
    if not args.no_plots and sweep.points:
        plot_sweep(folder / "sweep.png", [p for _, p in sorted(sweep.points.items())],
                   (o.target_infidelity, o.target_leakage), chosen)
    print(table)
    print(f"compiles: {sweep.compiles} for {len(sweep.points)} duration(s) in this session")
    if stop:
        print(f"interrupted; continue with --resume (finished durations are kept in {folder})")
        return EXIT_CODES.get(stop.signal, 130)
    if shortest is None:
        print(f"no duration in the sweep meets infidelity <= {o.target_infidelity:g} and "
              f"leakage <= {o.target_leakage:g}")
        return 1
    output = finish(sweep.result_at(shortest), folder / "shortest", plots_too=not args.no_plots)
    print(f"shortest duration meeting the targets: {format_quantity(chosen, 's')} ({shortest} "
          f"samples); exported: infidelity {output.report['infidelity']:.3e}, leakage "
          f"{output.report['leakage']:.3e}; full result in {output.folder}")
    print(f"CAUTION: {output.report['caution']}")
    return 0
