"""Optimise a recipe: first guesses, one or many starts, budgets, checkpoints, resume.

The loops themselves live in :mod:`shaper.loops`. Starts run one after another in this
process, or in worker processes (:mod:`shaper.parallel`) with ``workers > 1``; start i
always uses seed + i, so the results do not depend on how the starts were scheduled.
"""

from __future__ import annotations

import json
import logging
import time
from collections.abc import Callable
from dataclasses import dataclass, replace
from pathlib import Path

import jax
import jax.numpy as jnp
import numpy as np

from shaper import checkpoint
from shaper.errors import ResultError
from shaper.loops import Session, StartResult, run_start
from shaper.objective import Objective, make_objective, recipe_layout
from shaper.pulses import first_guess, rotation_area, to_params, to_samples
from shaper.recipe import Recipe, load_recipe

__all__ = ["Result", "StartResult", "optimize", "initial_samples"]

# Events a user must hear about during a run (a damaged checkpoint replaced by its previous
# copy). The command line sends them to run.log and the terminal.
LOG = logging.getLogger("shaper")


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


def initial_samples(recipe: Recipe, objective: Objective, rng: np.random.Generator) -> np.ndarray:
    """The recipe's first guess, in Hz, on the AWG grid."""
    kind = recipe.optimizer.initial
    if kind.endswith((".csv", ".npy", ".npz")):
        from shaper.waveform_import import read_first_guess
        return read_first_guess(kind, recipe)
    axis = "y" if recipe.target.label.upper().startswith("Y") else "x"
    samples = first_guess(kind, recipe.system, recipe_layout(recipe), recipe.dt,
                          area=rotation_area(recipe.target.label), rng=rng,
                          drag_scale=recipe.optimizer.drag_scale, axis=axis)
    return np.asarray(samples)


def start_point(recipe: Recipe, objective: Objective, seed: int, index: int,
                first: np.ndarray | None = None) -> np.ndarray:
    """Parameters of start ``index``: the first guess (``first``, samples in Hz, if given,
    for start 0: a sweep's warm start), perturbed for every start after the first."""
    rng = np.random.default_rng(seed)
    guess = first if first is not None and index == 0 else initial_samples(recipe, objective,
                                                                           rng)
    guess = np.concatenate([guess, np.zeros((objective.layout.samples - guess.shape[0],
                                             guess.shape[1]))])
    x0 = to_params(guess, objective.layout)
    if index > 0:
        x0 = x0 + rng.normal(scale=0.1, size=x0.shape)
    return x0


def checkpoint_path(folder: Path | None, index: int) -> Path | None:
    return None if folder is None else Path(folder) / f"checkpoint-{index}.npz"


def finished_start(path: Path | None, recipe: Recipe) -> tuple[StartResult | None, tuple | None]:
    """A start's state on disk: (its result if it had finished, the resume tuple if not)."""
    if path is None or not (path.exists() or checkpoint.previous(path).exists()):
        return None, None
    arrays, meta, note = checkpoint.load(path, recipe.sha256)
    if note:
        LOG.warning(f"{path.name}: {note}")
    if meta.get("method") != recipe.optimizer.method:
        raise ResultError(f"{path}: written by method {meta.get('method')!r}, the recipe now "
                          f"asks for {recipe.optimizer.method!r}")
    b = meta["best"]
    if meta["finished"]:
        return StartResult(seed=meta["seed"], params=arrays["best_x"], cost=b["cost"],
                           parts=b["parts"], infidelity=b["infidelity"],
                           leakage=b["leakage"], iterations=meta["iteration"],
                           evaluations=meta["evaluations"], stop_reason=meta["stop_reason"],
                           stop_detail=meta.get("stop_detail", ""),
                           wall_time_s=0.0, index=meta["index"],
                           member_infidelities=b.get("member_infidelities"),
                           member_leakages=b.get("member_leakages")), None
    return None, (meta, arrays["best_x"], arrays)


def run_one(recipe: Recipe, objective: Objective, index: int, seed: int, *, deadline: float,
            folder: Path | None, resume: bool, progress=None, stop=None,
            checkpoint_every: int = 100, checkpoint_seconds: float = 60.0,
            watchdog=None, first: np.ndarray | None = None) -> StartResult:
    """Run (or resume, or pick up the finished result of) start ``index``."""
    path = checkpoint_path(folder, index)
    done, state = finished_start(path, recipe) if resume else (None, None)
    if done is not None:
        return done
    x0 = state[2]["x"] if state is not None else start_point(recipe, objective, seed, index,
                                                             first)
    session = Session(recipe=recipe, objective=objective, deadline=deadline, seed=seed,
                      index=index, progress=progress, stop=stop, checkpoint_path=path,
                      history_path=None if folder is None else Path(folder) / "history.jsonl",
                      checkpoint_every=checkpoint_every, checkpoint_seconds=checkpoint_seconds,
                      watchdog=watchdog)
    return run_start(session, np.asarray(x0), state)


def compile_now(objective: Objective) -> float:
    """Compile the value and gradient once, outside the loops' clocks; return the seconds."""
    c0 = time.monotonic()
    probe = jnp.zeros((objective.layout.slices, objective.layout.controls))
    jax.block_until_ready(objective.value_and_grad(probe, objective.problem,
                                                   jnp.asarray(objective.weights)))
    return time.monotonic() - c0


def with_budget(recipe: Recipe, *, iterations: int | None = None,
                hours: float | None = None, starts: int | None = None) -> Recipe:
    """The recipe with the command line's budgets in place of its own."""
    o = recipe.optimizer
    return replace(recipe, optimizer=replace(
        o, max_iterations=iterations or o.max_iterations,
        max_time_s=hours * 3600 if hours else o.max_time_s, starts=starts or o.starts))


def optimize(recipe_or_path, *, seed: int | None = None,
             progress: Callable[[dict], None] | None = None, folder: str | Path | None = None,
             resume: bool = False, stop=None, workers: int = 1, checkpoint_every: int = 100,
             checkpoint_seconds: float = 60.0, on_start_done=None, watchdog=None,
             objective: Objective | None = None, first: np.ndarray | None = None) -> Result:
    """Optimise the pulse a recipe describes.

    Args:
        recipe_or_path: a :class:`~shaper.recipe.Recipe`, a TOML path, or a dictionary.
        seed: overrides ``optimizer.seed``; start i uses seed + i.
        progress: called with a dict (iteration, cost, infidelity, leakage, cost_<term>)
            after every iteration (every 10 for the optax methods), serial starts only.
        folder: where checkpoints (``checkpoint-<i>.npz``) and ``history.jsonl`` go;
            None: no checkpoints.
        resume: continue from the checkpoints in ``folder``; finished starts are not redone.
        stop: an object that turns truthy when the run should stop (a signal); with
            ``workers > 1`` it reaches the workers through a file in ``folder``, so it
            needs a folder there.
        workers: > 1 runs the starts in that many worker processes.
        on_start_done: called with each finished :class:`StartResult`.
        watchdog: a :class:`~shaper.watchdog.Watchdog` beaten after every evaluation of a
            serial start (worker processes run their own).
        objective: a compiled objective for this recipe to reuse (a sweep's padded one);
            worker processes build their own.
        first: samples (Hz, the recipe's length) to start the first start from.

    Returns:
        A :class:`Result`; the best start's samples are ``result.samples`` (Hz).
    """
    recipe = recipe_or_path if isinstance(recipe_or_path, Recipe) else load_recipe(
        recipe_or_path)
    o = recipe.optimizer
    seed = o.seed if seed is None else seed
    folder = None if folder is None else Path(folder)
    if folder is not None:
        folder.mkdir(parents=True, exist_ok=True)
    t0 = time.monotonic()
    objective = objective or make_objective(recipe)
    deadline = t0 + o.max_time_s
    options = dict(deadline=deadline, folder=folder, resume=resume, stop=stop,
                   checkpoint_every=checkpoint_every, checkpoint_seconds=checkpoint_seconds,
                   first=first)
    if workers > 1 and o.starts > 1:
        from shaper.parallel import run_parallel
        limit = watchdog.limit_s if watchdog is not None else None
        starts, compile_time = run_parallel(recipe, seed, workers, on_start_done,
                                            stall_limit_s=limit, watchdog=watchdog, **options)
    else:
        options["watchdog"] = watchdog
        compile_time = compile_now(objective)
        if watchdog is not None:
            watchdog.beat("compile")
        starts = []
        for i in range(o.starts):
            start = run_one(recipe, objective, i, seed + i, progress=progress, **options)
            starts.append(start)
            if on_start_done:
                on_start_done(start)
            if start.stop_reason == "interrupted" or time.monotonic() > deadline:
                break
    best = min(starts, key=lambda s: s.cost)
    samples = np.asarray(to_samples(jnp.asarray(best.params), objective.layout,
                                    objective.problem.envelope))[:recipe.samples]
    if folder is not None:
        from shaper import atomic
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
