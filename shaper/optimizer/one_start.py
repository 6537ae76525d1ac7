"""One start of an optimisation: its first point, its checkpoint, its loop.

Used by :func:`shaper.optimizer.starts.optimize` in this process and by the worker
processes of :mod:`shaper.optimizer.parallel` alike.
"""

from __future__ import annotations

import logging
import time
from pathlib import Path

import jax
import numpy as np

from shaper.costs.problem import recipe_layout
from shaper.errors import ResultError
from shaper.optimizer import checkpoint
from shaper.optimizer.methods import run_start
from shaper.optimizer.objective import Objective
from shaper.optimizer.options import RunOptions
from shaper.optimizer.tracker import Session, StartResult, StopReason
from shaper.physics._jax import device
from shaper.recipe import Recipe
from shaper.signal.pulses import first_guess, rotation_area, to_params

# Events a user must hear about during a run (a damaged checkpoint replaced by its previous
# copy). The command line sends them to run.log and the terminal.
LOG = logging.getLogger("shaper")


def initial_samples(recipe: Recipe, objective: Objective, rng: np.random.Generator) -> np.ndarray:
    """The recipe's first guess, in Hz, on the AWG grid."""
    kind = recipe.optimizer.initial
    if kind.endswith((".csv", ".npy", ".npz")):
        from shaper.io.waveform_import import read_first_guess
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


# stop reasons as earlier versions wrote them into checkpoints
LEGACY_STOPS = {"targets met": str(StopReason.TARGETS_MET)}


def finished_start(path: Path | None, recipe: Recipe) -> tuple[StartResult | None, tuple | None]:
    """A start's state on disk: (its result if it had finished, the resume tuple if not)."""
    if path is None or not (path.exists() or checkpoint.previous(path).exists()):
        return None, None
    arrays, meta, note = checkpoint.load(path, recipe.sha256, recipe.problem_sha256)
    if note:
        LOG.warning(f"{path.name}: {note}")
    if meta.get("method") != recipe.optimizer.method:
        raise ResultError(f"{path}: written by method {meta.get('method')!r}, the recipe now "
                          f"asks for {recipe.optimizer.method!r}")
    b = meta["best"]
    o = recipe.optimizer
    more = (meta.get("stop_reason") == "iteration limit" and meta["iteration"] < o.max_iterations
            or meta.get("stop_reason") == "time limit")  # a larger budget: go on
    if meta["finished"] and not more:
        return StartResult(seed=meta["seed"], params=arrays["best_x"], cost=b["cost"],
                           parts=b["parts"], infidelity=b["infidelity"],
                           leakage=b["leakage"], iterations=meta["iteration"],
                           evaluations=meta["evaluations"],
                           stop_reason=LEGACY_STOPS.get(meta["stop_reason"], meta["stop_reason"]),
                           stop_detail=meta.get("stop_detail", ""),
                           wall_time_s=0.0, index=meta["index"],
                           member_infidelities=b.get("member_infidelities"),
                           member_leakages=b.get("member_leakages")), None
    return None, (meta, arrays["best_x"], arrays)


def run_one(recipe: Recipe, objective: Objective, index: int, seed: int, options: RunOptions,
            *, deadline: float, first: np.ndarray | None = None) -> StartResult:
    """Run (or resume, or pick up the finished result of) start ``index``.

    ``first``: samples (Hz) to begin start 0 from (a sweep's warm start).
    """
    folder = options.folder
    path = checkpoint_path(folder, index)
    done, state = finished_start(path, recipe) if options.resume else (None, None)
    if done is not None:
        return done
    x0 = state[2]["x"] if state is not None else start_point(recipe, objective, seed, index,
                                                             first)
    session = Session(recipe=recipe, objective=objective, deadline=deadline, seed=seed,
                      index=index, progress=options.progress, stop=options.stop,
                      checkpoint_path=path,
                      history_path=None if folder is None else folder / "history.jsonl",
                      checkpoint_every=options.checkpoint_every,
                      checkpoint_seconds=options.checkpoint_seconds, watchdog=options.watchdog)
    return run_start(session, np.asarray(x0), state)


def compile_now(objective: Objective) -> float:
    """Compile the value and gradient once, outside the loops' clocks; return the seconds."""
    c0 = time.monotonic()
    probe = device(np.zeros(objective.layout.shape))  # as the loops pass theirs: one compile
    jax.block_until_ready(objective.value_and_grad(probe, objective.problem,
                                                   device(objective.weights, float)))
    return time.monotonic() - c0


