"""The commands from Python: ``shaper.check``, ``shaper.export``, ``shaper.sweep`` and
``shaper.chip`` (README, "From Python").

Each is a thin wrapper of the job its command runs, with the command's options as keyword
arguments (in SI units), and returns a result object whose ``met`` says whether every
judged figure meets the targets (what the command's exit code 0 says), beside the report
or table the command writes. ``shaper.run`` (optimise, export, report) returns a
:class:`~shaper.jobs.run.RunOutput`, whose ``met`` is the same.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from shaper.jobs.next_steps import Where
from shaper.recipe import Recipe, load_recipe


def _recipe(recipe) -> Recipe:
    return recipe if isinstance(recipe, Recipe) else load_recipe(recipe)


@dataclass
class CheckResult:
    """What :func:`check` found: ``report`` is what ``shaper check --json`` prints (the
    judged figures first, every model's in ``trust``, the scans, ``explanation``)."""

    report: dict
    recipe: Recipe

    @property
    def met(self) -> bool:
        return bool(self.report["pass"])


def check(recipe, waveform, *, gate: str | None = None, levels: int | None = None,
          sample_rate_hz: float | None = None, full_scale_hz: float | None = None,
          t1_s: float | list[float] | None = None, t2_s: float | list[float] | None = None,
          detuning_span_hz: float = 5e6, scale_span: float = 0.05) -> CheckResult:
    """``shaper check RECIPE WAVEFORM``: any waveform file judged on a recipe's system.

    Args:
        recipe: a recipe path, dict or :class:`~shaper.recipe.Recipe`.
        waveform: a file (ours with its sidecar, a plain CSV, .npy or .npz).
        gate: with a gate-set recipe, the gate the file plays (``--gate``).
        levels: levels per transmon instead of the recipe's (``--levels``).
        sample_rate_hz, full_scale_hz: for files that do not say (``--sample-rate``,
            ``--full-scale``; a ``time_s`` column gives the rate itself).
        t1_s, t2_s: coherence times, one for all transmons or one each (``--t1``/``--t2``).
        detuning_span_hz, scale_span: the sensitivity scans' spans.

    Raises:
        ShaperError: bad input, named as the command names it (exit code 2 there).
    """
    from shaper.errors import InputError
    from shaper.io.waveform_import import read_any
    from shaper.jobs.check import check_waveform
    from shaper.recipe.derive import for_gate, with_coherence

    recipe = _recipe(recipe)
    if gate is not None:
        if gate.strip().upper() not in (g.upper() for g in recipe.gate_set):
            raise InputError(f"gate={gate!r}: the recipe's gate set is "
                             f"{', '.join(recipe.gate_set) or 'empty (it has one target)'}")
        recipe = for_gate(recipe, gate.strip().upper())
    recipe = recipe.one_gate("shaper.check", "pass gate=")
    if t1_s is not None or t2_s is not None:
        recipe = with_coherence(recipe, *(None if t is None else list(
            t if isinstance(t, list | tuple) else [t]) for t in (t1_s, t2_s)))
    wave = read_any(waveform, recipe.system, sample_rate_hz=sample_rate_hz,
                    full_scale_hz=full_scale_hz)  # the columns: the same at any levels
    where = Where("check", file=recipe.path or recipe.name, waveform=str(waveform), gate=gate,
                  lab_frame=recipe.optimizer.lab_frame)
    report, _ = check_waveform(recipe, wave, levels=levels, where=where,
                               detuning_span_hz=detuning_span_hz, scale_span=scale_span)
    report["waveform"] = str(waveform)
    return CheckResult(report=report, recipe=recipe)


@dataclass
class ExportResult:
    """What :func:`export` wrote: ``report`` is ``export.json`` (the new file's judged
    figures first, the run's own at its own rate in ``at_run_rate``)."""

    report: dict
    folder: Path
    files: list[Path] = field(default_factory=list)

    @property
    def met(self) -> bool:
        return bool(self.report["targets"]["met"])


def export(run, out, **options) -> ExportResult:
    """``shaper export RUN --out DIR``: an earlier run's pulse for another instrument,
    without optimising again (:func:`shaper.jobs.reexport.reexport`; its keywords are the
    command's options: ``sample_rate_hz``, ``bits``, ``if_hz``, ``sideband``,
    ``granularity``, ``padding``, ``clip``, ``format``, ``force``, ``predistort``,
    ``codes``)."""
    from shaper.jobs.reexport import reexport

    report = reexport(run, out=out, **options)
    folder = Path(out)
    return ExportResult(report=report, folder=folder,
                        files=[folder / f for f in report["files"]] + [folder / "export.json"])


@dataclass
class SweepResult:
    """What :func:`sweep` found: every duration's point (the judged figures, the rotating
    frame beside them), ``table`` (sweep.md's table), the shortest duration meeting the
    targets (None: none did) and, for it, the full run's report."""

    points: list
    table: str
    folder: Path
    shortest_s: float | None
    report: dict | None = None

    @property
    def met(self) -> bool:
        return self.shortest_s is not None


def sweep(recipe, durations: str, *, out=None, starts: int | None = None,
          iterations: int | None = None, hours: float | None = None, seed: int | None = None,
          resume: bool = False, workers: int = 1, plots: bool = True,
          echo=None) -> SweepResult:
    """``shaper sweep RECIPE --durations D``: the shortest duration meeting the targets,
    judged as the chip plays each file (:class:`shaper.jobs.sweep.Sweep`); the full result
    of the shortest in ``out/shortest``. A gate set's sweep is a chip of one subject:
    :func:`chip` runs it from its file. ``echo``: called with each line of progress."""
    import time

    from shaper.jobs.run import finish
    from shaper.jobs.sweep import Sweep, parse_durations
    from shaper.recipe.derive import with_budget

    recipe = with_budget(_recipe(recipe), starts=starts, iterations=iterations)
    recipe = recipe.one_gate("shaper.sweep", "give gate.target")
    folder = Path(out) if out is not None else Path("results") / f"{recipe.name}-sweep"
    run = Sweep(recipe, folder, seed=seed, resume=resume, echo=echo or (lambda text: None),
                workers=workers,
                deadline=None if hours is None else time.time() + hours * 3600)
    shortest = run.run(parse_durations(durations), plots=plots)
    report = None
    if shortest is not None:
        where = Where("sweep", file=recipe.path or "RECIPE", out=str(folder),
                      durations=durations, run=str(folder / "shortest"))
        report = finish(run.result_at(shortest), folder / "shortest", plots_too=plots,
                        where=where).report
    return SweepResult(points=[p for _, p in sorted(run.points.items())], table=run.table(),
                       folder=folder, report=report,
                       shortest_s=None if shortest is None else shortest /
                       recipe.sample_rate_hz)


@dataclass
class ChipResult:
    """What :func:`chip` made: one row per gate (:class:`shaper.jobs.gateset.GateRow`, its
    ``infidelity`` and ``leakage`` the judged ones), ``table`` (chip.md), the folder, and
    how many tasks did not finish within the budget."""

    rows: list
    table: str
    folder: Path
    unfinished: int = 0

    @property
    def met(self) -> bool:
        return not self.unfinished and all(r.met for r in self.rows)


def chip(chip_file, *, out=None, workers: int | None = None, scheduler: str | None = None,
         resume: bool = False, force: bool = False, iterations: int | None = None,
         starts: int | None = None, hours: float | None = None, echo=None) -> ChipResult:
    """``shaper chip CHIP.toml``: every gate of a chip at its shortest duration, on local
    worker processes (``workers``, default one per core) or a Dask cluster
    (``scheduler``), with its tables, plots and page in ``out`` (default
    ``results/<chip name>``). ``echo``: called with each line of progress."""
    import os
    import time

    from shaper.jobs.chip import run_chip
    from shaper.jobs.executors import DaskExecutor, LocalExecutor
    from shaper.recipe.chip import load_chip

    loaded = load_chip(chip_file)
    folder = Path(out) if out is not None else Path("results") / loaded.name
    executor = DaskExecutor(scheduler) if scheduler else LocalExecutor(
        workers or os.cpu_count() or 1)
    budget = {"iterations": iterations, "starts": starts,
              "deadline": None if hours is None else time.time() + hours * 3600}
    try:
        rows = run_chip(loaded, folder, executor=executor, resume=resume, force=force,
                        echo=echo or (lambda text: None), progress=False, budget=budget)
    finally:
        executor.close()
    done = {(r.subject, r.derived_from or r.gate) for r in rows}
    return ChipResult(rows=rows, table=(folder / "chip.md").read_text(), folder=folder,
                      unfinished=len(loaded.tasks) - len(done))
