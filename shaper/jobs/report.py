"""The report blocks: ``report.json`` of a run and ``export.json`` of an export, assembled
from a :class:`~shaper.jobs.playback.Playback` (each figure computed once), and an
earlier run read back (README, "Output files").
"""

from __future__ import annotations

import platform
import time
from dataclasses import replace
from importlib import metadata
from pathlib import Path

import numpy as np

from shaper.errors import RecipeError, ResultError
from shaper.io import atomic, waveio
from shaper.jobs.explain import explain, shortest_duration, speed_limit
from shaper.jobs.next_steps import Where
from shaper.jobs.playback import Playback, system_model
from shaper.jobs.waveform import make_waveform
from shaper.optimizer.starts import Result
from shaper.physics.simulation import Simulation
from shaper.recipe import ExportSettings, Recipe, load_recipe
from shaper.recipe.derive import at_samples


def versions() -> dict[str, str]:
    out = {"python": platform.python_version()}
    for package in ("shaper", "numpy", "scipy", "jax", "jaxlib", "optax", "matplotlib"):
        try:
            out[package] = metadata.version(package)
        except metadata.PackageNotFoundError:
            out[package] = "not installed"
    return out


def headline(playback: Playback) -> dict:
    """The figures a report, an export or a check leads with: the judged ones (the most
    faithful model, :meth:`Playback.trusted`, the one the verdict uses) and what they are
    (``judged_on``); the frame updates are the rotating frame's (what a lab applies). Every
    other model's figures stay in ``trust`` (README, "Output files")."""
    infidelity, leakage, basis = playback.trusted()
    rotating = playback.nominal.figures()
    return {"fidelity": 1.0 - infidelity, "infidelity": infidelity, "leakage": leakage,
            "judged_on": basis, "frame_before_rad": rotating["frame_before_rad"],
            "frame_after_rad": rotating["frame_after_rad"]}


LAB_WORDS = {"off": "the rotating frame",
             "corrected": "the lab frame to second order (worst of its carrier phases by a "
                          "smooth maximum)",
             "exact": "the exact lab frame (worst of the verdict's carrier phases by a smooth "
                      "maximum)"}


def optimiser_model(recipe: Recipe, escalation: list | None = None) -> dict:
    """The model the optimiser's own figures are in: the recipe's (its levels, its
    ``optimizer.lab_frame``), or after an escalation the model of the last step kept."""
    levels, mode, how = list(recipe.system.dims), recipe.optimizer.lab_frame, "the recipe's"
    kept = [s for s in escalation or [] if s.get("kept")]  # skipped or judged worse: not
    if kept:
        last = kept[-1]
        levels, mode = list(last["levels"]), last["lab_frame"]
        how = f"after escalation, the last it used: {last['model']}"
    return {"levels": levels, "lab_frame": mode,
            "model": f"{LAB_WORDS.get(mode, mode)}, {'x'.join(map(str, levels))} levels "
                     f"({how})"}


def build_report(result: Result, playback: Playback, internal: Simulation, clipped: int,
                 csv_name: str, *, escalation: list | None = None, where=None) -> dict:
    """``report.json`` of a run: the judged figures first (:func:`headline`), every model's
    in ``trust``, the optimiser's own in ``before_quantisation`` (in its model, said
    there), and the explanation of a miss with next steps for ``where``
    (:class:`shaper.jobs.explain.Where`)."""
    recipe, best, o = result.recipe, result.best, result.recipe.optimizer
    waveform = playback.wave
    members = playback.members
    verdict = playback.verdict()
    band = verdict.judged.get("out_of_band")
    trust = playback.trust_block()
    trust["rotating_frame"]["unquantised"] = {"infidelity": internal.infidelity,
                                              "leakage": internal.leakage}
    own = {"infidelity": best.infidelity, "leakage": best.leakage,
           **optimiser_model(recipe, escalation),
           "what": "the optimiser's own figures of its samples, before export, in its own "
                   "model"}
    report = {
        **headline(playback),
        "waveform": csv_name,
        "sidecar": Path(csv_name).with_suffix(".json").name,
        "targets": {"infidelity": o.target_infidelity, "leakage": o.target_leakage,
                    "max_out_of_band": recipe.max_out_of_band if band is not None else None,
                    "ensemble_targets": o.ensemble_targets if members else None,
                    **verdict.as_dict()},
        "ensemble": None if members is None else {
            "detuning_hz": np.asarray(recipe.ensemble_detunings_hz)[:, 0].tolist(),
            "amplitude_scale": np.asarray(recipe.ensemble_scales).tolist(),
            "infidelity": members[0], "leakage": members[1]},
        "trust": trust,
        "system_model": system_model(recipe.system),
        "open_system": playback.open_system,
        "line": playback.line_block(),
        "mixer": mixer_figures(recipe, result.samples, recipe.export, recipe.sample_rate_hz),
        "out_of_band_fraction": band,
        "bandwidth_cutoff_hz": recipe.bandwidth_hz,
        "peak_fraction_of_full_scale": float(np.max(np.abs(waveform.fractions), initial=0.0)),
        "clipped_samples": clipped,
        "before_quantisation": own,
        "costs": best.parts,
        "cost_weights": dict(zip(result.objective.names, result.objective.weights.tolist(),
                                 strict=True)),
        "optimizer": optimizer_block(result),
        "samples": int(waveform.fractions.shape[0]),
        "pulse_samples": recipe.samples,
        "duration_s": recipe.duration_s,
        "sample_rate_hz": recipe.sample_rate_hz,
        "wall_time_s": result.wall_time_s,
        "recipe": {"name": recipe.name, "path": recipe.path, "sha256": recipe.sha256,
                   "content": recipe.raw},
        "versions": versions(),
        "created": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
        "caution": waveio.CAUTION,
    }
    if escalation:
        report["escalation"] = escalation
    return explained(report, recipe, where)


def optimizer_block(result: Result) -> dict:
    """The report's ``optimizer``: how the optimiser ran (its method, its lab-frame model
    and levels as the recipe set them) and each start, in its own model."""
    o, best = result.recipe.optimizer, result.best
    return {"method": o.method, "lab_frame": o.lab_frame,
            "levels": list(result.recipe.system.dims), "iterations": best.iterations,
            "evaluations": best.evaluations, "stop_reason": best.stop_reason,
            "stop_detail": best.stop_detail, "seed": best.seed,
            "compile_time_s": result.compile_time_s,
            "starts": [{"index": s.index, "seed": s.seed, "cost": s.cost,
                        "infidelity": s.infidelity, "leakage": s.leakage,
                        "iterations": s.iterations, "stop_reason": s.stop_reason,
                        "wall_time_s": s.wall_time_s} for s in result.starts]}


def explained(report: dict, recipe: Recipe, where: Where | None = None) -> dict:
    """The report with ``explanation``: why it missed and what to run next where the user
    stands (``where``; default an ``optimize`` of the recipe's file), empty when met
    (:mod:`shaper.jobs.explain`)."""
    where = where or Where(file=recipe.path or "RECIPE")
    reasons = explain(report, where=where, shortest_s=shortest_duration(recipe))
    bound = speed_limit(recipe, where) if reasons else None
    if bound is not None:  # out of reach at this duration: more iterations cannot help
        reasons = [r for r in reasons if r.cause != "budget"] or reasons
    report["explanation"] = [r._asdict() for r in ([bound] if bound else []) + reasons]
    return report


def export_report(playback: Playback, files: list, original: Simulation, samples: np.ndarray,
                  settings: ExportSettings, rate: float, *, method: str, clipped: int, source,
                  recipe: Recipe, where: Where | None = None) -> dict:
    """``export.json`` of ``shaper export``: what the new file plays (judged first, every
    model in ``trust``), beside the run's own figures at its own rate (``original``, the
    rotating frame)."""
    verdict, wave = playback.verdict(), playback.wave
    report = {**headline(playback), "waveform": files[0].name,
              "files": [f.name for f in files],
              "sample_rate_hz": rate, "resampling": method, "samples": wave.fractions.shape[0],
              "dac_bits": settings.dac_bits, "if_frequency_hz": settings.if_frequency_hz,
              "sideband": settings.sideband, "clipped_samples": clipped,
              "values": "dac_codes" if wave.codes else "fractions",
              "trust": playback.trust_block(),
              "line": playback.line_block(),
              "mixer": mixer_figures(playback.recipe, samples, settings, rate),
              "at_run_rate": {**original.figures(), "model": "the rotating frame, the recipe's "
                                                                  "levels"},
              "source": str(source),
              "targets": {"infidelity": recipe.optimizer.target_infidelity,
                          "leakage": recipe.optimizer.target_leakage, **verdict.as_dict()},
              "caution": waveio.CAUTION}
    return explained(report, recipe, where)


def mixer_figures(recipe: Recipe, samples_hz: np.ndarray, settings: ExportSettings,
                  rate: float) -> dict | None:
    """Figures of the same pulse exported *without* the mixer correction and played through
    the recipe's mixer: what the correction is worth. None without a mixer."""
    if not settings.mixer:
        return None
    plain, _ = make_waveform(recipe, samples_hz, replace(settings, mixer={}), rate)
    played = Playback(recipe, plain).played()
    return {"channels": {c: vars(m) for c, m in settings.mixer.items()},
            "uncorrected": {"infidelity": played.infidelity, "leakage": played.leakage}}


def load_run(path: str | Path) -> tuple[Recipe, np.ndarray, dict, Path]:
    """An earlier run: its recipe, pulse samples (Hz, baseband), report and folder."""
    path = Path(path)
    report_path = path / "report.json" if path.is_dir() else path
    report = atomic.read_json(report_path, ResultError,
                              "no report.json here; give a run folder or its report.json")
    if not isinstance(report, dict):
        raise ResultError(f"{report_path}: not a shaper report (expected a JSON object)")
    for key in ("recipe", "waveform"):
        if key not in report:
            raise ResultError(f"{report_path}: missing key {key!r}; not a shaper report")
    content = report["recipe"].get("content") if isinstance(report["recipe"], dict) else None
    if not isinstance(content, dict):
        raise ResultError(f"{report_path}: 'recipe' must hold the run's recipe as 'content' "
                          f"(a table); not a shaper report, or a damaged one")
    try:
        recipe = load_recipe(content)
    except RecipeError as exc:
        raise ResultError(f"{report_path}: the recipe it holds: {exc.key}: {exc.detail}") \
            from None
    wave = waveio.read_waveform(atomic.inside_for_reading(
        report_path.parent, report["waveform"], ResultError, f"{report_path}: 'waveform'"))
    samples = Playback(recipe, wave).baseband()
    most = samples.shape[0] - wave.pulse_start
    n = report.get("pulse_samples", most)
    if isinstance(n, bool) or not isinstance(n, int) or not 1 <= n <= most:
        raise ResultError(f"{report_path}: 'pulse_samples' must be a whole number from 1 to "
                          f"the waveform's {most} pulse samples, got {str(n)[:40]!r}")
    samples = samples[wave.pulse_start:wave.pulse_start + n]
    recipe = at_samples(recipe, n, rate_hz=wave.sample_rate_hz)
    return recipe, samples, report, report_path.parent


