"""One whole job: optimise a recipe, export the waveform, re-check it, write the report.

The figures in ``report.json`` are computed on the exported samples (after DAC
quantisation and padding), re-simulated from the file's numbers, not taken from
the optimiser (README, "Output files").
"""

from __future__ import annotations

import time
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from shaper.costs.problem import has_ensemble, recipe_layout
from shaper.costs.verdict import summary
from shaper.io import atomic, waveio, writers
from shaper.io.runlog import RunLog
from shaper.jobs import plots
from shaper.jobs.baselines import textbook_pulses
from shaper.jobs.folder import prepare_run_folder
from shaper.jobs.next_steps import Where
from shaper.jobs.playback import Playback
from shaper.jobs.report import build_report
from shaper.jobs.waveform import check_predistortion, make_waveform
from shaper.optimizer.options import RunOptions
from shaper.optimizer.starts import Result, optimize, read_history
from shaper.physics.simulation import Simulation
from shaper.recipe import Recipe, load_recipe
from shaper.signal.pulses import to_samples


@dataclass
class RunOutput:
    """A finished run: the optimiser's result, the report (``report.json``), the folder
    and the files written; ``met``: whether the exported file meets the recipe's targets
    as judged (the report's ``targets.met``)."""

    result: Result
    report: dict
    folder: Path
    files: list[Path]

    @property
    def met(self) -> bool:
        return bool(self.report["targets"]["met"])


def run(recipe_or_path, options: RunOptions | None = None, *, out: str | Path | None = None,
        force: bool = False, plots_too: bool = True, painter=None, where: Where | None = None,
        **option_fields) -> RunOutput:
    """Optimise, export and report. Writes into ``out`` (default ``results/<name>``).

    ``options`` (:class:`~shaper.optimizer.options.RunOptions`, or single fields as
    keywords) say how to run; its folder is ``out``, where checkpoints go and ``resume``
    continues from them. Its ``stop`` turns truthy on a signal: the run then writes the
    best pulse so far and a report with stop reason "interrupted". Its ``watchdog`` is
    beaten after every evaluation and every later stage; :func:`rescue_writer` gives its
    rescue. ``painter`` (a :class:`~shaper.jobs.painter.Painter`) draws the plots in its
    helper process while the rest of the report is computed. ``where``: the command the
    user ran (:class:`~shaper.jobs.next_steps.Where`), so that a miss's next steps run
    there; by default ``shaper optimize`` of the recipe's file into ``out``.
    """
    recipe = recipe_or_path if isinstance(recipe_or_path, Recipe) else load_recipe(
        recipe_or_path)
    check_predistortion(recipe)  # an impossible inverse is refused before the night's work
    folder = Path(out) if out is not None else Path("results") / recipe.name
    options = (options or RunOptions()).with_(folder=folder, **option_fields)
    if options.prepared != folder:  # the CLI's run_setup prepared it already
        prepare_run_folder(folder, recipe, force=force, resume=options.resume)
    if force and not options.resume:
        for old in list(folder.glob("checkpoint-*.npz")) + [folder / "history.jsonl"]:
            old.unlink(missing_ok=True)
    log = options.on_start_done if isinstance(options.on_start_done, RunLog) \
        else RunLog(folder / "run.log")
    if not isinstance(options.on_start_done, RunLog):  # the library logs like the CLI
        log.line(f"{'resuming' if options.resume else 'starting'} {recipe.name}: "
                 f"{recipe.optimizer.starts} start(s)")
        caller = options.on_start_done

        def on_start_done(start):
            log(start)
            if caller is not None:
                caller(start)
        options = options.with_(on_start_done=on_start_done)
    from shaper.jobs.explain import speed_limit

    where = where or Where(file=recipe.path or "RECIPE", out=str(folder), run=str(folder),
                           waveform=str(folder / f"{recipe.name}.csv"))
    bound = speed_limit(recipe, where)  # said before the night, not after it
    if bound is not None:
        log.line(f"warning: {bound.why}. {bound.next}")
    result = optimize(recipe, options)
    from shaper.jobs.escalate import escalate

    if options.watchdog is not None:
        options.watchdog.beat("judging the file as the chip plays it")
    log.line("judging the exported file as the chip plays it (more levels, the lab frame)")
    result, waveform, playback, steps = escalate(
        recipe, result, options, say=log.line,
        deadline=time.monotonic() + (options.time_left_s or recipe.optimizer.max_time_s))
    output = finish(result, folder, plots_too=plots_too, watchdog=options.watchdog,
                    painter=painter, say=log.line, judged=(waveform, playback),
                    escalation=steps, where=where)
    log.line(last_line(output.report), echo=False)
    return output


def last_line(report: dict) -> str:
    """run.log's last line: how the optimiser stopped, then the judged figures (what they
    are) and the verdict on them, the one truth of the run."""
    return (f"finished: the optimiser stopped: {report['optimizer']['stop_reason']}; judged "
            f"infidelity {report['infidelity']:.3e}, leakage {report['leakage']:.3e} "
            f"({report.get('judged_on', '')}); {summary(report['targets'])}")


def rescue_writer(folder: Path, watchdog):
    """The rescue of a stuck run: checkpoint and best pulse so far, without JAX.

    Called from the watchdog's or the signal helper's thread while the main thread may be
    stuck inside a computation, so it uses only NumPy and file writes: the checkpoint of
    the current start (its best point; ``--resume`` continues from there), the best
    pulse's waveform files, and ``rescue.json`` saying why and that the figures are the
    optimiser's, not re-simulated.
    """
    def rescue(message: str) -> None:
        tracker = getattr(watchdog, "tracker", None)
        if tracker is None or tracker.best is None:
            return
        recipe, layout = tracker.s.recipe, tracker.s.objective.layout
        value, best_x, parts, infidelity, leakage = tracker.best
        if tracker.s.checkpoint_path is not None:
            tracker.save(best_x)
        samples = to_samples(np.asarray(best_x, float), layout)[:recipe.samples]
        waveform, _ = make_waveform(recipe, samples, recipe.export, recipe.sample_rate_hz)
        files = writers.write_waveform(folder, recipe.name, waveform, recipe.system,
                                      recipe_name=recipe.name, recipe_sha256=recipe.sha256)
        atomic.write_json(folder / "rescue.json", {
            "stop_reason": message, "waveform": files[0].name,
            "figures_source": "the optimiser's best evaluation, before export; not "
                              "re-simulated (the computation was stuck)",
            "infidelity": infidelity, "leakage": leakage, "cost": value, "costs": parts,
            "start": tracker.s.index, "iteration": tracker.iteration,
            "created": time.strftime("%Y-%m-%dT%H:%M:%S%z"), "caution": waveio.CAUTION})
    return rescue


def finish(result: Result, folder: Path, *, plots_too: bool = True,
           watchdog=None, painter=None, say=None, judged=None,
           escalation: list | None = None, where: Where | None = None) -> RunOutput:
    """Export the result's samples, re-check what the AWG plays, write report and plots.

    Nothing finished is lost to a later step: the waveform files are written first, the
    report as soon as its figures exist, and the extras (the textbook comparison, the
    plots, a robust run's sensitivity) are added afterwards; an extra that fails is
    recorded in the report (``extras_failed``) instead of ending the job. With a
    ``painter`` the plots are drawn by its helper process while the textbook comparison
    is computed here. ``say(text)``: each phase as it begins (the command's progress).
    ``judged``: the exported waveform and its Playback, if already made
    (:mod:`shaper.jobs.escalate`); ``escalation``: its steps, for the report. ``where``:
    where a miss's next steps must run (:func:`shaper.jobs.report.explained`).
    """
    recipe = result.recipe
    folder.mkdir(parents=True, exist_ok=True)

    def stage(what: str) -> None:
        if watchdog is not None:
            watchdog.beat(what)
        if say is not None:
            say(what)
    stage("writing the waveform")
    waveform, clipped = make_waveform(recipe, result.samples, recipe.export,
                                      recipe.sample_rate_hz)
    files = writers.write_waveform(folder, recipe.name, waveform, recipe.system,
                                  recipe_name=recipe.name, recipe_sha256=recipe.sha256)
    playback = judged[1] if judged is not None else Playback(recipe, waveform, progress=say)
    stage("re-simulating the exported file (as the chip plays it: more levels, lab frame)")
    unquantised, _ = make_waveform(recipe, result.samples,  # padded as the optimiser saw
                                   replace(recipe.export, dac_bits=None),
                                   recipe.sample_rate_hz)
    internal = Playback(recipe, unquantised).nominal
    where = where or Where(file=recipe.path or "RECIPE", out=str(folder), run=str(folder),
                           waveform=str(folder / files[0].name))
    report = build_report(result, playback, internal, clipped, files[0].name,
                          escalation=escalation, where=where)
    atomic.write_json(folder / "report.json", report)
    (folder / "rescue.json").unlink(missing_ok=True)  # the run finished after all
    failed, plotted = _extras(result, folder, playback, report, plots_too, painter, stage)
    unfinished = painter.finish() if painter is not None else {}
    if unfinished:
        failed["plots"] = "; ".join(f"{Path(k).name}: {v}" for k, v in unfinished.items())
    files += [p for p in plotted if str(p) not in unfinished]
    if failed:
        report["extras_failed"] = failed
    atomic.write_json(folder / "report.json", report)
    files.append(folder / "report.json")
    return RunOutput(result=result, report=report, folder=folder, files=files)


def _extras(result: Result, folder: Path, playback: Playback, report: dict, plots_too: bool,
            painter, stage) -> tuple[dict, list[Path]]:
    """The plots, a robust run's sensitivity and the textbook comparison, each allowed to
    fail on its own (what failed, and the plot files)."""
    from shaper.jobs.painter import draw_here

    recipe, failed, plotted = result.recipe, {}, []
    draw = painter.draw if painter is not None else draw_here
    if plots_too:
        stage("plots")
        try:
            history = read_history(folder, result.best.index) or result.history
            plotted = write_plots(folder, recipe, playback.wave, playback.nominal, history,
                                  draw=draw, judged=report)
        except Exception as exc:  # noqa: BLE001
            failed["plots"] = f"{type(exc).__name__}: {exc}"
    if has_ensemble(recipe) and plots_too:  # a robust run shows what it is robust to
        stage("sensitivity to detuning and amplitude")
        try:
            report["sensitivity"] = sensitivity_of(playback)
            draw(plots.plot_sensitivity, folder / "sensitivity.png", report["sensitivity"],
                 title=f"{recipe.name}: infidelity against detuning and amplitude error",
                 target=recipe.optimizer.target_infidelity, members=report["ensemble"])
            plotted.append(folder / "sensitivity.png")
        except Exception as exc:  # noqa: BLE001 - an extra must not cost the result
            failed["sensitivity"] = f"{type(exc).__name__}: {exc}"
    stage("the textbook comparison (calibrated Gaussian and DRAG)")
    try:
        report["textbook_pulses"] = textbook_pulses(recipe, recipe_layout(recipe),
                                                    result.objective.qubits)
        if plots_too and any(isinstance(v, dict) for v in report["textbook_pulses"].values()):
            o = recipe.optimizer
            # like for like: the file and the textbook pulses in the rotating frame on the
            # recipe's levels (the judged figures are in the title of every other plot)
            rotating = report["trust"]["rotating_frame"]
            draw(plots.plot_textbook, folder / "textbook.png",
                 {"infidelity": rotating["infidelity"], "leakage": rotating["leakage"]},
                 report["textbook_pulses"], (o.target_infidelity, o.target_leakage),
                 title=f"{recipe.name}: {recipe.target.label}, {recipe.duration_s * 1e9:g} ns")
            plotted.append(folder / "textbook.png")
    except Exception as exc:  # noqa: BLE001 - an extra must not cost the result
        failed["textbook_pulses"] = f"{type(exc).__name__}: {exc}"
    return failed, plotted


def write_plots(folder: Path, recipe: Recipe, waveform, simulation: Simulation,
                history, *, dt: float | None = None, draw=None,
                judged: dict | None = None) -> list[Path]:
    """waveform.png, spectrum.png (transitions marked), populations.png, convergence.png,
    each titled with the run, the gate and the judged figures (``judged``: a report or a
    check with ``infidelity``, ``leakage`` and ``judged_on``; the populations are those of
    ``simulation``, the rotating frame).

    ``draw(plot, path, *args, **kwargs)`` (a :meth:`Painter.draw
    <shaper.jobs.painter.Painter.draw>`) draws them elsewhere; by default they are drawn
    here, before this returns. The arguments are plain data, so they cross to a helper.
    """
    from types import SimpleNamespace

    from shaper.jobs.painter import draw_here

    draw = draw or draw_here
    system, dt = recipe.system, dt or recipe.dt
    samples = waveform.to_hz(system)
    title = plot_title(recipe, judged or {**simulation.figures(),
                                          "judged_on": "rotating frame, as exported"})
    names = [folder / n for n in ("waveform.png", "spectrum.png", "populations.png",
                                  "convergence.png")]
    channels = [SimpleNamespace(name=c.name, columns=tuple(c.columns)) for c in system.channels]
    from shaper.signal.chain import for_waveform

    chain = for_waveform(recipe, waveform)
    delivered = None if chain.identity else np.asarray(chain(samples), float)
    draw(plots.plot_waveform, names[0], samples, dt, list(system.control_names),
         limits=list(recipe.limits_hz.values()), title=title, delivered=delivered,
         delivered_dt=chain.dt_s)
    markers = {}
    for q, tf in system.transition_frequencies.items():
        markers[f"{q} f01"] = tf["f01_hz"]
        markers[f"{q} f12"] = tf["f12_hz"]
    draw(plots.plot_spectrum, names[1], Playback(recipe, waveform).baseband(), dt, channels,
         cutoff_hz=recipe.bandwidth_hz, markers=markers, title=title,
         if_hz=waveform.if_frequency_hz)
    labels = system.level_labels()
    o = recipe.optimizer
    draw(plots.plot_populations, names[2], simulation.populations, dt, labels,
         [labels[i] for i in system.computational], title=title,
         target_leakage=o.target_leakage)
    if history:
        draw(plots.plot_convergence, names[3], history, title=title,
             targets=(o.target_infidelity, o.target_leakage))
    else:
        names = names[:3]
    return names


def plot_title(recipe: Recipe, judged: dict) -> str:
    """A run's plots' title: the run, the gate and its judged figures, with their model."""
    basis = judged.get("judged_on") or "as exported"
    return (f"{recipe.name}: {recipe.target.label}, judged infidelity "
            f"{judged['infidelity']:.2e}, leakage {judged['leakage']:.2e}\n({basis})")


def sensitivity_of(playback, *, span_hz: float = 5e6, scale_span: float = 0.05,
                   points: int = 21) -> dict:
    """The file's infidelity against detuning and amplitude error, over spans that cover
    the recipe's ensemble with room on each side (a robust run's sensitivity)."""
    recipe = playback.recipe
    detunings = np.abs(np.asarray(recipe.ensemble_detunings_hz, float))
    scales = np.abs(np.asarray(recipe.ensemble_scales, float) - 1)
    span_hz = max(span_hz, 1.5 * float(detunings.max(initial=0.0)))
    scale_span = max(scale_span, 1.5 * float(scales.max(initial=0.0)))
    return playback.sensitivity(np.linspace(-span_hz, span_hz, points),
                                np.linspace(1 - scale_span, 1 + scale_span, points))
