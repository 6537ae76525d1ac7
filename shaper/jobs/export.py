"""From samples in Hz to what the AWG plays, and back: export, re-export, resample.

``make_waveform`` pads, IF-modulates, scales to full scale and quantises, in that order;
``simulate_played`` simulates a :class:`~shaper.io.waveio.Waveform` exactly as the
instrument plays it (held samples; with an IF, the held *modulated* samples on a
sub-sample grid). ``reexport`` turns an earlier run into a waveform for another
instrument without optimising again.
"""

from __future__ import annotations

import math
from dataclasses import replace
from pathlib import Path

import numpy as np

from shaper.costs.problem import has_ensemble, qubit_count, recipe_layout, waveform_problem
from shaper.costs.verdict import Verdict, judge
from shaper.errors import ResultError, WaveformError
from shaper.io import atomic, waveio
from shaper.physics.simulation import Simulation, simulate
from shaper.recipe import ExportSettings, Recipe, load_recipe
from shaper.recipe.units import format_quantity
from shaper.signal.chain import for_waveform
from shaper.signal.modulation import modulate


def make_waveform(recipe: Recipe, samples_hz: np.ndarray, settings: ExportSettings,
                  sample_rate_hz: float) -> tuple[waveio.Waveform, int]:
    """Samples (Hz, baseband, pulse only) -> the waveform file's contents.

    Returns:
        (waveform, number of samples clipped).

    Raises:
        WaveformError: a sample over full scale and ``settings.clip`` is off.
    """
    system = recipe.system
    padded, start = waveio.pad(np.asarray(samples_hz, float), settings.granularity,
                               settings.padding)
    if settings.if_frequency_hz:
        padded = modulate(padded, recipe.system.iq_columns(), settings.if_frequency_hz,
                          1 / sample_rate_hz, settings.sideband, start=start)
    fractions, clipped = waveio.to_fractions(padded, system, settings.full_scale_hz,
                                             clip=settings.clip)
    bound = np.array([min(1.0, recipe.limits_hz[c.name] / settings.full_scale_hz[c.name])
                      for c in system.channels if c.kind == "iq"])
    if settings.dac_bits:  # None: keep full precision (the optimiser's own samples)
        fractions = waveio.quantise(fractions, settings.dac_bits, bound=bound,
                                    pairs=recipe.system.iq_columns())
    return waveio.Waveform(fractions=fractions, sample_rate_hz=sample_rate_hz,
                           full_scale_hz=dict(settings.full_scale_hz),
                           column_names=system.control_names, pulse_start=start,
                           bits=settings.dac_bits, if_frequency_hz=settings.if_frequency_hz,
                           sideband=settings.sideband), clipped


def simulate_played(recipe: Recipe, wave: waveio.Waveform) -> Simulation:
    """Figures of a waveform as the instrument plays it, on the recipe's system.

    With an IF, the held modulated samples are simulated on ``s`` and ``2s`` sub-steps per
    sample and the figures extrapolated (Richardson; the sub-step error falls as 1/s^2),
    which makes them exact to about 1e-12 here.
    """
    samples = wave.to_hz(recipe.system)
    chain = for_waveform(recipe, wave)
    flags = dict(virtual_z=recipe.virtual_z, method=recipe.optimizer.propagator)
    if chain.identity:
        return simulate(recipe.system, recipe.target, samples, chain.dt_s, **flags)
    coarse, fine = (simulate(recipe.system, recipe.target, c(samples), c.dt_s, **flags)
                    for c in (chain, chain.finer(2)))
    steps = chain.steps
    fidelity = fine.fidelity + (fine.fidelity - coarse.fidelity) / 3
    leak = fine.leakage + (fine.leakage - coarse.leakage) / 3
    return replace(fine, fidelity=fidelity, infidelity=1 - fidelity, leakage=leak,
                   populations=fine.populations[:, ::2 * steps])


def open_played(recipe: Recipe, wave: waveio.Waveform,
                played: Simulation | None = None) -> dict | None:
    """The error budget of a waveform as played on the open system (README,
    "Decoherence"): channel infidelity and leakage, coherent and incoherent error.
    None when the recipe's system has no coherence times or the target is a state."""
    if not recipe.system.collapse or not recipe.target.is_gate:
        return None
    from shaper.physics.simulation import simulate_open

    chain = for_waveform(recipe, wave)
    played = played or simulate_played(recipe, wave)
    result = simulate_open(recipe.system, recipe.target, chain(wave.to_hz(recipe.system)),
                           chain.dt_s, virtual_z=recipe.virtual_z, closed=played)
    return {**result.figures(), "coherence_times": recipe.system.coherence}


def baseband(recipe: Recipe, wave: waveio.Waveform) -> np.ndarray:
    """The waveform's samples in Hz without its IF (the envelope the optimiser shaped)."""
    samples = wave.to_hz(recipe.system)
    if wave.if_frequency_hz:
        from shaper.signal.modulation import demodulate
        samples = demodulate(samples, recipe.system.iq_columns(), wave.if_frequency_hz,
                             1 / wave.sample_rate_hz, wave.sideband, start=wave.pulse_start)
    return samples


def band_fraction(recipe: Recipe, wave: waveio.Waveform) -> float | None:
    """The waveform's out-of-band fraction, measured as the bandwidth cost measures it: on
    the baseband envelope (relative to the carrier), :func:`shaper.costs.out_of_band`.
    None when the recipe sets no bandwidth."""
    if not recipe.bandwidth_hz:
        return None
    from shaper.costs import out_of_band
    layout = recipe_layout(recipe)
    return float(out_of_band(baseband(recipe, wave), 1 / wave.sample_rate_hz,
                             recipe.bandwidth_hz, layout.iq_columns, layout.baseband_columns))


def member_figures(recipe: Recipe, wave: waveio.Waveform) -> tuple[list, list] | None:
    """Infidelity and leakage of every ensemble member on the waveform as the DAC plays it.

    None without an ensemble. With an IF the members are simulated on the sub-steps of
    :func:`shaper.physics.grid.substeps` (accurate to about 1e-9; the nominal figures of
    :func:`simulate_played` are extrapolated further).
    """
    if not has_ensemble(recipe):
        return None
    import jax
    import jax.numpy as jnp

    from shaper.costs import evaluate_members
    samples = wave.to_hz(recipe.system)
    chain = for_waveform(recipe, wave)
    problem = waveform_problem(recipe, samples.shape[0], steps=chain.steps, dt=chain.period_s)
    flags = dict(qubits=qubit_count(recipe), is_gate=recipe.target.is_gate,
                 virtual_z=recipe.virtual_z, method=recipe.optimizer.propagator,
                 drive=None if chain.identity else chain)
    scores = jax.jit(lambda x, p: evaluate_members(x, p, **flags))(jnp.asarray(samples), problem)
    fid, leak = np.asarray(scores.members.fidelity), np.asarray(scores.members.leakage)
    return (1.0 - fid[1:]).tolist(), leak[1:].tolist()


def judge_waveform(recipe: Recipe, wave: waveio.Waveform, played: Simulation,
                   members: tuple[list, list] | None = None) -> Verdict:
    """The one rule (:mod:`shaper.costs.verdict`) on a waveform as played, without margin.

    ``members``: the ensemble's figures if already computed (:func:`member_figures`).
    """
    members = members or member_figures(recipe, wave) or (None, None)
    return judge(recipe, infidelity=played.infidelity, leakage=played.leakage,
                 member_infidelities=members[0], member_leakages=members[1],
                 out_of_band=band_fraction(recipe, wave))


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
    recipe = _at_rate(recipe, wave.sample_rate_hz, n)
    return recipe, samples, report, report_path.parent


def _at_rate(recipe: Recipe, rate: float, n: int) -> Recipe:
    return replace(recipe, sample_rate_hz=rate, samples=n, duration_s=n / rate)


def reexport(run_path, *, out, sample_rate_hz=None, bits=None, if_hz=None, sideband=None,
             granularity=None, padding=None, clip=None, bare=False, force=False) -> dict:
    """Write an earlier run's pulse for another instrument; return the export report.

    The export report holds the figures at the run's own rate and of what the new file
    plays (after resampling, IF modulation, quantisation and padding).
    """
    recipe, samples, _, _ = load_run(run_path)
    out = Path(out)
    if (out / "export.json").exists() and not force:
        raise ResultError(f"{out} already holds an export (export.json); choose another --out "
                          f"or pass --force")
    out.mkdir(parents=True, exist_ok=True)
    original = simulate(recipe.system, recipe.target, samples, recipe.dt,
                        virtual_z=recipe.virtual_z)
    rate = sample_rate_hz or recipe.sample_rate_hz
    method = "none"
    if rate != recipe.sample_rate_hz:
        samples, method = resample(samples, recipe.sample_rate_hz, rate)
    target = _at_rate(recipe, rate, samples.shape[0])
    settings = replace(recipe.export,
                       dac_bits=bits or recipe.export.dac_bits,
                       if_frequency_hz=recipe.export.if_frequency_hz if if_hz is None else if_hz,
                       sideband=sideband or recipe.export.sideband,
                       granularity=granularity or recipe.export.granularity,
                       padding=padding or recipe.export.padding,
                       clip=recipe.export.clip if clip is None else clip)
    if abs(settings.if_frequency_hz) >= rate / 2:
        raise WaveformError(f"the IF {format_quantity(settings.if_frequency_hz, 'Hz')} is not "
                            f"below the Nyquist frequency {format_quantity(rate / 2, 'Hz')}")
    wave, clipped = make_waveform(target, samples, settings, rate)
    played = simulate_played(target, wave)
    verdict = judge_waveform(target, wave, played)
    files = waveio.write_waveform(out, recipe.name, wave, recipe.system, recipe_name=recipe.name,
                                  recipe_sha256=recipe.sha256, bare=bare)
    report = {**played.figures(), "waveform": files[0].name, "files": [f.name for f in files],
              "sample_rate_hz": rate, "resampling": method, "samples": wave.fractions.shape[0],
              "dac_bits": settings.dac_bits, "if_frequency_hz": settings.if_frequency_hz,
              "sideband": settings.sideband, "clipped_samples": clipped,
              "at_run_rate": original.figures(), "source": str(run_path),
              "targets": {"infidelity": recipe.optimizer.target_infidelity,
                          "leakage": recipe.optimizer.target_leakage, **verdict.as_dict()},
              "caution": waveio.CAUTION}
    atomic.write_json(out / "export.json", report)
    return report
