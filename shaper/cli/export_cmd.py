"""``shaper export RUN``: write an earlier run's pulse for another instrument, no re-optimising."""

from __future__ import annotations

import argparse


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("run", help="a run folder (with report.json) or its report.json")
    parser.add_argument("--out", required=True, help="folder for the new waveform")
    parser.add_argument("--sample-rate", help="the instrument's rate, e.g. 2GS/s (default: the "
                                              "run's); resampled and re-checked")
    parser.add_argument("--bits", type=int, help="DAC bits (default: the recipe's)")
    parser.add_argument("--if", dest="if_frequency",
                        help="IF (single-sideband) frequency the I/Q should carry, e.g. 100MHz")
    parser.add_argument("--sideband", choices=("lower", "upper"),
                        help="lower: (I+iQ) exp(+2 pi i f_IF t), LO at f_d + f_IF (default); "
                             "upper: the opposite")
    parser.add_argument("--granularity", type=int, help="pad to a multiple of this many samples")
    parser.add_argument("--padding", type=_padding, metavar="{after,before,centre}",
                        help="where the zeros of --granularity go (\"center\" is taken too)")
    parser.add_argument("--clip", action="store_true",
                        help="clip samples over full scale (counted in export.json)")
    parser.add_argument("--predistort", action="store_true",
                        help="invert the recipe's [line] in the samples (for a pulse optimised "
                             "without the line in the loop: export.predistort)")
    parser.add_argument("--codes", action="store_true",
                        help="write integer DAC codes instead of fractions of full scale")
    from shaper.io.writers import WRITERS

    parser.add_argument("--format", default="csv", choices=tuple(WRITERS),
                        help="file format: " + "; ".join(f"{k}: {w.what}"
                                                         for k, w in WRITERS.items()))
    parser.add_argument("--bare", action="store_const", const="numbers", dest="format",
                        help=argparse.SUPPRESS)  # the earlier name of --format numbers
    parser.add_argument("--force", action="store_true",
                        help="write into a folder that holds a waveform or export this one "
                             "replaces; the replaced files are kept as *.replaced-N.*")


def _padding(text: str) -> str:
    """``--padding``: ours is "centre"; "center" means the same."""
    from shaper.recipe.instrument import PADDINGS, padding_word

    word = padding_word(text)
    if word not in PADDINGS:
        raise argparse.ArgumentTypeError(f"expected one of {', '.join(PADDINGS)}, got "
                                         f"{text!r}")
    return word


def run(args: argparse.Namespace) -> int:
    from shaper.io.heartbeat import Heartbeat

    with Heartbeat():  # judging the new file says what it does
        return _run(args)


def _run(args: argparse.Namespace) -> int:
    from shaper.io.runfolder import check_out

    check_out(args.out)
    from shaper.jobs.reexport import reexport
    from shaper.recipe.units import parse_quantity

    # the numbers are checked (range, meaning) by reexport, each error naming its option
    rate = parse_quantity(args.sample_rate, "sample rate", key="--sample-rate") \
        if args.sample_rate else None
    if_hz = parse_quantity(args.if_frequency, "frequency", key="--if") \
        if args.if_frequency else None
    report = reexport(args.run, out=args.out, sample_rate_hz=rate, bits=args.bits, if_hz=if_hz,
                      sideband=args.sideband, granularity=args.granularity,
                      padding=args.padding, clip=True if args.clip else None, format=args.format,
                      force=args.force, predistort=args.predistort,
                      codes=True if args.codes else None)
    run_fig = report["at_run_rate"]
    how = report["resampling"]
    how = "no resampling" if how == "none" else f"resampled: {how}"
    print(f"exported {report['samples']} samples at {report['sample_rate_hz'] / 1e9:g} GS/s "
          f"({how}), {report['dac_bits']}-bit, IF "
          f"{report['if_frequency_hz'] / 1e6:g} MHz: {', '.join(report['files'])} in {args.out}")
    print(f"  as played, judged: infidelity {report['infidelity']:.3e}, leakage "
          f"{report['leakage']:.3e} ({report['judged_on']}); the run at its own rate, "
          f"rotating frame: {run_fig['infidelity']:.3e}, {run_fig['leakage']:.3e}")
    from shaper.cli.text import line_summary, trust_summary
    for text in trust_summary(report.get("trust")) + line_summary(report.get("line"),
                                                                  report.get("mixer")):
        print(text)
    if report["clipped_samples"]:
        print(f"  {report['clipped_samples']} sample(s) clipped at full scale")
    print(f"CAUTION: {report['caution']}")
    from shaper.costs.verdict import summary
    print(summary(report["targets"]) + f" (judged on {report['judged_on']})")
    from shaper.cli.text import explanation_lines
    for text in explanation_lines(report):
        print(text)
    return 0 if report["targets"]["met"] else 1
