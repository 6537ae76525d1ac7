"""Why a file judged apart from its run missed, from what its command found: a check's
own scans (the file does best at another detuning or amplitude than the recipe's, a
calibrated textbook pulse of its length does better) and an export's comparison with its
run (the resampling, the new instrument). Part of :mod:`shaper.jobs.explain`; nothing is
simulated here."""

from __future__ import annotations

from pathlib import Path

from shaper.jobs import next_steps as steps
from shaper.jobs.next_steps import Step
from shaper.jobs.reasons import Context, Reason, figures, joined, over, pair, reason


def scan_reasons(c: Context) -> list[Reason]:
    """A check's own scans (README, "shaper check"): the file does best at another
    detuning or amplitude than the recipe's, or a calibrated textbook pulse of the same
    length does better than the file."""
    report, limits = c.report, c.limits
    scans = report.get("sensitivity") or {}
    rotating = (report.get("trust") or {}).get("rotating_frame") or figures(report)
    if not scans or not over(rotating, limits) or c.where.command != "check":
        return []
    out = []
    for axis, values, unit in (("detuning_hz", "infidelity_vs_detuning", "MHz"),
                               ("amplitude_scale", "infidelity_vs_scale", "")):
        xs, ys = scans.get(axis) or [], scans.get(values) or []
        if len(xs) < 3:
            continue
        best = min(range(len(ys)), key=ys.__getitem__)
        middle = len(xs) // 2
        if ys[best] > limits[0] or abs(best - middle) < 2:
            continue
        if unit:
            out.append(reason(
                "detuning", f"the file does best at a detuning of {xs[best] / 1e6:+.3g} MHz "
                            f"(infidelity {ys[best]:.2e} there, {rotating['infidelity']:.2e} "
                            f"at the recipe's frequency): it was made for a qubit about that "
                            f"far from the recipe's",
                joined(Step(f"if the qubit is there, set system.qubit_frequency (or the drive "
                            f"frequency) {xs[best] / 1e6:+.3g} MHz from the recipe's in "
                            f"{c.where.file} and check again"),
                       steps.step("otherwise a pulse for the recipe's qubit: {0}",
                                  steps.shaper("optimize", c.where.file, "--out",
                                               steps.fresh(c.where, "run"))))))
        else:
            out.append(reason(
                "amplitude", f"the file does best with its amplitude scaled by "
                             f"{xs[best]:.4g} (infidelity {ys[best]:.2e} there, "
                             f"{rotating['infidelity']:.2e} as it is): its full scale, or "
                             f"the recipe's pulse.max_rabi, is off by that much",
                joined(Step("the file's full scale (its sidecar, or --full-scale for a plain "
                            "file) or the recipe's max_rabi corrected by that factor"),
                       steps.step("a pulse for this recipe: {0}",
                                  steps.shaper("optimize", c.where.file, "--out",
                                               steps.fresh(c.where, "run"))))))
    textbook = _textbook_reason(c, rotating)
    return out + ([textbook] if textbook else [])


def _textbook_reason(c: Context, rotating: dict) -> Reason | None:
    """A calibrated textbook pulse of the same length meets the targets in the rotating
    frame where the checked file does not: the file is not the pulse for this recipe."""
    pulses = c.report.get("textbook_pulses") or {}
    met = [(name, p) for name, p in pulses.items()
           if isinstance(p, dict) and "infidelity" in p and not over(p, c.limits)]
    if not met:
        return None
    name, best = min(met, key=lambda item: item[1]["infidelity"])
    return reason("textbook comparison",
                  f"a calibrated {name} pulse of the same length reaches {pair(best)} in the "
                  f"rotating frame, this file {pair(rotating)}: it is not a good pulse for "
                  f"this recipe",
                  steps.step("a pulse made for this recipe: {0}",
                             steps.shaper("optimize", c.where.file, "--out",
                                          steps.fresh(c.where, "run"))))


def export_reasons(c: Context) -> list[Reason]:
    """An export that misses where its run met: the resampling or the new instrument."""
    report, limits, where = c.report, c.limits, c.where
    run, new = report["at_run_rate"], figures(report)
    if over(run, limits) or not over((report.get("trust") or {}).get("rotating_frame")
                                       or new, limits):
        return []
    if report.get("resampling", "none") != "none" and not report["resampling"].startswith(
            "hold"):
        rate = report.get("sample_rate_hz", 0)
        first = Path(where.out or ".", report.get("waveform", "waveform.csv")).resolve()
        return [reason("resampling",
                       f"the run meets the targets at its own rate ({pair(run)}); resampled "
                       f"({report['resampling']}) to {rate / 1e9:g} GS/s it reaches "
                       f"{pair(new)}",
                       steps.edit_then(where, f"optimise at that rate, starting from this "
                                              f"file: set pulse.sample_rate = "
                                              f"\"{rate / 1e9:g} GS/s\" and optimizer.initial "
                                              f"= \"{first}\" (in the recipe or a copy of it)",
                                       "at-rate"))]
    bits = report.get("dac_bits") or 16
    more = steps.step("more DAC bits: {0}",
                      steps.shaper("export", where.run, "--out", where.out, "--bits",
                                   min(32, bits + 4), "--force")) \
        if bits < 32 and where.run and where.out else Step(
            f"more DAC bits (--bits {min(32, bits + 4)})" if bits < 32 else "a finer DAC")
    if_mhz = report.get("if_frequency_hz", 0) / 1e6
    at_if = Step(f"optimise with the IF in the recipe: export.if_frequency = \"{if_mhz:g} MHz\""
                 f" (the instrument's output filter then acts on the modulated samples in the "
                 f"optimiser's model too: its phase and gain at the IF move the drive)")
    return [reason("the new instrument",
                   f"the run meets the targets ({pair(run)}); the new file reaches "
                   f"{pair(new)} ({report.get('dac_bits')}-bit, IF {if_mhz:g} MHz)",
                   joined(at_if, more) if if_mhz else
                   joined(more, "optimise with the instrument's settings in the recipe's "
                                "[export]"))]
