"""The optimiser loop: L-BFGS-B (scipy) or Adam (optax) on the jitted value-and-gradient.

A thin Python loop around a pure jitted step does the logging and stopping: at the
recipe's targets (divided by ``margin``, to leave room for DAC quantisation), at the
iteration limit, at the wall-clock limit, when progress stalls, or when the
optimiser itself converges. The reason is reported. A numerical failure is a status
with a message, not a traceback.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field

import jax
import jax.numpy as jnp
import numpy as np
import optax
import scipy.optimize

from shaper.objective import Objective, make_objective
from shaper.pulses import first_guess, rotation_area, to_params, to_samples
from shaper.recipe import Recipe, load_recipe

ADAM_CHUNK = 10  # Adam steps per jitted call


@dataclass
class StartResult:
    """One start: its seed, the best parameters found and how it ended."""

    seed: int
    params: np.ndarray
    cost: float
    parts: dict[str, float]
    infidelity: float
    leakage: float
    iterations: int
    evaluations: int
    stop_reason: str
    wall_time_s: float
    history: list[dict] = field(default_factory=list)


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
        from shaper.waveio import read_waveform_for
        return read_waveform_for(kind, recipe)
    axis = "y" if recipe.target.label.upper().startswith("Y") else "x"
    samples = first_guess(kind, recipe.system, objective.layout, recipe.dt,
                          area=rotation_area(recipe.target.label), rng=rng,
                          drag_scale=recipe.optimizer.drag_scale, axis=axis)
    return np.asarray(samples)


def _targets_met(recipe: Recipe, infidelity: float, leak: float, parts: dict) -> bool:
    o = recipe.optimizer
    band_ok = "bandwidth" not in parts or parts["bandwidth"] <= recipe.max_out_of_band / o.margin
    return (infidelity <= o.target_infidelity / o.margin
            and leak <= o.target_leakage / o.margin and band_ok)


class _Stop(Exception):
    pass


def _run_lbfgs(recipe, objective, x0, weights, progress, deadline) -> StartResult:
    shape = x0.shape
    o = recipe.optimizer
    state = {"best": None, "evals": 0, "iters": 0, "reason": None, "history": [],
             "stall_best": np.inf, "stall_at": 0}

    def fun(x):
        (value, (parts, figures)), grad = objective.value_and_grad(
            jnp.asarray(x.reshape(shape)), objective.problem, weights)
        state["evals"] += 1
        value = float(value)
        if not np.isfinite(value) or not np.all(np.isfinite(grad)):
            state["reason"] = ("numerical failure: the cost or its gradient is not finite; "
                               "try a smaller max_rabi, more levels, or another first guess")
            raise _Stop
        entry = (value, x.copy(), {k: float(v) for k, v in parts.items()},
                 1.0 - float(figures.fidelity), float(figures.leakage))
        if state["best"] is None or value < state["best"][0]:
            state["best"] = entry
        return value, np.asarray(grad, dtype=float).ravel()

    def callback(intermediate_result):
        state["iters"] += 1
        value, _, parts, infid, leak = state["best"]
        record = {"iteration": state["iters"], "cost": value, "infidelity": infid,
                  "leakage": leak, **{f"cost_{k}": v for k, v in parts.items()}}
        state["history"].append(record)
        if progress:
            progress(record)
        if value < state["stall_best"] * (1 - 1e-3):
            state["stall_best"], state["stall_at"] = value, state["iters"]
        if _targets_met(recipe, infid, leak, parts):
            state["reason"] = "targets met"
        elif state["iters"] >= o.max_iterations:
            state["reason"] = "iteration limit"
        elif time.monotonic() > deadline:
            state["reason"] = "time limit"
        elif state["iters"] - state["stall_at"] >= o.stall_iterations:
            state["reason"] = f"stalled: no 0.1% improvement in {o.stall_iterations} iterations"
        if state["reason"]:
            raise StopIteration

    start = time.monotonic()
    try:
        res = scipy.optimize.minimize(fun, x0.ravel(), jac=True, method="L-BFGS-B",
                                      callback=callback,
                                      options={"maxiter": o.max_iterations + 1, "maxcor": 30,
                                               "ftol": 1e-16, "gtol": 1e-14, "maxls": 40})
        if state["reason"] is None:
            state["reason"] = f"optimiser converged ({res.message})"
    except _Stop:
        pass
    value, x, parts, infid, leak = state["best"]
    return StartResult(seed=0, params=x.reshape(shape), cost=value, parts=parts,
                       infidelity=infid, leakage=leak, iterations=state["iters"],
                       evaluations=state["evals"], stop_reason=state["reason"],
                       wall_time_s=time.monotonic() - start, history=state["history"])


def _adam_runner(objective: Objective, learning_rate: float):
    optimizer = optax.apply_if_finite(optax.adam(learning_rate), max_consecutive_errors=20)

    @jax.jit
    def chunk(params, opt_state, problem, weights):
        def step(carry, _):
            params, opt_state = carry
            (value, (parts, figures)), grad = jax.value_and_grad(objective.loss, has_aux=True)(
                params, problem, weights)
            updates, opt_state = optimizer.update(grad, opt_state, params)
            record = (value, parts, 1.0 - figures.fidelity, figures.leakage, params)
            return (optax.apply_updates(params, updates), opt_state), record
        return jax.lax.scan(step, (params, opt_state), None, length=ADAM_CHUNK)
    return optimizer, chunk


def _run_adam(recipe, objective, x0, weights, progress, deadline) -> StartResult:
    o = recipe.optimizer
    optimizer, chunk = _adam_runner(objective, o.learning_rate)
    params = jnp.asarray(x0)
    opt_state = optimizer.init(params)
    best, history, iters, reason = None, [], 0, None
    stall_best, stall_at = np.inf, 0
    start = time.monotonic()
    while reason is None:
        (params, opt_state), (values, parts, infids, leaks, seen) = chunk(
            params, opt_state, objective.problem, weights)
        values = np.asarray(values)
        if not np.all(np.isfinite(values)):
            reason = ("numerical failure: the cost is not finite; try a smaller "
                      "learning_rate or another first guess")
        for j in range(ADAM_CHUNK):
            iters += 1
            if not np.isfinite(values[j]):
                continue
            entry = (float(values[j]), np.asarray(seen[j]),
                     {k: float(v[j]) for k, v in parts.items()}, float(infids[j]),
                     float(leaks[j]))
            if best is None or entry[0] < best[0]:
                best = entry
        record = {"iteration": iters, "cost": best[0], "infidelity": best[3],
                  "leakage": best[4], **{f"cost_{k}": v for k, v in best[2].items()}}
        history.append(record)
        if progress:
            progress(record)
        if best[0] < stall_best * (1 - 1e-3):
            stall_best, stall_at = best[0], iters
        if reason:
            break
        if _targets_met(recipe, best[3], best[4], best[2]):
            reason = "targets met"
        elif iters >= o.max_iterations:
            reason = "iteration limit"
        elif time.monotonic() > deadline:
            reason = "time limit"
        elif iters - stall_at >= o.stall_iterations:
            reason = f"stalled: no 0.1% improvement in {o.stall_iterations} iterations"
    value, x, parts, infid, leak = best
    return StartResult(seed=0, params=x, cost=value, parts=parts, infidelity=infid,
                       leakage=leak, iterations=iters, evaluations=iters, stop_reason=reason,
                       wall_time_s=time.monotonic() - start, history=history)


def optimize(recipe_or_path, *, seed: int | None = None,
             progress: Callable[[dict], None] | None = None) -> Result:
    """Optimise the pulse a recipe describes.

    Args:
        recipe_or_path: a :class:`~shaper.recipe.Recipe`, a TOML path, or a dictionary.
        seed: overrides ``optimizer.seed``; start i uses seed + i.
        progress: called with a dict (iteration, cost, infidelity, leakage, cost_<term>)
            after every iteration (every 10 for Adam).

    Returns:
        A :class:`Result`; the best start's samples are ``result.samples`` (Hz).
    """
    recipe = recipe_or_path if isinstance(recipe_or_path, Recipe) else load_recipe(
        recipe_or_path)
    o = recipe.optimizer
    seed = o.seed if seed is None else seed
    t0 = time.monotonic()
    objective = make_objective(recipe)
    weights = jnp.asarray(objective.weights)
    # compile once, outside the timed loop
    c0 = time.monotonic()
    x_probe = jnp.zeros((objective.layout.slices, objective.layout.controls))
    jax.block_until_ready(objective.value_and_grad(x_probe, objective.problem, weights))
    compile_time = time.monotonic() - c0
    deadline = t0 + o.max_time_s
    runner = _run_adam if o.method == "adam" else _run_lbfgs
    starts = []
    for i in range(o.starts):
        rng = np.random.default_rng(seed + i)
        guess = initial_samples(recipe, objective, rng)
        x0 = to_params(guess, objective.layout)
        if i > 0 or o.initial == "random":
            x0 = x0 + rng.normal(scale=0.1 if i > 0 else 0.0, size=x0.shape)
        start = runner(recipe, objective, x0, weights, progress, deadline)
        start.seed = seed + i
        starts.append(start)
        if time.monotonic() > deadline:
            break
    best = min(starts, key=lambda s: s.cost)
    samples = np.asarray(to_samples(jnp.asarray(best.params), objective.layout))
    return Result(recipe=recipe, objective=objective, best=best, starts=starts,
                  samples=samples, compile_time_s=compile_time,
                  wall_time_s=time.monotonic() - t0)
