"""``shaper check RECIPE WAVEFORM``: simulate any waveform and judge it against the recipe.

Exit code 0 when the recipe's targets are met, 1 when not, 2 for bad input.
"""

from __future__ import annotations

import argparse
import contextlib
import json
import sys
from pathlib import Path


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("recipe", help="the recipe (system, gate, targets)")
    parser.add_argument("waveform", help="a .csv (ours, with its .json, or plain), .npy or .npz")
    parser.add_argument("--levels", type=int, help="levels per transmon (default: the recipe's)")
    parser.add_argument("--gate", help="with a gate-set recipe: the gate the waveform plays, "
                                       "e.g. Y/2")
    parser.add_argument("--json", action="store_true", help="print one JSON object only")
    parser.add_argument("--sample-rate", help="for files without a sidecar or a time_s "
                                              "column, e.g. 2.4GS/s")
    parser.add_argument("--full-scale", help="for files without a sidecar: the Rabi frequency "
                                             "of full scale 1.0, e.g. 60MHz")
    parser.add_argument("--detuning-span", default="5 MHz",
                        help="sensitivity scan +- this detuning (default 5 MHz)")
    parser.add_argument("--scale-span", type=float, default=0.05,
                        help="sensitivity scan +- this amplitude fraction (default 0.05)")
    parser.add_argument("--plots", metavar="DIR", help="write PNG plots into DIR")
    parser.add_argument("--t1", help="energy relaxation time per transmon, one for all or a "
                                     "comma list (e.g. '40us' or '40us,35us'); adds the "
                                     "open-system error budget")
    parser.add_argument("--t2", help="coherence time per transmon, as --t1 (T2 <= 2 T1)")


def run(args: argparse.Namespace) -> int:
    from shaper.io.heartbeat import Heartbeat

    with Heartbeat():  # a long check says what it does (on stderr: --json keeps stdout)
        return _run(args)


def _run(args: argparse.Namespace) -> int:
    from shaper.recipe import load_recipe

    if args.plots:
        from shaper.io.runfolder import check_out
        check_out(args.plots, "--plots")
    recipe = _derived(args, load_recipe(args.recipe))
    wave = _read_waveform(args, recipe)
    # Every input is read and checked: only now the helper that draws (it imports matplotlib
    # on the other core while this process loads JAX and simulates) and JAX itself.
    from shaper.jobs.painter import Painter

    with (Painter() if args.plots else contextlib.nullcontext()) as painter:
        from shaper.jobs.check import check_waveform, write_check_plots
        from shaper.jobs.next_steps import Where

        where = Where("check", file=args.recipe, waveform=args.waveform,
                      lab_frame=recipe.optimizer.lab_frame)
        verdict, curves = check_waveform(recipe, wave, detuning_span_hz=args.span_hz,
                                         scale_span=args.scale_span, where=where,
                                         progress=_say)
        verdict["waveform"] = str(args.waveform)
        if painter is not None:
            write_check_plots(Path(args.plots), verdict, curves, draw=painter.draw)
            for path, error in painter.finish().items():
                print(f"shaper check: warning: plot {path} not written: {error}",
                      file=sys.stderr)
    if args.json:
        print(json.dumps(verdict))
    else:
        _print_summary(verdict)
    return 0 if verdict["pass"] else 1


def _say(text: str) -> None:
    """A long check's progress (each lab-frame run), on stderr: stdout keeps the result."""
    print(f"shaper check: {text}", file=sys.stderr, flush=True)


MAX_RATE_HZ = 1e12  # a sample rate or full scale above a terahertz is a unit slip
MAX_DETUNING_SPAN_HZ = 1e9  # a scan of +-1 GHz is already far beyond any calibration drift


def _derived(args: argparse.Namespace, recipe):
    """The recipe as the options change it (``--gate``, ``--levels``, ``--t1``/``--t2``),
    each option checked and named in its errors with the value as typed; the spans."""
    from shaper.errors import InputError
    from shaper.recipe.derive import as_options, with_coherence, with_levels
    from shaper.recipe.units import parse_quantity

    if args.gate:
        from shaper.jobs.gateset import for_gate
        wanted = args.gate.strip().upper()
        if wanted not in [g.upper() for g in recipe.gate_set]:
            raise InputError(f"--gate {args.gate!r}: the recipe's gate set is "
                             f"{', '.join(recipe.gate_set) or 'empty (it has one target)'}")
        recipe = for_gate(recipe, wanted)
    recipe = recipe.one_gate("shaper check", "pass --gate")
    if args.levels is not None:
        with as_options({"levels": ("--levels", str(args.levels))}):
            recipe = with_levels(recipe, args.levels)
    if args.t1 or args.t2:
        def times(text, flag):
            if not text:
                return None
            parts = [part.strip() for part in text.split(",")]
            for part in parts:  # each a time, named by its option
                parse_quantity(part, "time", key=flag, hint="us")
            return parts  # as typed: errors of the recipe reader quote them so
        with as_options({"t1": ("--t1", args.t1 or ""), "t2": ("--t2", args.t2 or "")}):
            recipe = with_coherence(recipe, times(args.t1, "--t1"), times(args.t2, "--t2"))
    args.span_hz = parse_quantity(args.detuning_span, "frequency", key="--detuning-span")
    if not 0 < args.span_hz <= MAX_DETUNING_SPAN_HZ:
        raise InputError(f"--detuning-span must be a positive frequency up to 1 GHz, got "
                         f"{args.detuning_span!r}")
    if not 0 < args.scale_span < 1:
        raise InputError(f"--scale-span must be a fraction between 0 and 1 (0.05: +-5 %), "
                         f"got {args.scale_span!r}")
    return recipe


def _read_waveform(args: argparse.Namespace, recipe):
    """The waveform, its rows bounded by the time its check may take (counted before they
    are parsed); said before the check starts when it will take a while."""
    from shaper.errors import InputError
    from shaper.io.waveform_import import read_any
    from shaper.recipe.memory import (
        MAX_VERDICT_S,
        SAY_VERDICT_S,
        SENSITIVITY_SCANS,
        judging_seconds,
        minutes,
        rows_within,
    )
    from shaper.recipe.units import format_quantity, parse_quantity

    rate = parse_quantity(args.sample_rate, "sample rate", key="--sample-rate") \
        if args.sample_rate else None
    scale = parse_quantity(args.full_scale, "frequency", key="--full-scale") \
        if args.full_scale else None
    for flag, value, text, most in (("--sample-rate", rate, args.sample_rate, MAX_RATE_HZ),
                                    ("--full-scale", scale, args.full_scale, MAX_RATE_HZ)):
        if value is not None and not 0 < value <= most:
            raise InputError(f"{flag} must be positive and at most "
                             f"{format_quantity(most, 'Hz')}, got {text!r}")
    own, scales = _sidecar(args.waveform)
    for flag, value, given in (("--sample-rate", rate, {own}), ("--full-scale", scale, scales)):
        # the sidecar's values are the file's; an option saying otherwise would be ignored
        if value is not None and given and None not in given and any(
                abs(value - g) > 1e-9 * g for g in given):
            raise InputError(f"{flag} {getattr(args, flag[2:].replace('-', '_'))}: "
                             f"{args.waveform} has a sidecar that says otherwise; the option "
                             f"is for files without one")
    guess = rate or own or recipe.sample_rate_hz
    most = rows_within(recipe, guess, scans=SENSITIVITY_SCANS)
    wave = read_any(args.waveform, recipe.system, sample_rate_hz=rate, full_scale_hz=scale,
                    max_rows=most, why=f" (checking more at {format_quantity(guess, 'S/s')} "
                                       f"would take longer than {minutes(MAX_VERDICT_S)})")
    seconds = sum(judging_seconds(recipe, wave.fractions.shape[0], wave.sample_rate_hz,
                                  scans=SENSITIVITY_SCANS))
    if seconds > MAX_VERDICT_S:
        raise InputError(f"{args.waveform}: checking its {wave.fractions.shape[0]} samples "
                         f"would take at least {minutes(seconds)}; at most "
                         f"{minutes(MAX_VERDICT_S)} (a shorter file, fewer --levels, or "
                         f"verdict.lab_frame = \"off\")")
    if seconds > SAY_VERDICT_S:
        print(f"shaper check: this check will take at least {minutes(seconds)}",
              file=sys.stderr, flush=True)
    return wave


def _sidecar(waveform: str) -> tuple[float | None, set]:
    """The sample rate and full scales our sidecar gives, if the file has one and they are
    valid numbers (None and an empty set otherwise: the reader says what is wrong)."""
    from shaper.errors import ShaperError
    from shaper.io import atomic

    sidecar = Path(waveform).with_suffix(".json")
    if Path(waveform).suffix != ".csv" or not sidecar.is_file():
        return None, set()
    try:
        meta = atomic.read_json(sidecar, ShaperError, "")
    except ShaperError:
        return None, set()

    def positive(value):
        ok = isinstance(value, int | float) and not isinstance(value, bool) and value > 0
        return float(value) if ok else None
    meta = meta if isinstance(meta, dict) else {}
    channels = meta.get("channels") if isinstance(meta.get("channels"), dict) else {}
    return positive(meta.get("sample_rate_hz")), {
        positive(c.get("full_scale_rabi_hz") if isinstance(c, dict) else None)
        for c in channels.values()}


def _print_summary(v: dict) -> None:
    s = v["sensitivity"]
    print(f"{v['waveform']} on {v['recipe']} ({'x'.join(map(str, v['levels']))} levels, "
          f"{v['samples']} samples)")
    print(f"  judged: infidelity {v['infidelity']:.3e}   leakage {v['leakage']:.3e}   "
          f"({v.get('judged_on', 'rotating frame')})")
    print(f"  max population outside the qubit levels during the pulse "
          f"{v['max_population_outside_qubit_levels']:.3e} (rotating frame)")
    from shaper.cli.text import line_summary, trust_summary
    for text in trust_summary(v.get("trust")):
        print(text)
    if any(v["frame_after_rad"]) or any(v["frame_before_rad"]):
        print(f"  virtual Z: before {v['frame_before_rad']} rad, after {v['frame_after_rad']} rad")
    ends = (0, -1)
    print(f"  d(infidelity)/d(detuning) {s['d_infidelity_d_detuning_per_mhz']:.3e} per MHz; "
          + ", ".join(f"at {s['detuning_hz'][i] / 1e6:+g} MHz {s['infidelity_vs_detuning'][i]:.3e}"
                      for i in ends))
    print(f"  d(infidelity)/d(amplitude) {s['d_infidelity_d_scale_per_percent']:.3e} per %; "
          + ", ".join(f"at {100 * (s['amplitude_scale'][i] - 1):+.3g} % "
                      f"{s['infidelity_vs_scale'][i]:.3e}" for i in ends))
    t = v["targets"]
    from shaper.cli.text import coherence_lines
    for text in coherence_lines(v.get("open_system"), t["infidelity"]):
        print(text)
    for text in line_summary(v.get("line")):
        print(text)
    if v.get("ensemble"):
        print(f"  ensemble: worst infidelity {max(v['ensemble']['infidelity']):.3e}, "
              f"worst leakage {max(v['ensemble']['leakage']):.3e} "
              f"({len(v['ensemble']['infidelity'])} members)")
    print(f"  {'PASS' if v['pass'] else 'FAIL'} against infidelity <= {t['infidelity']:g}, "
          f"leakage <= {t['leakage']:g}"
          + (f", out-of-band <= {t['max_out_of_band']:g}" if t.get("max_out_of_band") else ""))
    for miss in t["missed"]:
        print(f"  missed: {miss['name']} {miss['value']:.3e} > {miss['limit']:g}")
    from shaper.cli.text import explanation_lines
    for text in explanation_lines(v):
        print(text)
