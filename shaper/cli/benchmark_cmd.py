"""``shaper benchmark RECIPE FILE [FILE ...]``: the randomized benchmarking a lab will
measure with a set of files, predicted on the recipe's system (README, "Predicted
randomized benchmarking").

A command of its own rather than an option of ``check``: ``check`` judges one file against
one target, while this plays a set of files together (one per physical gate), has its own
options (compilation, lengths, sequences) and its own output (a decay, a plot).

Exit code 0 when every file meets the recipe's targets as judged, 1 when one does not (the
prediction is printed either way), 2 for bad input.
"""

from __future__ import annotations

import argparse
import json
import sys


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("recipe", help="the recipe (system, targets; a gate set's or one gate's)")
    parser.add_argument("files", nargs="+", metavar="FILE",
                        help="GATE=FILE (e.g. X/2=x90.csv), or a file named <set>-<gate>.csv "
                             "as a gate set exports it (x, x_half, my_half, ...)")
    parser.add_argument("--compilation", choices=("shortest", "table"), default="shortest",
                        help="the Cliffords as the fewest pulses with virtual Z (default), or "
                             "the usual table (needs X, Y, +-X/2, +-Y/2)")
    parser.add_argument("--lengths", help="sequence lengths, a comma list (default 1, 2, 4, "
                                          "..., 2048)")
    parser.add_argument("--sequences", type=int, default=200,
                        help="random sequences of the sampled cross-check (default 200)")
    parser.add_argument("--seed", type=int, default=0, help="of the random sequences")
    parser.add_argument("--t1", help="energy relaxation time of the transmon (e.g. 40us): "
                                     "T1/T2 over every gate's footprint and the idles")
    parser.add_argument("--t2", help="its coherence time, as --t1 (T2 <= 2 T1)")
    parser.add_argument("--json", action="store_true", help="print the block as JSON only")
    parser.add_argument("--plot", metavar="PNG", help="write the decay plot there")


def run(args: argparse.Namespace) -> int:
    from shaper.io.heartbeat import Heartbeat

    with Heartbeat():  # the prediction takes tens of seconds: never silent for long
        return _run(args)


def _run(args: argparse.Namespace) -> int:
    from shaper.errors import InputError
    from shaper.recipe import load_recipe

    recipe = load_recipe(args.recipe)
    if args.t1 or args.t2:
        from shaper.recipe.derive import with_coherence
        from shaper.recipe.units import parse_quantity

        recipe = with_coherence(recipe, *(
            None if not text else [parse_quantity(text, "time", key=flag, hint="us")]
            for text, flag in ((args.t1, "--t1"), (args.t2, "--t2"))))
    options = {"compilation": args.compilation, "sequences": args.sequences,
               "seed": args.seed}
    if args.lengths:
        try:
            options["lengths"] = [int(x) for x in args.lengths.split(",")]
        except ValueError:
            raise InputError(f"--lengths: whole numbers separated by commas, got "
                             f"{args.lengths!r}") from None
    if not 2 <= args.sequences <= 100_000:
        raise InputError(f"--sequences must be 2 to 100000, got {args.sequences}")
    from shaper.jobs.benchmarking_report import files_block

    block, met = files_block(recipe, args.files, **options)
    if args.plot:
        from shaper.jobs.plots import plot_benchmark
        plot_benchmark(args.plot, block, title=f"{recipe.name}: predicted RB")
    if args.json:
        print(json.dumps({"benchmarking": block, "targets": met}))
    else:
        _print_summary(recipe.name, block, met)
        for text in _next_steps(args, recipe, met):
            print(text)
    return 0 if all(v["met"] for v in met.values()) else 1


def _next_steps(args: argparse.Namespace, recipe, verdicts: dict) -> list[str]:
    """For every file that misses its targets: the check that says why, as a command."""
    from shaper.jobs.benchmarking_report import gate_of
    from shaper.jobs.next_steps import shaper

    out = []
    for spec in args.files:
        gate, path = gate_of(spec)
        if verdicts.get(gate, {}).get("met", True):
            continue
        if gate.upper() in (g.upper() for g in recipe.gate_set):
            command = shaper("check", args.recipe, path, "--gate", gate)
        elif not recipe.gate_set and recipe.target.label.upper() == gate.upper():
            command = shaper("check", args.recipe, path)
        else:
            out.append(f"next: {gate}: check it with a recipe whose target (or gate set) has "
                       f"{gate}: shaper check RECIPE {path}")
            continue
        out.append(f"next: {gate}: why it misses, and what to run then: `{command}`")
    return out


def _print_summary(name: str, b: dict, verdicts: dict) -> None:
    from shaper.costs.verdict import summary

    comp, gi, check, fit = b["compilation"], b["gate_independent"], b["cross_check"], \
        b["rb"]["fit"]
    print(f"predicted RB of {name} from {len(b['gates'])} file(s) ({b['levels']} levels; "
          f"{comp['method']} compilation with virtual Z: "
          f"{comp['mean_physical_per_clifford']:.4g} pulses per Clifford; every pulse in a "
          f"slot of {b['slot']['slot_s'] * 1e9:.3f} ns)")
    print(f"  error per Clifford {b['error_per_clifford']:.3e} +- "
          f"{b['error_per_clifford_error']:.1e} (A p^m + B: p = {fit['p']:.6f}, "
          f"A = {fit['A']:.3f}, B = {fit['B']:.3f})")
    print(f"  for gate-independent noise it would be the mean Clifford infidelity "
          f"{gi['mean_clifford_infidelity']:.3e}; the gates' infidelities summed per "
          f"Clifford: {gi['summed_gate_infidelities']:.3e}")
    leak = b["rb"].get("leakage")
    if leak:
        print(f"  leakage per Clifford {leak['leakage_per_clifford']:.2e}, seepage "
              f"{leak['seepage_per_clifford']:.2e}, leaked at the steady state "
              f"{leak['steady_state_leaked']:.3g}")
    print(f"  cross-check at m = {check['length']}: exact {check['exact']:.5f}, "
          f"{check['sequences']} random sequences {check['sampled']:.5f} +- "
          f"{check['standard_error']:.5f} ({'agree' if check['agree'] else 'DISAGREE'})")
    for gate, i in b["interleaved"].items():
        print(f"  {gate}: interleaved r_C {i['gate_error']:.3e} (true error within +- "
              f"{i['bound']:.1e}); its map's infidelity {i['gate_infidelity']:.3e}, judged "
              f"{i['judged_infidelity']:.3e}: {summary(verdicts[gate])}")
    print(f"  not in it: {'; '.join(b['leaves_out'])}")
    print(f"  took {b['seconds']['total']:.1f} s", file=sys.stderr)
