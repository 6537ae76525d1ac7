"""Duration sweeps: the shortest gate that still meets the targets.

Each duration is optimised (with the recipe's starts; the first warm-started from its
shorter neighbour, stretched in time with its area kept), then the shortest passing grid
point is refined by bisection on whole samples. Durations are padded to a few shared
sizes (powers of two, in samples) with identity slices, so a sweep compiles once per
size, not once per duration. Durations are whole samples: a requested duration that is
not is moved to the nearest, and the sweep prints and records both. Each duration runs
through the same starts runner as ``shaper optimize`` (workers, checkpoints in
``duration-<n>/``), its pulse is written in the waveform format (``pulse-<n>.csv`` and
its sidecar, which ``shaper check`` reads) and judged on that export by the one targets
rule (:mod:`shaper.costs.verdict`). ``sweep.json`` is rewritten after every duration: a
resumed sweep does not redo finished durations.
"""

from __future__ import annotations

import re
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from shaper.errors import ResultError
from shaper.io import atomic, waveio, writers
from shaper.optimizer.objective import Objective, make_objective, shares_chain
from shaper.optimizer.options import RunOptions
from shaper.optimizer.starts import Result, optimize
from shaper.optimizer.tracker import StartResult
from shaper.recipe import Recipe, units
from shaper.recipe.derive import at_samples
from shaper.recipe.units import format_quantity
from shaper.signal.chain import for_recipe


def parse_durations(text: str) -> list[float]:
    """``--durations``: :func:`shaper.recipe.units.parse_durations` naming the option."""
    return units.parse_durations(text, key="--durations")


def bucket(samples: int, hold: int) -> int:
    """The shared padded size for ``samples``: the next power of two (a multiple of hold)."""
    size = 1 << max(4, (samples - 1).bit_length())
    return -(-size // hold) * hold


def recipe_at(recipe: Recipe, samples: int) -> Recipe:
    return at_samples(recipe, samples)


def stretch(samples_hz: np.ndarray, n: int) -> np.ndarray:
    """A pulse stretched (or squeezed) in time to ``n`` samples with its area kept."""
    old = samples_hz.shape[0]
    x_old, x_new = (np.arange(old) + 0.5) / old, (np.arange(n) + 0.5) / n
    return np.stack([np.interp(x_new, x_old, samples_hz[:, k]) for k in
                     range(samples_hz.shape[1])], axis=1) * (old / n)


@dataclass
class SweepPoint:
    """One duration of a sweep: figures of its exported waveform (``pulse-<samples>.csv``)."""

    samples: int
    duration_s: float          # the actual duration: a whole number of samples
    infidelity: float
    leakage: float
    met: bool
    iterations: int
    wall_time_s: float
    stop_reason: str
    requested_s: float | None = None  # the duration asked for, if rounding changed it
    missed: str = ""           # which targets were missed, in words
    # with coherence times: the error budget of the export (README, "Decoherence")
    coherent_error: float | None = None
    incoherent_error: float | None = None
    total_error: float | None = None
    # infidelity and leakage are the verdict's (README, "How far the figures are trusted");
    # these the optimiser's model's (rotating frame, the recipe's levels)
    rotating_infidelity: float | None = None
    rotating_leakage: float | None = None
    judged_on: str = ""
    starts: int = 0  # how many starts the point ran (0: the recipe's)
    retried: bool = False  # failed while a longer duration passed: run again, more starts
    escalated: str = ""  # the models the optimiser went on in (jobs.escalate), in order
    # the optimiser's own figures of its samples, in its own model (the last it used)
    own_infidelity: float | None = None
    own_leakage: float | None = None


RETRY_STARTS = 4  # at least this many starts when a point is retried


class Sweep:
    """One sweep over durations of a recipe, writing into ``folder``."""

    def __init__(self, recipe: Recipe, folder: Path, *, seed: int | None = None,
                 resume: bool = False, stop=None, echo=print, workers: int = 1,
                 deadline: float | None = None):
        self.recipe, self.folder, self.stop, self.echo = recipe, Path(folder), stop, echo
        self.workers = workers
        self.deadline = deadline  # time.time() by which the sweep ends (--hours), or None
        self.budget_reached = False
        self.retry_starts = max(RETRY_STARTS, 2 * recipe.optimizer.starts)
        self.seed = recipe.optimizer.seed if seed is None else seed
        # compiled objectives: by padded size, or (IF or line sub-steps: no shared padding)
        # by the duration's own sample count, negated
        self.objectives: dict[int, Objective] = {}
        self.points: dict[int, SweepPoint] = {}
        self.folder.mkdir(parents=True, exist_ok=True)
        state = self.folder / "sweep.json"
        if state.exists():
            if not resume:
                raise ResultError(f"{self.folder} already holds a sweep (sweep.json); pass "
                                  f"--resume to continue it or choose another --out")
            data = atomic.read_json(state, ResultError, "unreadable")
            if data.get("recipe_sha256") != recipe.sha256 and \
                    data.get("problem_sha256") != recipe.problem_sha256:
                raise ResultError(f"{state}: this sweep belongs to another recipe; start a new "
                                  f"one in another folder")
            self.points = {p["samples"]: SweepPoint(**p) for p in data["points"]}

    @property
    def compiles(self) -> int:
        return sum(len(o.traces) for o in self.objectives.values())

    def objective_for(self, recipe: Recipe) -> Objective:
        size = bucket(recipe.samples, recipe.hold)
        chain = for_recipe(recipe)
        if chain.lead or chain.tail or recipe.optimizer.lab_frame == "exact":
            key = -recipe.samples
            if key not in self.objectives:
                self.objectives[key] = make_objective(recipe)
            return self.objectives[key]
        if size not in self.objectives:
            self.objectives[size] = make_objective(recipe, pad_to=size)
            return self.objectives[size]
        shared = self.objectives[size]
        if not shares_chain(chain, shared.chain):  # another ring-down: its own program
            key = -recipe.samples
            if key not in self.objectives:
                self.objectives[key] = make_objective(recipe)
            return self.objectives[key]
        return shared.for_recipe(recipe)

    def samples_path(self, n: int) -> Path:
        """The exported waveform of duration ``n`` (our CSV with its JSON sidecar)."""
        return self.folder / f"pulse-{n}.csv"

    def time_left(self) -> float | None:
        return None if self.deadline is None else self.deadline - time.time()

    def out_of_time(self) -> bool:
        """True (and remembered) once the sweep's --hours budget is spent."""
        left = self.time_left()
        if left is not None and left <= 0:
            self.budget_reached = True
        return self.budget_reached

    def retry(self, n: int, warm: np.ndarray | None) -> SweepPoint:
        """A failing point while a longer duration passes: once more with more starts
        (its first start is kept from the checkpoint), within the budget."""
        point = self.points[n]
        if point.met or point.retried or self.out_of_time():
            return point
        self.echo(f"{format_quantity(point.duration_s, 's'):>10}: misses the targets while a "
                  f"longer duration meets them; again with {self.retry_starts} starts")
        point, _ = self.solve(n, warm, point.requested_s, starts=self.retry_starts)
        return point

    def solve(self, n: int, warm: np.ndarray | None, requested_s: float | None = None,
              starts: int | None = None) -> tuple[SweepPoint, Result]:
        """Optimise at ``n`` samples (or load the finished point); judge the export.
        ``starts``: run that many starts (a retry) even if the point is finished."""
        if n in self.points and self.samples_path(n).exists() and (
                starts is None or self.points[n].retried):
            return self.points[n], None
        from shaper.jobs.escalate import escalate

        recipe = recipe_at(self.recipe, n)
        if starts is None:  # a retry has said so
            self.echo(f"{format_quantity(n / recipe.sample_rate_hz, 's'):>10} ({n:4d} "
                      f"samples): optimising")
        objective = self.objective_for(recipe)
        t0 = time.monotonic()
        work = self.folder / f"duration-{n}"  # checkpoints and history of this duration
        resume = any(work.glob("checkpoint-*.npz"))
        options = RunOptions(seed=self.seed, folder=work, resume=resume, workers=self.workers,
                             stop=self.stop, starts=starts, time_left_s=self.time_left())
        result = optimize(recipe, options, objective=objective,
                          first=None if warm is None else stretch(warm, n))
        left = self.time_left()
        result, wave, playback, steps = escalate(
            recipe, result, options, say=self.echo,
            deadline=None if left is None else time.monotonic() + left)
        played, verdict, budget = playback.nominal, playback.verdict(), playback.open_system
        infidelity, leakage, basis = playback.trusted()
        best = result.best
        point = SweepPoint(samples=n, duration_s=n / recipe.sample_rate_hz,
                           infidelity=infidelity, leakage=leakage, judged_on=basis,
                           rotating_infidelity=played.infidelity,
                           rotating_leakage=played.leakage,
                           met=verdict.met, iterations=sum(s.iterations for s in result.starts),
                           wall_time_s=time.monotonic() - t0, stop_reason=best.stop_reason,
                           requested_s=requested_s,
                           missed="" if verdict.met else verdict.summary(),
                           coherent_error=budget and budget["coherent_error"],
                           incoherent_error=budget and budget["incoherent_error"],
                           total_error=budget and budget["infidelity"],
                           starts=len(result.starts), retried=starts is not None,
                           escalated=", ".join(step["model"] for step in steps),
                           own_infidelity=best.infidelity, own_leakage=best.leakage)
        if not self.stop:  # an interrupted point is not finished: it is redone on resume
            writers.write_waveform(self.folder, f"pulse-{n}", wave, recipe.system,
                                  recipe_name=recipe.name, recipe_sha256=recipe.sha256)
            self.points[n] = point
            self.save()
        asked = "" if requested_s is None or abs(requested_s - point.duration_s) < 1e-15 \
            else f" (asked {format_quantity(requested_s, 's')}: whole samples)"
        self.echo(f"{format_quantity(point.duration_s, 's'):>10} ({n:4d} samples){asked}: "
                  f"infidelity {point.infidelity:.3e}, leakage {point.leakage:.3e} ({basis}; "
                  f"rotating frame {played.infidelity:.3e}) "
                  f"{'meets' if point.met else 'misses'} the targets "
                  f"[{point.wall_time_s:.1f} s, compiles so far {self.compiles}]")
        return point, result

    def save(self) -> None:
        atomic.write_json(self.folder / "sweep.json", {
            "recipe": self.recipe.name, "recipe_sha256": self.recipe.sha256,
            "problem_sha256": self.recipe.problem_sha256,
            "points": [vars(p) for _, p in sorted(self.points.items())]})

    def pulse(self, n: int) -> np.ndarray | None:
        """The pulse of duration ``n`` in Hz (baseband, without padding), or None."""
        from shaper.jobs.playback import Playback

        path = self.samples_path(n)
        if not path.exists():
            return None
        recipe = recipe_at(self.recipe, n)
        wave = waveio.read_waveform(path)
        return Playback(recipe, wave).baseband()[wave.pulse_start:wave.pulse_start + n]

    def run(self, durations_s: list[float], *, plots: bool = True) -> int | None:
        """Sweep the grid, refine by bisection; return the shortest passing sample count.

        Writes ``sweep.json`` after every duration and, at the end (also when stopped),
        ``sweep.md`` and, with ``plots``, ``sweep.png``.
        """
        try:
            return self._run(durations_s)
        finally:
            self.write_summary(plots=plots)

    def write_summary(self, *, plots: bool = True) -> None:
        """``sweep.md`` (the table) and ``sweep.png`` (the curves) of the points so far."""
        shortest = min((n for n, p in self.points.items() if p.met), default=None)
        rotating = self.shortest_in_rotating_frame()
        note = "" if rotating is None else (
            f"\nIn the optimiser's rotating frame alone (its model, its levels) the shortest "
            f"duration meeting the targets would be {format_quantity(rotating, 's')}.\n")
        atomic.write_text(self.folder / "sweep.md",
                          f"# Duration sweep of {self.recipe.name}\n\n{self.table()}{note}")
        if plots and self.points:
            from shaper.jobs.plots import plot_sweep

            o = self.recipe.optimizer
            plot_sweep(self.folder / "sweep.png", [p for _, p in sorted(self.points.items())],
                       (o.target_infidelity, o.target_leakage),
                       shortest / self.recipe.sample_rate_hz if shortest else None,
                       title=f"{self.recipe.name}: {self.recipe.target.label} at every "
                             f"duration")

    def add_to_summary(self, heading: str, lines: list[str]) -> None:
        """A section at the end of sweep.md (the explanation of a sweep that missed)."""
        if not lines:
            return
        path = self.folder / "sweep.md"
        text = path.read_text() if path.exists() else ""
        atomic.write_text(path, text + f"\n## {heading}\n\n"
                          + "\n".join(f"- {line}" for line in lines) + "\n")

    def _run(self, durations_s: list[float]) -> int | None:
        rate, hold = self.recipe.sample_rate_hz, self.recipe.hold
        asked = {}
        for d in durations_s:  # whole samples (slices): say where that moved a duration
            asked.setdefault(max(hold, int(round(d * rate / hold)) * hold), d)
        grid = sorted(asked)
        warm = None
        first_pass = None
        for i, n in enumerate(grid):
            if self.out_of_time():
                return None
            point, _ = self.solve(n, warm, asked[n])
            if self.stop:
                return None
            warm = self.pulse(n)
            if point.met and first_pass is None:
                first_pass = i
        if first_pass is None:
            return None
        for n in grid[first_pass + 1:]:  # a failure above a pass: a start that went astray
            if not self.points[n].met and not self.stop:
                self.retry(n, self.pulse(grid[first_pass]))
        while first_pass > 0 and not self.stop and \
                self.retry(grid[first_pass - 1], self.pulse(grid[first_pass - 2])
                           if first_pass > 1 else None).met:
            first_pass -= 1
        return self._bisect(grid, first_pass)

    def _bisect(self, grid: list[int], first_pass: int) -> int | None:
        """Whole samples between the last failing and the first passing grid point; a
        failing midpoint is retried with more starts before it counts."""
        hold = self.recipe.hold
        lo = grid[first_pass - 1] if first_pass > 0 else None
        hi = grid[first_pass]
        while lo is not None and hi - lo > hold and not self.out_of_time():
            mid = lo + ((hi - lo) // (2 * hold)) * hold
            point, _ = self.solve(mid, self.pulse(lo))
            if self.stop:
                return None
            if not point.met:
                point = self.retry(mid, self.pulse(lo))
            if point.met:
                hi = mid
            else:
                lo = mid
        return hi

    def result_at(self, n: int) -> Result:
        """A :class:`Result` for the finished point at ``n`` samples (for the full report)."""
        recipe = recipe_at(self.recipe, n)
        point, samples = self.points[n], self.pulse(n)
        own = (point.own_infidelity, point.own_leakage) if point.own_infidelity is not None \
            else (point.rotating_infidelity, point.rotating_leakage)  # an older sweep.json
        best = StartResult(seed=self.seed, params=None, cost=own[0], parts={},
                           infidelity=own[0], leakage=own[1],
                           iterations=point.iterations, evaluations=point.iterations,
                           stop_reason=point.stop_reason, wall_time_s=point.wall_time_s)
        return Result(recipe=recipe, objective=self.objective_for(recipe), best=best,
                      starts=[best], samples=samples, compile_time_s=0.0,
                      wall_time_s=point.wall_time_s)

    def lowest_total_error(self) -> int | None:
        """With coherence times: the duration (samples) whose total error is lowest."""
        scored = [(p.total_error, n) for n, p in self.points.items() if p.total_error is not None]
        return min(scored)[1] if scored else None

    def shortest_in_rotating_frame(self) -> float | None:
        """The shortest duration (s) whose rotating-frame figures meet the infidelity and
        leakage targets (None: none does, or no point records them)."""
        o = self.recipe.optimizer
        passing = [p.duration_s for p in self.points.values()
                   if p.rotating_infidelity is not None
                   and p.rotating_infidelity <= o.target_infidelity
                   and p.rotating_leakage <= o.target_leakage]
        return min(passing, default=None)

    def table(self) -> str:
        """sweep.md's table: infidelity and leakage as judged (``judged_on``), and the
        optimiser's rotating frame beside them, so both shortest durations show."""
        budget = any(p.total_error is not None for p in self.points.values())
        # each duration has its own worst carrier phase: the header names the model only
        models = {re.sub(r" \([-\d.e+]+ deg\)$", "", p.judged_on)
                  for p in self.points.values() if p.judged_on}
        judged = "each duration in its own model (sweep.json, judged_on)" if models else ""
        if len(models) == 1:
            judged = models.pop()
            judged += " (each duration's own)" if judged.endswith("carrier phase") else ""
        head = "| duration | asked | samples | infidelity | leakage | meets targets | " \
               "rotating frame: infidelity, leakage | "
        if budget:
            head += "incoherent error | total error (T1/T2) | "
        lines = ([f"Infidelity and leakage as judged: {judged} (README, \"How far the "
                  f"figures are trusted\").", ""] if judged else []) + [
            head + "iterations | time (s) |",
            "|---|---|---|---|---|---|---|" + ("---|---|" if budget else "") + "---|---|"]
        for _, p in sorted(self.points.items()):
            asked = "bisection" if p.requested_s is None else format_quantity(p.requested_s, "s")
            extra = f"{p.incoherent_error:.3e} | {p.total_error:.3e} | " \
                if budget and p.total_error is not None else ("| | " if budget else "")
            rotating = "" if p.rotating_infidelity is None else \
                f"{p.rotating_infidelity:.3e}, {p.rotating_leakage:.3e}"
            meets = ("yes" if p.met else "no") + (f" (retried, {p.starts} starts)"
                                                  if p.retried else "")
            lines.append(f"| {format_quantity(p.duration_s, 's')} | {asked} | {p.samples} | "
                         f"{p.infidelity:.3e} | {p.leakage:.3e} | {meets} | "
                         f"{rotating} | {extra}{p.iterations} | {p.wall_time_s:.1f} |")
        return "\n".join(lines) + "\n"
