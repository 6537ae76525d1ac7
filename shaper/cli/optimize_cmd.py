"""``shaper optimize RECIPE``: optimise, export the waveform, write the report and plots."""

from __future__ import annotations

import argparse
import sys


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("recipe", help="the recipe file (TOML)")
    parser.add_argument("--out", help="output folder (default: results/<name>)")
    parser.add_argument("--seed", type=int, help="seed of the first start (overrides the recipe)")
    parser.add_argument("--force", action="store_true",
                        help="overwrite an earlier run in the output folder")
    parser.add_argument("--no-plots", action="store_true", help="skip the PNG plots")


class Progress:
    """A live status line on a terminal (tqdm); a plain line every few iterations otherwise."""

    def __init__(self, total: int, stream=sys.stderr):
        import time

        self.stream, self.bar, self.count, self.start = stream, None, 0, time.monotonic()
        if stream.isatty():
            from tqdm import tqdm
            self.bar = tqdm(total=total, unit="it", file=stream, dynamic_ncols=True,
                            leave=True)

    def __call__(self, record: dict) -> None:
        terms = " ".join(f"{k[5:]}={v:.2e}" for k, v in record.items() if k.startswith("cost_"))
        text = (f"infidelity={record['infidelity']:.3e} leakage={record['leakage']:.3e} "
                f"| {terms}")
        if self.bar is not None:
            self.bar.n = record["iteration"]
            self.bar.set_postfix_str(text)
            return
        import time

        self.count += 1
        if self.count <= 10 or self.count % 10 == 0:
            rate = record["iteration"] / max(time.monotonic() - self.start, 1e-9)
            print(f"iteration {record['iteration']:5d} ({rate:.0f} it/s) {text}",
                  file=self.stream, flush=True)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()


def run(args: argparse.Namespace) -> int:
    from shaper.recipe import load_recipe

    recipe = load_recipe(args.recipe)
    from shaper.run import run as run_job

    progress = Progress(recipe.optimizer.max_iterations)
    try:
        output = run_job(recipe, out=args.out, force=args.force, seed=args.seed,
                         progress=progress, plots_too=not args.no_plots)
    finally:
        progress.close()
    r = output.report
    print(f"{recipe.name}: infidelity {r['infidelity']:.3e}, leakage {r['leakage']:.3e} "
          f"(on the exported {r['samples']} samples, {recipe.export.dac_bits}-bit DAC)")
    print(f"stopped: {r['optimizer']['stop_reason']} after {r['optimizer']['iterations']} "
          f"iterations; wall time {r['wall_time_s']:.2f} s "
          f"(compile {r['optimizer']['compile_time_s']:.2f} s)")
    print(f"targets {'met' if r['targets']['met'] else 'NOT met'}; wrote "
          + ", ".join(p.name for p in output.files) + f" in {output.folder}")
    print(f"CAUTION: {r['caution']}")
    return 0
