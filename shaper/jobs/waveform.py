"""From samples in Hz to the waveform file's contents: what the AWG plays.

``make_waveform`` pads, IF-modulates, pre-distorts, corrects the mixer, scales to full
scale and quantises, in that order; ``resample`` changes the rate for another instrument.
The files themselves are written by :mod:`shaper.io.writers`; ``shaper export`` (an
earlier run for another instrument) is :mod:`shaper.jobs.reexport`; how a file plays on
the chip is :mod:`shaper.jobs.playback`.
"""

from __future__ import annotations

import math

import numpy as np

from shaper.errors import WaveformError
from shaper.io import waveio
from shaper.recipe import ExportSettings, Recipe
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
    """Every lined column inverted through its line; the worst residual of them. The line
    alone: the instrument's output filter ([awg]) is in the optimiser's chain of a
    pre-distorting recipe (:func:`shaper.signal.chain.for_recipe`) and has no stable
    inverse at the AWG's rate."""
    from shaper.signal.line import predistort

    out, worst = np.array(played, float), 0.0
    channel_of = {c: ch.name for ch in recipe.system.channels for c in ch.columns}
    for column, stages in line_columns(recipe, awg=False):
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
    for column, stages in line_columns(recipe, awg=False):  # the line that was inverted
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


