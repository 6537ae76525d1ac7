"""``shaper export``: an earlier run's pulse for another instrument, without optimising
again: resampled, IF-modulated, pre-distorted, mixer-corrected, quantised and padded as
asked, written in a registered format and judged as the chip plays it (``export.json``).
"""

from __future__ import annotations

import math
import sys
from dataclasses import replace
from pathlib import Path

from shaper.errors import InputError, ResultError, WaveformError
from shaper.io import atomic, writers
from shaper.io.runfolder import keep_replaced
from shaper.io.writers import WRITERS
from shaper.jobs.playback import Playback
from shaper.jobs.report import export_report, load_run
from shaper.jobs.waveform import make_waveform, resample
from shaper.recipe.derive import at_samples
from shaper.recipe.memory import MAX_EXPORT_SAMPLES, MAX_GRANULARITY
from shaper.recipe.units import format_quantity

MAX_SAMPLE_RATE_HZ = 1e12  # far beyond any AWG; above it a rate is a unit slip



def reexport(run_path, *, out, sample_rate_hz=None, bits=None, if_hz=None, sideband=None,
             granularity=None, padding=None, clip=None, format="csv", force=False,
             predistort=False, codes=None) -> dict:
    """Write an earlier run's pulse for another instrument; return the export report.

    The export report holds the figures at the run's own rate and of what the new file
    plays (after resampling, IF modulation, pre-distortion, mixer correction, quantisation
    and padding). ``predistort``: invert the recipe's line in the new file. Every keyword
    is checked before anything is computed; errors name the keyword (as the command
    line's option). Files the export would replace (a run's waveform, an earlier export)
    are refused unless ``force``, and then kept as ``*.replaced-N.*``.

    Raises:
        InputError: a value out of its range, ``predistort`` without a line or for a run
            optimised with the line in the loop, ``out`` naming a file.
        ResultError: ``out`` holds files this export would replace, without ``force``.
    """
    recipe, samples, run_report, _ = load_run(run_path)
    _check_predistort(recipe, predistort)
    rate = _checked_rate(recipe, sample_rate_hz)
    settings = _settings(recipe, bits=bits, if_hz=if_hz, sideband=sideband,
                         granularity=granularity, padding=padding, clip=clip, codes=codes)
    _check_size(recipe, rate, settings)
    if abs(settings.if_frequency_hz) >= rate / 2:
        raise WaveformError(f"the IF {format_quantity(settings.if_frequency_hz, 'Hz')} is not "
                            f"below the Nyquist frequency {format_quantity(rate / 2, 'Hz')}")
    out = Path(out)
    writer = _room(out, WRITERS[format].names(recipe.name, recipe.system), force)
    own, _ = make_waveform(recipe, samples, replace(recipe.export, dac_bits=None,
                                                    granularity=1, clip=True),
                           recipe.sample_rate_hz)
    original = Playback(recipe, own).played()  # the run's own figures, for comparison
    method = "none"
    if rate != recipe.sample_rate_hz:
        samples, method = resample(samples, recipe.sample_rate_hz, rate)
    target = at_samples(recipe, samples.shape[0], rate_hz=rate)
    wave, clipped = make_waveform(target, samples, settings, rate)
    playback = Playback(target, wave)
    writer()
    files = writers.write_waveform(out, recipe.name, wave, recipe.system, recipe_name=recipe.name,
                                  recipe_sha256=recipe.sha256, format=format)
    from shaper.jobs.next_steps import Where

    where = Where("export", file=str(run_report["recipe"].get("path") or "RECIPE"),
                  out=str(out), run=str(run_path), waveform=str(out / files[0].name),
                  lab_frame=recipe.optimizer.lab_frame)
    report = export_report(playback, files, original, samples, settings, rate,
                           method=method, clipped=clipped, source=run_path, recipe=recipe,
                           where=where)
    atomic.write_json(out / "export.json", report)
    return report


def _check_predistort(recipe, predistort: bool) -> None:
    if predistort and not recipe.export.predistort:
        if not recipe.line.active:
            raise InputError("--predistort needs a [line] in the run's recipe; this one has "
                             "none")
        raise InputError("--predistort: this run was optimised with its line in the loop, so "
                         "its samples already account for the line; pre-distorting them "
                         "would correct twice (set export.predistort = true in the recipe to "
                         "optimise the ideal pulse and invert the line at export)")


def _checked_rate(recipe, rate) -> float:
    if rate is None:
        return recipe.sample_rate_hz
    if not (isinstance(rate, int | float) and math.isfinite(rate) and rate > 0):
        raise InputError(f"--sample-rate must be a positive sample rate, got {rate!r}")
    if rate > MAX_SAMPLE_RATE_HZ:
        raise InputError(f"--sample-rate {format_quantity(rate, 'S/s')} is above "
                         f"{format_quantity(MAX_SAMPLE_RATE_HZ, 'S/s')}, beyond any AWG; "
                         f"check the unit (e.g. 2.4GS/s)")
    return float(rate)


def _settings(recipe, *, bits, if_hz, sideband, granularity, padding, clip, codes):
    """The recipe's export settings with the options given, each checked and named."""
    from shaper.recipe.instrument import PADDINGS, padding_word

    padding = padding_word(padding)
    if padding is not None and padding not in PADDINGS:
        raise InputError(f"--padding must be one of {', '.join(PADDINGS)}, got {padding!r}")
    if bits is not None and not (isinstance(bits, int) and 2 <= bits <= 32):
        raise InputError(f"--bits must be a whole number from 2 to 32, got {bits!r}")
    if granularity is not None and not (isinstance(granularity, int)
                                        and 1 <= granularity <= MAX_GRANULARITY):
        raise InputError(f"--granularity must be a whole number from 1 to {MAX_GRANULARITY} "
                         f"samples, got {granularity!r}")
    if if_hz is not None and not (math.isfinite(if_hz) and if_hz >= 0):
        raise InputError(f"--if must be a frequency of 0 or more, got {if_hz!r} Hz; choose "
                         f"the side of the LO with --sideband")
    if_out = recipe.export.if_frequency_hz if if_hz is None else if_hz
    if sideband is not None and not if_out:
        raise InputError("--sideband needs an IF (--if, or export.if_frequency in the "
                         "recipe): without one there is no sideband to choose")
    return replace(recipe.export, dac_bits=bits or recipe.export.dac_bits,
                   if_frequency_hz=if_out, sideband=sideband or recipe.export.sideband,
                   granularity=granularity or recipe.export.granularity,
                   padding=padding or recipe.export.padding,
                   clip=recipe.export.clip if clip is None else clip,
                   codes=recipe.export.codes if codes is None else codes)


def _check_size(recipe, rate: float, settings) -> None:
    """The new file's length and the time its verdict takes, before it is made: no more
    samples than any AWG holds, no verdict longer than
    :data:`~shaper.recipe.memory.MAX_VERDICT_S` (said before it starts past a minute)."""
    from shaper.recipe.memory import MAX_VERDICT_S, SAY_VERDICT_S, judging_seconds, minutes

    granularity = settings.granularity
    n = math.ceil(recipe.duration_s * rate - 1e-9)
    padded = -(-n // granularity) * granularity
    option, value = ("--sample-rate", format_quantity(rate, "S/s")) \
        if padded < 2 * n else ("--granularity", str(granularity))
    if padded > MAX_EXPORT_SAMPLES:
        raise InputError(f"{option} {value}: the {format_quantity(recipe.duration_s, 's')} "
                         f"pulse would take {padded} samples, more than any AWG memory "
                         f"({MAX_EXPORT_SAMPLES})")
    seconds = sum(judging_seconds(recipe, n, rate, export=settings))
    if seconds > MAX_VERDICT_S:
        raise InputError(f"{option} {value}: judging the new file ({padded} samples) would "
                         f"take at least {minutes(seconds)}; at most {minutes(MAX_VERDICT_S)}")
    if seconds > SAY_VERDICT_S:
        print(f"shaper export: judging the new file will take at least {minutes(seconds)}",
              file=sys.stderr, flush=True)


def _room(out: Path, names: list[str], force: bool):
    """Refuse an ``out`` that is a file, or that holds files this export would replace
    (without ``force``); returns what makes the room just before writing (so nothing is
    moved if the export fails before that)."""
    if out.exists() and not out.is_dir():
        raise InputError(f"--out {out} is a file; give a folder for the new waveform")
    taken = [n for n in [*names, "export.json"] if (out / n).exists()]
    if taken and not force:
        held = "a run (report.json) whose waveform" if (out / "report.json").exists() \
            else "files that"
        raise ResultError(f"--out {out} holds {held} this export would replace "
                          f"({', '.join(taken)}); choose another --out (out=), or pass "
                          f"--force (force=True) to keep them as *.replaced-N.* and write the "
                          f"new ones")

    def make() -> None:
        try:
            out.mkdir(parents=True, exist_ok=True)
        except (FileExistsError, NotADirectoryError):
            raise InputError(f"--out {out}: part of the path is a file") from None
        keep_replaced(out, taken)
    return make
