"""Optimise a recipe: first guesses, one or many starts, budgets, checkpoints, resume.

The loops themselves live in :mod:`shaper.optimizer.methods`. Starts run one after another in this
process, or in worker processes (:mod:`shaper.optimizer.parallel`) with ``workers > 1``; start i
always uses seed + i, so the results do not depend on how the starts were scheduled.
"""

from __future__ import annotations

import json
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from shaper.optimizer.objective import Objective, make_objective
from shaper.optimizer.one_start import compile_now, run_one
from shaper.optimizer.options import RunOptions
from shaper.optimizer.tracker import StartResult
from shaper.recipe import Recipe, load_recipe
from shaper.signal.pulses import to_samples

__all__ = ["Result", "StartResult", "optimize", "read_history"]



@dataclass
class Result:
    """What :func:`optimize` returns: the best start's samples and every start's summary.

    ``samples`` are in Hz on the AWG grid, ``(n, k)``, before any export step.
    """

    recipe: Recipe
    objective: Objective
    best: StartResult
    starts: list[StartResult]
    samples: np.ndarray
    compile_time_s: float
    wall_time_s: float

    @property
    def stop_reason(self) -> str:
        return self.best.stop_reason

    @property
    def history(self) -> list[dict]:
        return self.best.history


def optimize(recipe_or_path, options: RunOptions | None = None, *,
             objective: Objective | None = None, first: np.ndarray | None = None,
             **option_fields) -> Result:
    """Optimise the pulse a recipe describes.

    Args:
        recipe_or_path: a :class:`~shaper.recipe.Recipe`, a TOML path, or a dictionary.
        options: how to run (:class:`~shaper.optimizer.options.RunOptions`: seed, folder for
            checkpoints, resume, workers, hooks); ``option_fields`` set single fields, e.g.
            ``optimize(recipe, workers=2)``.
        objective: a compiled objective for this recipe to reuse (a sweep's padded one);
            worker processes build their own.
        first: samples (Hz, the recipe's length) to begin the first start from.

    Returns:
        A :class:`Result`; the best start's samples are ``result.samples`` (Hz).
    """
    options = (options or RunOptions()).with_(**option_fields)
    recipe = recipe_or_path if isinstance(recipe_or_path, Recipe) else load_recipe(
        recipe_or_path)
    o = recipe.optimizer
    seed = o.seed if options.seed is None else options.seed
    folder = options.folder
    if folder is not None:
        folder.mkdir(parents=True, exist_ok=True)
    t0 = time.monotonic()
    objective = objective or make_objective(recipe)
    deadline = t0 + min(o.max_time_s, options.time_left_s or o.max_time_s)
    count = options.starts or o.starts
    watchdog = options.watchdog
    if options.workers > 1 and count > 1:
        from shaper.optimizer.parallel import run_parallel
        starts, compile_time = run_parallel(recipe, seed, options, deadline=deadline,
                                            first=first, count=count)
    else:
        compile_time = compile_now(objective)
        if watchdog is not None:
            watchdog.beat("compile")
        starts = []
        for i in range(count):
            start = run_one(recipe, objective, i, seed + i, options, deadline=deadline,
                            first=first)
            starts.append(start)
            if options.on_start_done:
                options.on_start_done(start)
            if start.stop_reason == "interrupted" or time.monotonic() > deadline:
                break
    best = min(starts, key=lambda s: s.cost)
    samples = to_samples(np.asarray(best.params), objective.layout,  # NumPy: no JAX op
                         np.asarray(objective.problem.envelope))[:recipe.samples]
    if folder is not None:
        from shaper.io import atomic
        atomic.write_json(folder / "starts.json", [
            {"index": s.index, "seed": s.seed, "cost": s.cost, "infidelity": s.infidelity,
             "leakage": s.leakage, "iterations": s.iterations, "stop_reason": s.stop_reason}
            for s in starts])
    return Result(recipe=recipe, objective=objective, best=best, starts=starts,
                  samples=samples, compile_time_s=compile_time,
                  wall_time_s=time.monotonic() - t0)


def read_history(folder: Path, index: int) -> list[dict]:
    """The streamed history of one start (all records, across resumes)."""
    path = Path(folder) / "history.jsonl"
    if not path.exists():
        return []
    out = []
    with open(path) as handle:
        for line in handle:
            try:
                record = json.loads(line)
            except json.JSONDecodeError:
                continue  # a line cut by a kill
            if record.pop("start", None) == index:
                out.append(record)
    return out
