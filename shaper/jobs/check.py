"""The verdict on any waveform: fidelity, leakage, level populations and fragility.

``check_waveform`` simulates a waveform (from any source) on a recipe's system,
optionally with more transmon levels than the recipe keeps, and reports the figures
of the README's "Conventions" (figures of merit), the population of every level at the
end and its maximum during the pulse, the virtual Z angles, pass or fail against the
recipe's targets, and the infidelity's response to a detuning offset and an amplitude
scale error.
"""

from __future__ import annotations

import hashlib
import pickle

import jax
import jax.numpy as jnp
import numpy as np

from shaper.costs import evaluate
from shaper.costs.problem import qubit_count, waveform_problem
from shaper.io.waveio import Waveform
from shaper.jobs.explain import explain
from shaper.jobs.playback import Playback
from shaper.physics._jax import device
from shaper.recipe import Recipe
from shaper.recipe.derive import with_levels


def _sensitivity(playback: Playback, detunings: np.ndarray, scales: np.ndarray) -> dict:
    recipe, chain = playback.recipe, playback.chain
    problem = waveform_problem(recipe, playback.samples.shape[0], steps=chain.steps,
                               dt=chain.period_s)
    flags = dict(qubits=qubit_count(recipe), is_gate=recipe.target.is_gate,
                 virtual_z=recipe.virtual_z, drive=None if chain.identity else chain)
    vs_detuning, vs_scale, slopes = _programs(flags)
    x = device(playback.samples, float)
    curve_d = vs_detuning(x, problem, device(detunings, float))
    curve_s = vs_scale(x, problem, device(scales, float))
    slope_d, slope_s = slopes(x, problem)
    return {"detuning_hz": detunings.tolist(),
            "infidelity_vs_detuning": np.asarray(curve_d).tolist(),
            "amplitude_scale": scales.tolist(),
            "infidelity_vs_scale": np.asarray(curve_s).tolist(),
            "d_infidelity_d_detuning_per_mhz": float(slope_d) * 1e6,
            "d_infidelity_d_scale_per_percent": float(slope_s) * 1e-2}


_PROGRAMS: dict[str, tuple] = {}


def _programs(flags: dict) -> tuple:
    """The three jitted programs of the sensitivity (one eigendecomposition each,
    DEVELOPERS.md: never op by op), built once per process for these flags (keyed by an
    exact digest of them, as :func:`shaper.jobs.playback._members_program`)."""
    key = hashlib.sha256(pickle.dumps(flags)).hexdigest()
    if key not in _PROGRAMS:
        def infidelity(x, problem, delta, scale):
            drift = problem.drift + delta * jnp.sum(problem.number_operators, axis=0)
            return 1.0 - evaluate(x * scale, problem._replace(drift=drift), **flags).fidelity

        _PROGRAMS[key] = (
            jax.jit(lambda x, p, d: jax.vmap(lambda di: infidelity(x, p, di, 1.0))(d)),
            jax.jit(lambda x, p, s: jax.vmap(lambda si: infidelity(x, p, 0.0, si))(s)),
            jax.jit(lambda x, p: jax.grad(infidelity, argnums=(2, 3))(x, p, 0.0, 1.0)))
    return _PROGRAMS[key]


def check_waveform(recipe: Recipe, wave: Waveform, *, levels: int | None = None,
                   detuning_span_hz: float = 5e6, scale_span: float = 0.05,
                   points: int = 21) -> tuple[dict, dict]:
    """Simulate ``wave`` on the recipe's system and judge it.

    Args:
        recipe: the system, target, targets (and virtual Z setting).
        wave: the waveform, its columns in the recipe's control order.
        levels: keep this many levels per transmon instead of the recipe's.
        detuning_span_hz, scale_span: the sensitivity scans cover +-span.
        points: points per scan.

    Returns:
        (verdict, curves): ``verdict`` is JSON-ready (fidelity, infidelity, leakage,
        populations, sensitivity, pass); ``curves`` holds arrays for plots.
    """
    if levels is not None:
        recipe = with_levels(recipe, levels)
    system = recipe.system
    samples = wave.to_hz(system)
    dt = 1.0 / wave.sample_rate_hz
    playback = Playback(recipe, wave)
    sim = playback.nominal
    labels = system.level_labels()
    populations = {}
    for j, idx in enumerate(system.computational):
        final, peak = sim.populations[j, -1], sim.populations[j].max(axis=0)
        populations[labels[idx]] = {"final": dict(zip(labels, final.tolist(), strict=True)),
                                    "max": dict(zip(labels, peak.tolist(), strict=True))}
    outside = np.ones(system.dimension, bool)
    outside[system.computational] = False
    worst_outside = float(sim.populations[:, :, outside].max()) if outside.any() else 0.0
    sens = _sensitivity(playback,
                        np.linspace(-detuning_span_hz, detuning_span_hz, points),
                        np.linspace(1 - scale_span, 1 + scale_span, points))
    o = recipe.optimizer
    members = playback.members
    judged = playback.verdict()
    verdict = {
        **sim.figures(),
        "pass": judged.met,
        "targets": {"infidelity": o.target_infidelity, "leakage": o.target_leakage,
                    "max_out_of_band": recipe.max_out_of_band if recipe.bandwidth_hz else None,
                    **judged.as_dict()},
        "ensemble": None if members is None else {"infidelity": members[0],
                                                  "leakage": members[1]},
        "trust": playback.trust_block(),
        "system_model": recipe.system.models or "matrices",
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
    verdict["explanation"] = [r._asdict() for r in explain(
        {**verdict, "targets": {**verdict["targets"], "met": judged.met},
         "duration_s": samples.shape[0] / wave.sample_rate_hz},
        recipe=recipe.path or recipe.name)]
    return verdict, {"wave": wave, "dt": dt, "simulation": sim, "recipe": recipe}


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
                        dt=curves["dt"], draw=draw)
    draw(plot_sensitivity, folder / "sensitivity.png", verdict["sensitivity"])
    return files + [folder / "sensitivity.png"]
