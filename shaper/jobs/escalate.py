"""Escalation: the optimiser goes on in the model that judges it (README, "How far the
figures are trusted").

The optimiser works in a cheaper model than the verdict: the recipe's levels rather than
``verdict.extra_levels`` more, and the lab frame's counter-rotating terms to second order
(``optimizer.lab_frame = "corrected"``) or not at all. When the exported file misses its
targets as the chip plays it while the optimiser met them in its own model, the optimiser
goes on from its own result in the model that differs, one step at a time:

1. ``levels``: the same file misses with more levels -> optimise on them;
2. ``lab frame (second order)``: it misses in the lab frame and the optimiser's model had
   no counter-rotating terms -> optimise with the second-order correction;
3. ``lab frame (exact)``: it still misses in the lab frame -> optimise with the verdict's
   own integrator in the loop (slow: the last step).

Every step is judged again on the user's recipe (:meth:`Playback.verdict`), and the loop
ends when the targets are met, when no model is left, or when the time is spent.
``optimizer.escalate = false`` turns it off. The report's ``escalation`` block says each
step's model, iterations, time and judged figures.
"""

from __future__ import annotations

import time
from dataclasses import replace
from pathlib import Path

from shaper.errors import RecipeError
from shaper.jobs.playback import Playback
from shaper.jobs.waveform import make_waveform
from shaper.optimizer.starts import Result, optimize
from shaper.recipe import Recipe
from shaper.recipe.derive import derived


def judged(recipe: Recipe, result: Result, progress=None) -> tuple[object, Playback]:
    """The exported waveform of ``result`` and its Playback on the user's ``recipe``
    (``progress``: called with a line as its long figures run)."""
    waveform, _ = make_waveform(recipe, result.samples, recipe.export, recipe.sample_rate_hz)
    return waveform, Playback(recipe, waveform, progress=progress)


def next_model(recipe: Recipe, playback: Playback, tried: list[str]) -> tuple[str, Recipe] | None:
    """The lab-frame model to optimise in next, as ``(name, recipe)``, or None: steps 2 and
    3 of the module docstring whose condition holds and that were not tried yet (step 1,
    more levels, is :func:`_levels_first`)."""
    limits = recipe.optimizer.target_infidelity, recipe.optimizer.target_leakage
    lab = playback.lab
    if lab is None or not (lab.infidelity > limits[0] or lab.leakage > limits[1]):
        return None
    levels = recipe.verdict.extra_levels if playback.more_levels is not None else 0
    if recipe.optimizer.lab_frame == "off" and "lab frame (second order)" not in tried \
            and playback.corrected is not None and recipe.line.awg.stages:
        return "lab frame (second order)", _built(recipe, levels, "corrected")
    if "lab frame (exact)" not in tried:
        return "lab frame (exact)", _built(recipe, levels, "exact")
    return None


def _built(recipe: Recipe, extra: int, lab_frame: str) -> Recipe | RecipeError:
    """:func:`_on_levels`, or why this machine cannot run it (the recipe checks' own
    refusal, e.g. its memory: :func:`shaper.recipe.memory.fits_in_memory`)."""
    try:
        return _on_levels(recipe, extra, lab_frame)
    except RecipeError as refused:
        return refused


def _on_levels(recipe: Recipe, extra: int, lab_frame: str) -> Recipe:
    """The user's recipe with ``extra`` more levels per transmon and the optimiser's lab
    model ``lab_frame``; judged by itself on those levels (no further extra levels)."""
    from shaper.recipe.derive import with_levels

    base = with_levels(recipe, extra=extra) if extra else recipe

    def edit(raw: dict) -> None:
        optimizer = raw.setdefault("optimizer", {})
        optimizer["lab_frame"] = lab_frame
        optimizer["margin"] = min(recipe.optimizer.margin, ESCALATION_MARGIN)
        raw.setdefault("verdict", {})["extra_levels"] = 0
    return derived(base, edit)


# An escalation step's margin (targets / margin is where it stops): it works on the
# verdict's levels and in its lab model, so what is left between its figures and the
# judged ones is the DAC's quantisation and the second-order lab frame against the exact
# one (the verdict measures both; on the 200 ns cross-resonance CNOT 1.003e-5 against
# 1.005e-5). The user's margin (10 by default) covers the first run's cheaper model.
ESCALATION_MARGIN = 2.0


def escalate(recipe: Recipe, result: Result, options, *, say=None,
             deadline: float | None = None) -> tuple[Result, object, Playback, list[dict]]:
    """Go on in the verdict's model until the judged figures meet the targets (module
    docstring). Returns the last result (its recipe the user's), its waveform, its
    Playback and one record per step. ``say``: each step, and each long figure of the
    verdict as it runs (the run's watchdog is fed too)."""
    def progress(text: str) -> None:
        if options.watchdog is not None:
            options.watchdog.beat(text)
        if say is not None:
            say(text)
    waveform, playback = judged(recipe, result, progress)
    steps: list[dict] = []
    if not recipe.optimizer.escalate:
        return result, waveform, playback, steps
    while _met_own(result):
        tried = [s["model"] for s in steps]
        # more levels that already miss decide the next step before the lab frame's
        # minutes-long figures are computed (they would be computed again after it)
        step = _levels_first(recipe, playback, tried)
        if step is None:
            if playback.verdict().met:
                break
            step = next_model(recipe, playback, tried)
        if step is None or (deadline is not None and time.monotonic() > deadline):
            break
        name, model = step
        cheap = name == "levels" and "lab" not in playback.__dict__  # lab not computed
        before = _figures(playback.more_levels.nominal) if cheap else playback.verdict().judged
        if isinstance(model, RecipeError):  # said and recorded, the result so far kept
            why_not = model.detail
            if say is not None:
                say(f"escalation: not optimising on the {name}: {why_not}")
            steps.append({"model": name, "judged_before": before, "skipped": why_not,
                          "met": False})
            continue
        record = {"model": name, "levels": list(model.system.dims),
                  "lab_frame": model.optimizer.lab_frame, "judged_before": before}
        if say is not None:
            say(f"escalating: the file misses as the chip plays it ({_words(before)}); "
                f"optimising again on the {name}")
        t0 = time.monotonic()
        folder = None if options.folder is None else Path(options.folder) / \
            f"escalation-{len(steps) + 1}"
        again = optimize(model, options.with_(folder=folder, resume=False, starts=1),
                         first=result.samples)
        candidate = replace(again, recipe=recipe)
        new_waveform, new_playback = judged(recipe, candidate, progress)
        after = new_playback.verdict()
        # compared in the model ``before`` was read in
        kept = _closer(_figures(new_playback.more_levels.nominal) if cheap else after.judged,
                       before, recipe)
        if kept:  # a step that judged worse leaves the result before it in place
            result, waveform, playback = candidate, new_waveform, new_playback
        steps.append({**record, "iterations": again.best.iterations,
                      "seconds": time.monotonic() - t0, "judged_after": after.judged,
                      "kept": kept, "met": after.met})
    return result, waveform, playback, steps


def _closer(after: dict, before: dict, recipe: Recipe) -> bool:
    """The judged figures ``after`` are no further from the targets than ``before``: the
    largest ratio of a figure to its target decides."""
    limits = {"infidelity": recipe.optimizer.target_infidelity,
              "leakage": recipe.optimizer.target_leakage}

    def worst(figures: dict) -> float:
        return max((figures[k] / limits[k] for k in limits if k in figures), default=0.0)
    return worst(after) <= worst(before)


def _levels_first(recipe: Recipe, playback: Playback, tried: list[str]):
    """The ``levels`` step when the file already misses on more levels in the rotating
    frame (cheap), else None."""
    more = playback.more_levels
    if more is None or "levels" in tried:
        return None
    limits = recipe.optimizer.target_infidelity, recipe.optimizer.target_leakage
    if more.nominal.infidelity <= limits[0] and more.nominal.leakage <= limits[1]:
        return None
    return "levels", _built(recipe, recipe.verdict.extra_levels, recipe.optimizer.lab_frame)


def _figures(simulation) -> dict:
    return {"infidelity": float(simulation.infidelity), "leakage": float(simulation.leakage)}


def _met_own(result: Result) -> bool:
    """The optimiser's own figures meet the targets in its own model: with its margin (it
    stopped there), or without it (it converged between the target and the margin: the
    verdict's model may still be met). A run that missed in its own model is not
    escalated: the next model cannot do better."""
    from shaper.costs.verdict import judge
    from shaper.optimizer.tracker import StopReason

    best = result.best
    if best.stop_reason == str(StopReason.TARGETS_MET):
        return True
    return judge(result.recipe, infidelity=best.infidelity, leakage=best.leakage,
                 member_infidelities=best.member_infidelities,
                 member_leakages=best.member_leakages,
                 out_of_band=best.parts.get("bandwidth")).met


def _words(judged_figures: dict) -> str:
    return ", ".join(f"{k} {v:.2e}" for k, v in judged_figures.items())
