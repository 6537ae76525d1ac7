"""From samples in Hz to what the AWG plays: export, re-export, resample.

``make_waveform`` pads, IF-modulates, pre-distorts, corrects the mixer, scales to full
scale and quantises, in that order; ``reexport`` turns an earlier run into a waveform for
another instrument without optimising again. How a file plays on the chip is
:mod:`shaper.jobs.playback`.
"""

from __future__ import annotations

import math
from dataclasses import replace
from pathlib import Path

import numpy as np

from shaper.errors import InputError, ResultError, WaveformError
from shaper.io import atomic, waveio
from shaper.jobs.playback import Playback, baseband, simulate_played
from shaper.recipe import ExportSettings, Recipe, load_recipe
from shaper.recipe.derive import at_samples
from shaper.recipe.units import format_quantity
from shaper.signal.chain import line_columns
from shaper.signal.mixer import Mixer
from shaper.signal.modulation import modulate


def make_waveform(recipe: Recipe, samples_hz: np.ndarray, settings: ExportSettings,
                  sample_rate_hz: float) -> tuple[waveio.Waveform, int]:
    """Samples (Hz, baseband, pulse only) -> the waveform file's contents.

    In order: pad, IF-modulate, pre-distort (``settings.predistort``: invert the recipe's
    line, :func:`shaper.signal.line.predistort`), correct the mixer (``settings.mixer``,
    :mod:`shaper.signal.mixer`), scale to full scale, quantise.

    Returns:
        (waveform, number of samples clipped).

    Raises:
        WaveformError: a sample over full scale and ``settings.clip`` is off, or a
            pre-distorted or mixer-corrected sample over full scale (never clipped).
    """
    system = recipe.system
    padded, start = waveio.pad(np.asarray(samples_hz, float), settings.granularity,
                               settings.padding)
    if settings.if_frequency_hz:
        padded = modulate(padded, recipe.system.iq_columns(), settings.if_frequency_hz,
                          1 / sample_rate_hz, settings.sideband, start=start)
    residual, wanted = None, padded
    if settings.predistort:
        padded, residual = _predistorted(recipe, padded, sample_rate_hz)
    mixer = Mixer.for_recipe(recipe, settings.full_scale_hz) if settings.mixer else None
    if mixer is not None:
        padded = mixer.corrected(padded)
    if residual is not None or mixer is not None:
        scales = waveio.column_scales(system, settings.full_scale_hz)
        peak = np.max(np.abs(padded) / scales[None, :], axis=0, initial=0.0)
        for c in np.flatnonzero(peak > 1 + 1e-12):
            what = " and ".join(w for w, on in (("pre-distortion", residual is not None),
                                                ("the mixer correction", mixer is not None))
                                if on)
            raise WaveformError(f"{what} needs {peak[c]:.3f} of full scale on column "
                                f"{system.control_names[c]}; it is never clipped: lower "
                                f"the pulse's limit (pulse.max_rabi / max_flux) or raise "
                                f"export.full_scale")
    fractions, clipped = waveio.to_fractions(padded, system, settings.full_scale_hz,
                                             clip=settings.clip)
    bound = np.array([min(1.0, recipe.limits_hz[c.name] / settings.full_scale_hz[c.name])
                      if residual is None and mixer is None else 1.0
                      for c in system.channels if c.kind == "iq"])
    if settings.dac_bits:  # None: keep full precision (the optimiser's own samples)
        fractions = waveio.quantise(fractions, settings.dac_bits, bound=bound,
                                    pairs=recipe.system.iq_columns())
    if residual is not None:  # as the file plays: after quantisation (and the mixer)
        residual = _residual(recipe, fractions, settings, sample_rate_hz, wanted)
    return waveio.Waveform(fractions=fractions, sample_rate_hz=sample_rate_hz,
                           full_scale_hz=dict(settings.full_scale_hz),
                           column_names=system.control_names, pulse_start=start,
                           bits=settings.dac_bits, if_frequency_hz=settings.if_frequency_hz,
                           sideband=settings.sideband, predistorted=settings.predistort,
                           mixer_corrected=mixer is not None,
                           codes=settings.codes and settings.dac_bits is not None,
                           predistortion_residual=residual), clipped


def _predistorted(recipe: Recipe, played: np.ndarray, rate: float) -> tuple[np.ndarray, float]:
    """Every lined column inverted through its line; the worst residual of them."""
    from shaper.signal.line import predistort

    out, worst = np.array(played, float), 0.0
    channel_of = {c: ch.name for ch in recipe.system.channels for c in ch.columns}
    for column, stages in line_columns(recipe):
        if not np.any(played[:, column]):
            continue
        out[:, column], residual = predistort(played[:, column], stages, 1 / rate,
                                              max(recipe.line.oversample, 1),
                                              channel=channel_of[column])
        worst = max(worst, residual)
    return out, worst


def _residual(recipe: Recipe, fractions: np.ndarray, settings: ExportSettings, rate: float,
              wanted: np.ndarray) -> float:
    """Largest error of the line's output (per sample) against ``wanted``, relative to the
    largest intended sample of the lined columns, for the quantised samples as the mixer
    plays them."""
    from shaper.signal.line import through_line

    played = fractions * waveio.column_scales(recipe.system, settings.full_scale_hz)[None, :]
    if settings.mixer:
        played = Mixer.for_recipe(recipe, settings.full_scale_hz).plays(played)
    worst, peak = 0.0, 0.0
    for column, stages in line_columns(recipe):
        peak = max(peak, float(np.max(np.abs(wanted[:, column]), initial=0.0)))
        out = through_line(played[:, column], stages, 1 / rate,
                           max(recipe.line.oversample, 1))
        worst = max(worst, float(np.max(np.abs(out - wanted[:, column]))))
    return worst / peak if peak > 0 else 0.0


def check_predistortion(recipe: Recipe) -> None:
    """Refuse, before optimising, a line that pre-distortion cannot invert: a unit step of
    the exported length goes through every lined channel's inverse.

    Raises:
        InputError: naming the channel's ``line.<channel>`` key.
    """
    if not recipe.export.predistort:
        return
    n = -(-recipe.samples // recipe.export.granularity) * recipe.export.granularity
    step = np.ones((n, len(recipe.system.control_names)))
    _predistorted(recipe, step, recipe.sample_rate_hz)


def mixer_figures(recipe: Recipe, samples_hz: np.ndarray, settings: ExportSettings,
                  rate: float) -> dict | None:
    """Figures of the same pulse exported *without* the mixer correction and played through
    the recipe's mixer: what the correction is worth. None without a mixer."""
    if not settings.mixer:
        return None
    plain, _ = make_waveform(recipe, samples_hz, replace(settings, mixer={}), rate)
    played = simulate_played(recipe, plain)
    return {"channels": {c: vars(m) for c, m in settings.mixer.items()},
            "uncorrected": {"infidelity": played.infidelity, "leakage": played.leakage}}


def resample(samples_hz: np.ndarray, rate_in: float, rate_out: float) -> tuple[np.ndarray, str]:
    """The piecewise-constant pulse at another sample rate.

    An integer multiple of the rate repeats each sample (exact). Otherwise each new sample
    is the mean of the old pulse over its interval ("box" resampling): the pulse area,
    and so the rotation angle to first order, is kept exactly; the last sample is padded
    with zeros where the duration is not a whole number of new samples.
    """
    ratio = rate_out / rate_in
    if abs(ratio - round(ratio)) < 1e-9 and round(ratio) >= 1:
        return np.repeat(samples_hz, round(ratio), axis=0), f"hold x{round(ratio)} (exact)"
    n_in = samples_hz.shape[0]
    duration = n_in / rate_in
    n_out = math.ceil(duration * rate_out - 1e-9)
    edges_in = np.arange(n_in + 1) / rate_in
    area = np.concatenate([np.zeros((1, samples_hz.shape[1])),
                           np.cumsum(samples_hz / rate_in, axis=0)])
    edges_out = np.arange(n_out + 1) / rate_out
    cumulative = np.stack([np.interp(edges_out, edges_in, area[:, k])
                           for k in range(samples_hz.shape[1])], axis=1)
    return np.diff(cumulative, axis=0) * rate_out, "box average (area-preserving)"


def load_run(path: str | Path) -> tuple[Recipe, np.ndarray, dict, Path]:
    """An earlier run: its recipe, pulse samples (Hz, baseband), report and folder."""
    path = Path(path)
    report_path = path / "report.json" if path.is_dir() else path
    report = atomic.read_json(report_path, ResultError,
                              "no report.json here; give a run folder or its report.json")
    for key in ("recipe", "waveform"):
        if key not in report:
            raise ResultError(f"{report_path}: missing key {key!r}; not a shaper report")
    recipe = load_recipe(report["recipe"]["content"])
    wave = waveio.read_waveform(report_path.parent / report["waveform"])
    samples = baseband(recipe, wave)
    n = int(report.get("pulse_samples", samples.shape[0]))
    samples = samples[wave.pulse_start:wave.pulse_start + n]
    recipe = at_samples(recipe, n, rate_hz=wave.sample_rate_hz)
    return recipe, samples, report, report_path.parent


def reexport(run_path, *, out, sample_rate_hz=None, bits=None, if_hz=None, sideband=None,
             granularity=None, padding=None, clip=None, format="csv", force=False,
             predistort=False, codes=None) -> dict:
    """Write an earlier run's pulse for another instrument; return the export report.

    The export report holds the figures at the run's own rate and of what the new file
    plays (after resampling, IF modulation, pre-distortion, mixer correction, quantisation
    and padding). ``predistort``: invert the recipe's line in the new file.

    Raises:
        InputError: ``predistort`` without a line, or for a run that was optimised with the
            line in the loop (its samples already account for the line).
    """
    recipe, samples, _, _ = load_run(run_path)
    if predistort and not recipe.export.predistort:
        if not recipe.line.active:
            raise InputError("--predistort needs a [line] in the run's recipe; this one has "
                             "none")
        raise InputError("--predistort: this run was optimised with its line in the loop, so "
                         "its samples already account for the line; pre-distorting them "
                         "would correct twice (set export.predistort = true in the recipe to "
                         "optimise the ideal pulse and invert the line at export)")
    out = Path(out)
    if (out / "export.json").exists() and not force:
        raise ResultError(f"{out} already holds an export (export.json); choose another --out "
                          f"or pass --force")
    out.mkdir(parents=True, exist_ok=True)
    own, _ = make_waveform(recipe, samples, replace(recipe.export, dac_bits=None,
                                                    granularity=1, clip=True),
                           recipe.sample_rate_hz)
    original = simulate_played(recipe, own)  # the run's own figures, for comparison
    rate = sample_rate_hz or recipe.sample_rate_hz
    method = "none"
    if rate != recipe.sample_rate_hz:
        samples, method = resample(samples, recipe.sample_rate_hz, rate)
    target = at_samples(recipe, samples.shape[0], rate_hz=rate)
    settings = replace(recipe.export,
                       dac_bits=bits or recipe.export.dac_bits,
                       if_frequency_hz=recipe.export.if_frequency_hz if if_hz is None else if_hz,
                       sideband=sideband or recipe.export.sideband,
                       granularity=granularity or recipe.export.granularity,
                       padding=padding or recipe.export.padding,
                       clip=recipe.export.clip if clip is None else clip,
                       codes=recipe.export.codes if codes is None else codes)
    if abs(settings.if_frequency_hz) >= rate / 2:
        raise WaveformError(f"the IF {format_quantity(settings.if_frequency_hz, 'Hz')} is not "
                            f"below the Nyquist frequency {format_quantity(rate / 2, 'Hz')}")
    wave, clipped = make_waveform(target, samples, settings, rate)
    playback = Playback(target, wave)
    played, verdict = playback.nominal, playback.verdict()
    files = waveio.write_waveform(out, recipe.name, wave, recipe.system, recipe_name=recipe.name,
                                  recipe_sha256=recipe.sha256, format=format)
    report = {**played.figures(), "waveform": files[0].name, "files": [f.name for f in files],
              "sample_rate_hz": rate, "resampling": method, "samples": wave.fractions.shape[0],
              "dac_bits": settings.dac_bits, "if_frequency_hz": settings.if_frequency_hz,
              "sideband": settings.sideband, "clipped_samples": clipped,
              "values": "dac_codes" if wave.codes else "fractions",
              "trust": playback.trust_block(),
              "line": playback.line_block(),
              "mixer": mixer_figures(target, samples, settings, rate),
              "at_run_rate": original.figures(), "source": str(run_path),
              "targets": {"infidelity": recipe.optimizer.target_infidelity,
                          "leakage": recipe.optimizer.target_leakage, **verdict.as_dict()},
              "caution": waveio.CAUTION}
    atomic.write_json(out / "export.json", report)
    return report
