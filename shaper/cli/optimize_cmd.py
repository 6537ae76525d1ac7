"""``shaper optimize RECIPE``: optimise, export the waveform, write the report and plots.

Long runs: checkpoints in the run folder, ``--resume`` continues; SIGINT/SIGTERM finish
the step, save and write the best pulse so far (exit 130/143); ``--starts K`` runs K
seeded starts on ``--workers`` processes; ``--hours`` and ``--iterations`` are budgets.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("recipe", help="the recipe file (TOML)")
    parser.add_argument("--out", help="output folder (default: results/<name>)")
    parser.add_argument("--seed", type=int, help="seed of the first start (overrides the recipe)")
    parser.add_argument("--force", action="store_true",
                        help="overwrite an earlier run in the output folder")
    parser.add_argument("--resume", action="store_true",
                        help="continue from the checkpoints in the output folder")
    parser.add_argument("--workers", type=int,
                        help="worker processes for the starts (default: one per core, at most "
                             "one per start; 1: one after another in this process)")
    from shaper.cli import budget

    budget.add_arguments(parser, what="the run (with --resume, a larger one continues it)")
    parser.add_argument("--checkpoint-every", type=int, default=100, metavar="N",
                        help="checkpoint every N iterations (default 100)")
    parser.add_argument("--checkpoint-seconds", type=float, default=60.0, metavar="T",
                        help="and at least every T seconds (default 60)")
    parser.add_argument("--stall-limit", default="10 min", metavar="TIME",
                        help="stop with exit code 3 (checkpoint and best pulse written) when no "
                             "evaluation completes for this long, or 100x the median evaluation "
                             "time if that is longer (default '10 min')")
    parser.add_argument("--quiet", action="store_true", help="print only the final summary")
    parser.add_argument("--no-plots", action="store_true", help="skip the PNG plots")


MAX_CHECKPOINT_S = 86400.0  # a checkpoint at least once a day; more is a slip


class Progress:
    """A live status line on a terminal (tqdm); a plain line every few iterations otherwise."""

    def __init__(self, total: int, stream=sys.stderr, log=None):
        self.stream, self.bar, self.count, self.start = stream, None, 0, time.monotonic()
        self.log = log
        if stream is not None and stream.isatty():
            from tqdm import tqdm
            self.bar = tqdm(total=total, unit="it", file=stream, dynamic_ncols=True,
                            leave=True)

    def __call__(self, record: dict) -> None:
        terms = " ".join(f"{k[5:]}={v:.2e}" for k, v in record.items() if k.startswith("cost_"))
        text = (f"best so far in the optimiser's model: infidelity={record['infidelity']:.3e} "
                f"leakage={record['leakage']:.3e} | weighted cost terms: {terms}")
        self.count += 1
        sparse = self.count <= 10 or self.count % 10 == 0
        if self.log and sparse:
            self.log.line(f"iteration {record['iteration']} {text}", echo=False)
        if self.bar is not None:
            self.bar.n = record["iteration"]
            self.bar.set_postfix_str(text)
        elif self.stream is not None and sparse:
            rate = record["iteration"] / max(time.monotonic() - self.start, 1e-9)
            print(f"iteration {record['iteration']:5d} ({rate:.0f} it/s) {text}",
                  file=self.stream, flush=True)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()


def run(args: argparse.Namespace) -> int:
    from shaper.io.heartbeat import Heartbeat
    from shaper.optimizer.interrupt import stop_on_signals

    with stop_on_signals() as stop, Heartbeat(quiet=args.quiet):  # no signal lost, no silence
        args.started = time.monotonic()
        return _run(args, stop)


def _options(args: argparse.Namespace) -> tuple[float, Path | None]:
    """Every option checked and named before the recipe is read: the stall limit (s) and
    the --out folder (None: the default)."""
    from shaper.cli import budget
    from shaper.errors import InputError

    budget.read(args)  # checks --hours, --iterations, --starts, --seed, --workers
    if args.checkpoint_every < 1:
        raise InputError(f"--checkpoint-every must be at least 1, got {args.checkpoint_every}")
    if not 0 < args.checkpoint_seconds <= MAX_CHECKPOINT_S:  # NaN is neither
        raise InputError(f"--checkpoint-seconds must be positive and at most a day "
                         f"({MAX_CHECKPOINT_S:g}), got {args.checkpoint_seconds}")
    from shaper.recipe.units import parse_quantity
    stall_limit = parse_quantity(args.stall_limit, "time", key="--stall-limit",
                                 bare_check=False)
    if not 1 <= stall_limit <= MAX_CHECKPOINT_S * 7:  # shorter: a slow step is a "stall"
        raise InputError(f"--stall-limit must be from 1 s to a week, got {args.stall_limit!r}")
    from shaper.io.runfolder import check_out
    return stall_limit, check_out(args.out) if args.out else None


def _run(args: argparse.Namespace, stop) -> int:
    from shaper.recipe import load_recipe

    stall_limit, folder = _options(args)
    recipe = load_recipe(args.recipe)
    folder = folder or Path("results") / recipe.name
    if stop:  # stopped while starting: nothing to save yet
        print("shaper optimize: interrupted before the run began", file=sys.stderr)
        return stop.exit_code
    from shaper.recipe.derive import with_budget

    recipe = with_budget(recipe, iterations=args.iterations, hours=args.hours,
                         starts=args.starts)
    from shaper.recipe.memory import SAY_VERDICT_S, judging_seconds, minutes
    seconds = sum(judging_seconds(recipe, recipe.samples, recipe.sample_rate_hz))
    if seconds > SAY_VERDICT_S and not args.quiet:  # said before the run starts
        print(f"shaper optimize: judging the exported file will take at least "
              f"{minutes(seconds)} after the optimiser", file=sys.stderr, flush=True)
    starts = recipe.optimizer.starts
    workers = args.workers or min(starts, os.cpu_count() or 1)
    workers = workers if starts > 1 else 1
    from shaper.jobs.setup import run_setup

    def progress(log):
        log.line(f"{'resuming' if args.resume else 'starting'} {recipe.name} from "
                 f"{args.recipe}: {starts} start(s) on {workers} process(es)")
        quiet = args.quiet or workers > 1
        return Progress(recipe.optimizer.max_iterations, log=log,
                        stream=None if quiet else sys.stderr)

    # run_setup prepares the folder first: a refusal comes at once, before JAX is loaded
    with run_setup(folder, recipe=recipe, force=args.force, stop=stop,
                   stall_limit_s=stall_limit, plots=not args.no_plots,
                   echo=None if args.quiet else sys.stderr, progress=progress, seed=args.seed,
                   resume=args.resume, workers=workers, checkpoint_every=args.checkpoint_every,
                   checkpoint_seconds=args.checkpoint_seconds) as setup:
        if recipe.gate_set:
            return _gate_set(recipe, setup.options, folder, args, setup.painter)
        from shaper.jobs.run import run as run_job
        output = run_job(recipe, setup.options, out=folder, force=args.force,
                         plots_too=not args.no_plots, painter=setup.painter)
    _print_summary(recipe, output, time.monotonic() - args.started)
    if stop:
        return stop.exit_code
    return 0 if output.report["targets"]["met"] else 1


def _print_summary(recipe, output, command_s: float) -> None:
    """The last lines of a run: each start (in the optimiser's model), the judged figures
    and every model's, the time, the files, the verdict and a miss's explanation."""
    r = output.report
    reason = r["optimizer"]["stop_reason"]
    if len(r["optimizer"]["starts"]) > 1:
        print("start  seed  infidelity  leakage     iterations  stop (the optimiser's own "
              "figures, in its model)")
        for s in r["optimizer"]["starts"]:
            print(f"{s['index']:5d} {s['seed']:5d}  {s['infidelity']:.3e}   {s['leakage']:.3e}"
                  f"   {s['iterations']:9d}  {s['stop_reason']}")
    from shaper.cli.text import (
        coherence_lines,
        explanation_lines,
        judged_line,
        line_summary,
        trust_summary,
    )
    print(judged_line(recipe.name, r, f" on the exported {r['samples']} samples, "
                                      f"{recipe.export.dac_bits}-bit DAC,"))
    for text in (trust_summary(r.get("trust"), r.get("before_quantisation"))
                 + coherence_lines(r.get("open_system"), recipe.optimizer.target_infidelity)
                 + line_summary(r.get("line"), r.get("mixer"))):
        print(text)
    print(f"the optimiser stopped: {reason} after {r['optimizer']['iterations']} iterations; "
          f"optimiser {r['wall_time_s']:.2f} s (compile {r['optimizer']['compile_time_s']:.2f} "
          f"s); the whole command {command_s:.2f} s (start-up, re-checks, plots included)")
    print("wrote " + ", ".join(p.name for p in output.files) + f" in {output.folder}")
    print(f"CAUTION: {r['caution']}")
    from shaper.costs.verdict import summary
    print(summary(r["targets"]) + f" (judged on {r.get('judged_on', 'the exported file')})")
    for text in explanation_lines(r):
        print(text)


def _gate_set(recipe, options, folder: Path, args, painter) -> int:
    """A recipe with ``[gate] targets``: every gate of the set, the derivable ones derived."""
    from shaper.jobs.gateset import run_set

    rows = run_set(recipe, folder, force=args.force, plots=not args.no_plots,
                   options=options, echo=print, painter=painter)
    print(f"wrote gateset.csv and gateset.md in {folder}")
    from shaper.io.waveio import CAUTION
    print(f"CAUTION: {CAUTION}")
    missed = [r.gate for r in rows if not r.met]
    print("targets met by every gate" if not missed else
          f"targets NOT met by: {', '.join(missed)}")
    for r in rows:
        if not r.met and r.why:
            print(f"{r.gate}: {r.why}")
    return 0 if not missed else 1
