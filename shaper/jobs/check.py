"""The verdict on any waveform: fidelity, leakage, level populations and fragility.

``check_waveform`` simulates a waveform (from any source) on a recipe's system,
optionally with more transmon levels than the recipe keeps, and reports the figures
of the README's "Conventions" (figures of merit), the population of every level at the
end and its maximum during the pulse, the virtual Z angles, pass or fail against the
recipe's targets, and the infidelity's response to a detuning offset and an amplitude
scale error.
"""

from __future__ import annotations

import numpy as np

from shaper.io.waveio import Waveform
from shaper.jobs.explain import explain, shortest_duration
from shaper.jobs.next_steps import Where
from shaper.jobs.playback import Playback, system_model
from shaper.jobs.report import headline
from shaper.recipe import Recipe
from shaper.recipe.derive import with_levels


def check_waveform(recipe: Recipe, wave: Waveform, *, levels: int | None = None,
                   detuning_span_hz: float = 5e6, scale_span: float = 0.05,
                   points: int = 21, where: Where | None = None,
                   progress=None) -> tuple[dict, dict]:
    """Simulate ``wave`` on the recipe's system and judge it.

    Args:
        recipe: the system, target, targets (and virtual Z setting).
        wave: the waveform, its columns in the recipe's control order.
        levels: keep this many levels per transmon instead of the recipe's.
        detuning_span_hz, scale_span: the sensitivity scans cover +-span.
        points: points per scan.
        where: where a miss's next steps must run (default: a check of the recipe's file).
        progress: called with a line as the long figures run (the lab frame's runs).

    Returns:
        (verdict, curves): ``verdict`` is JSON-ready (the judged fidelity, infidelity and
        leakage with ``judged_on``, every model's in ``trust``, populations, sensitivity,
        pass); ``curves`` holds arrays for plots.
    """
    if levels is not None:
        recipe = with_levels(recipe, levels)
    system = recipe.system
    samples = wave.to_hz(system)
    dt = 1.0 / wave.sample_rate_hz
    playback = Playback(recipe, wave, progress=progress)
    sim = playback.nominal
    populations, worst_outside = _populations(system, sim)
    sens = playback.sensitivity(
                        np.linspace(-detuning_span_hz, detuning_span_hz, points),
                        np.linspace(1 - scale_span, 1 + scale_span, points))
    o = recipe.optimizer
    members = playback.members
    judged = playback.verdict()
    verdict = {
        **headline(playback),
        "pass": judged.met,
        "targets": {"infidelity": o.target_infidelity, "leakage": o.target_leakage,
                    "max_out_of_band": recipe.max_out_of_band if recipe.bandwidth_hz else None,
                    **judged.as_dict()},  # met, missed, judged, judged_on
        "ensemble": None if members is None else {"infidelity": members[0],
                                                  "leakage": members[1]},
        "trust": playback.trust_block(),
        "system_model": system_model(recipe.system),
        "open_system": playback.open_system,
        "line": playback.line_block(),
        "levels": list(system.dims),
        "samples": int(samples.shape[0]),
        "sample_rate_hz": wave.sample_rate_hz,
        "max_population_outside_qubit_levels": worst_outside,
        "populations": populations,
        "sensitivity": sens,
        "recipe": recipe.name,
    }
    if not judged.met:
        verdict["textbook_pulses"] = _textbook(recipe, wave, playback)
    verdict["explanation"] = _explanation(recipe, verdict, samples.shape[0] /
                                          wave.sample_rate_hz, where)
    return verdict, {"wave": wave, "dt": dt, "simulation": sim, "recipe": recipe}


def _explanation(recipe: Recipe, verdict: dict, duration_s: float,
                 where: Where | None) -> list[dict]:
    """Why a check missed and what to run next (:mod:`shaper.jobs.explain`), from its own
    figures and scans; the next steps for ``where`` (default a check of the recipe)."""
    where = where or Where("check", file=recipe.path or recipe.name,
                           lab_frame=recipe.optimizer.lab_frame)
    return [r._asdict() for r in explain(
        {**verdict, "duration_s": duration_s, "recipe": {"content": recipe.raw}},
        where=where, shortest_s=shortest_duration(recipe))]


def _textbook(recipe: Recipe, wave: Waveform, playback: Playback) -> dict | None:
    """A missed check's textbook comparison (:func:`shaper.jobs.baselines.textbook_pulses`:
    the calibrated Gaussian and DRAG pulses of the file's length, rotating frame), where
    the file misses in the rotating frame itself and the gate is a one-qubit rotation;
    None otherwise (or where the file's length is no whole pulse of the recipe)."""
    o = recipe.optimizer
    sim = playback.nominal
    if sim.infidelity <= o.target_infidelity and sim.leakage <= o.target_leakage:
        return None
    from shaper.errors import ShaperError
    from shaper.recipe.derive import at_samples

    try:
        at_length = at_samples(recipe, wave.fractions.shape[0], rate_hz=wave.sample_rate_hz)
    except ShaperError:
        return None
    from shaper.costs.problem import recipe_layout
    from shaper.jobs.baselines import textbook_pulses

    qubits = max(1, int(round(np.log2(len(recipe.system.computational)))))
    return textbook_pulses(at_length, recipe_layout(at_length), qubits) or None


def _populations(system, sim) -> tuple[dict, float]:
    """Every level's final and largest population per computational input, and the
    largest population outside the qubit levels during the pulse."""
    labels = system.level_labels()
    populations = {}
    for j, idx in enumerate(system.computational):
        final, peak = sim.populations[j, -1], sim.populations[j].max(axis=0)
        populations[labels[idx]] = {"final": dict(zip(labels, final.tolist(), strict=True)),
                                    "max": dict(zip(labels, peak.tolist(), strict=True))}
    outside = np.ones(system.dimension, bool)
    outside[system.computational] = False
    return populations, float(sim.populations[:, :, outside].max()) if outside.any() else 0.0


def write_check_plots(folder, verdict: dict, curves: dict, *, draw=None) -> list:
    """sensitivity.png plus the waveform, spectrum (f01, f12 marked) and population plots.

    ``draw``: as in :func:`shaper.jobs.run.write_plots` (a painter's, or here by default).
    """
    from pathlib import Path

    from shaper.jobs.painter import draw_here
    from shaper.jobs.plots import plot_sensitivity
    from shaper.jobs.run import write_plots

    draw = draw or draw_here
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    files = write_plots(folder, curves["recipe"], curves["wave"], curves["simulation"], None,
                        dt=curves["dt"], draw=draw, judged=verdict)
    recipe = curves["recipe"]
    draw(plot_sensitivity, folder / "sensitivity.png", verdict["sensitivity"],
         title=f"{verdict.get('waveform', recipe.name)}: infidelity against detuning and "
               f"amplitude error",
         target=recipe.optimizer.target_infidelity,
         members={"detuning_hz": np.asarray(recipe.ensemble_detunings_hz)[:, 0].tolist(),
                  "amplitude_scale": np.asarray(recipe.ensemble_scales).tolist()}
         if len(recipe.ensemble_scales) > 1 else None)
    return files + [folder / "sensitivity.png"]
