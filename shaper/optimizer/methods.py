"""The optimisation methods: a registry from ``optimizer.method`` to the loop of one start.

Each method runs one start from a point and returns a :class:`StartResult`, offering every
evaluation and iteration to a :class:`~shaper.optimizer.tracker.Tracker` (which decides
when to stop and checkpoint). The optax loops (``adam``, ``lbfgs-jit``) run ten steps per
jitted call and resume bit for bit from a checkpoint; scipy's L-BFGS-B (``lbfgs``) keeps its
memory inside scipy, so it resumes from the checkpoint's point with a fresh memory. A new
method is one function plus one :func:`register` call (DEVELOPERS.md, "Where new things go").
"""

from __future__ import annotations

import importlib
from collections.abc import Callable

import jax
import jax.numpy as jnp
import numpy as np
import optax
import scipy.optimize

from shaper.optimizer.objective import Objective
from shaper.optimizer.tracker import Session, StartResult, StopReason, Tracker, scipy_detail
from shaper.physics._jax import device
from shaper.recipe import Recipe, schema

CHUNK = 10  # optax steps per jitted call

class _Failure(Exception):
    pass


def run_scipy(session: Session, x0: np.ndarray, resume=None) -> StartResult:
    """L-BFGS-B (scipy.optimize.minimize) on the jitted value and gradient."""
    obj, shape = session.objective, x0.shape
    weights = device(obj.weights, float)
    meta, best_x, _ = (None, None, None) if resume is None else resume
    tracker = Tracker(session, meta, best_x)
    current = {"x": np.array(x0)}

    def fun(x):
        (value, (parts, scores)), grad = obj.value_and_grad(device(x.reshape(shape)),
                                                            obj.problem, weights)
        figures = scores.nominal
        tracker.evaluations += 1
        if not np.isfinite(float(value)) or not np.all(np.isfinite(grad)):
            tracker.reason = StopReason.NUMERICAL_FAILURE
            tracker.detail = ("the cost or its gradient is not finite; try a smaller max_rabi, "
                              "more levels, or another first guess")
            raise _Failure
        tracker.offer(float(value), x.reshape(shape), parts, 1.0 - float(figures.fidelity),
                      float(figures.leakage),
                      (scores.members.fidelity, scores.members.leakage))
        return float(value), np.asarray(grad, dtype=float).ravel()

    def callback(intermediate_result):
        current["x"] = intermediate_result.x.reshape(shape).copy()
        stop = tracker.iterations_done(1)
        if tracker.checkpoint_due():
            tracker.save(current["x"])
        if stop:
            raise StopIteration

    remaining = session.recipe.optimizer.max_iterations - tracker.iteration
    try:
        res = scipy.optimize.minimize(
            fun, current["x"].ravel(), jac=True, method="L-BFGS-B", callback=callback,
            options={"maxiter": remaining + 1, "maxcor": 30, "ftol": 1e-16, "gtol": 1e-14,
                     "maxls": 40})
        if tracker.reason is None:
            tracker.reason, tracker.detail = scipy_detail(res.message)
    except _Failure:
        pass
    if session.checkpoint_path is not None and tracker.best is not None:
        tracker.save(current["x"], finished=tracker.reason != "interrupted")
    return tracker.result()


def _optax_optimizer(recipe: Recipe):
    if recipe.optimizer.method == "adam":
        return optax.apply_if_finite(optax.adam(recipe.optimizer.learning_rate),
                                     max_consecutive_errors=20), False
    return optax.lbfgs(memory_size=30), True


def _chunk_runner(objective: Objective, optimizer, needs_value: bool):
    @jax.jit
    def chunk(params, opt_state, problem, weights):
        def value_fn(x):
            return objective.loss(x, problem, weights)[0]

        def step(carry, _):
            params, opt_state = carry
            if needs_value:  # L-BFGS: its line search reuses values kept in the state
                value, grad = optax.value_and_grad_from_state(value_fn)(params, state=opt_state)
                updates, opt_state = optimizer.update(grad, opt_state, params, value=value,
                                                      grad=grad, value_fn=value_fn)
                new = optax.apply_updates(params, updates)
                # The parts are those of the point the line search accepted; evaluating them
                # there (not at ``params``) makes this evaluation depend on the line search,
                # so the program never runs two eigendecompositions at once (DEVELOPERS.md,
                # "One eigendecomposition per program").
                value, (parts, scores) = objective.loss(new, problem, weights)
                record = (value, parts, 1.0 - scores.nominal.fidelity, scores.nominal.leakage,
                          new, scores.members.fidelity, scores.members.leakage)
                return (new, opt_state), record
            (value, (parts, scores)), grad = jax.value_and_grad(
                objective.loss, has_aux=True)(params, problem, weights)
            updates, opt_state = optimizer.update(grad, opt_state, params)
            record = (value, parts, 1.0 - scores.nominal.fidelity, scores.nominal.leakage,
                      params, scores.members.fidelity, scores.members.leakage)
            return (optax.apply_updates(params, updates), opt_state), record
        return jax.lax.scan(step, (params, opt_state), None, length=CHUNK)
    return chunk


def run_optax(session: Session, x0: np.ndarray, resume=None) -> StartResult:
    """Adam or L-BFGS from optax, ten steps per jitted call; resumes bit for bit."""
    obj = session.objective
    optimizer, needs_value = _optax_optimizer(session.recipe)
    chunk = _chunk_runner(obj, optimizer, needs_value)
    weights = device(obj.weights, float)
    params = device(x0, float)
    opt_state = optimizer.init(params)
    meta, best_x, arrays = (None, None, None) if resume is None else resume
    tracker = Tracker(session, meta, best_x)
    if arrays is not None and meta.get("state_leaves"):  # restore the optimiser's state
        leaves, treedef = jax.tree_util.tree_flatten(opt_state)
        restored = [jnp.asarray(arrays[f"state_{i}"], dtype=leaf.dtype)
                    for i, leaf in enumerate(leaves)]
        opt_state = jax.tree_util.tree_unflatten(treedef, restored)
    while True:
        (params, opt_state), (values, parts, infids, leaks, seen, m_fid, m_leak) = chunk(
            params, opt_state, obj.problem, weights)
        values = np.asarray(values)
        tracker.evaluations += CHUNK
        for j in range(CHUNK):
            tracker.offer(values[j], np.asarray(seen[j]), {k: v[j] for k, v in parts.items()},
                          infids[j], leaks[j], (m_fid[j], m_leak[j]))
        if tracker.best is None:
            tracker.reason = StopReason.NUMERICAL_FAILURE
            tracker.detail = ("the cost is not finite; try a smaller learning_rate or another "
                              "first guess")
            return tracker.result()
        stop = tracker.iterations_done(CHUNK)
        if tracker.checkpoint_due():
            tracker.save(params, jax.tree_util.tree_leaves(opt_state),
                         finished=stop and tracker.reason != "interrupted")
        if stop:
            return tracker.result()


Loop = Callable[[Session, np.ndarray, object], StartResult]


def register(name: str, run: Loop, what: str) -> None:
    """Make ``optimizer.method = "<name>"`` a valid recipe value that runs ``run``
    (``what``: one line for the README's key table and error messages); the one registry
    is :data:`shaper.recipe.schema.METHODS`."""
    schema.METHODS[name] = schema.Method(what, run)


def loop_of(name: str) -> Loop:
    """The loop of one start of method ``name`` (a built-in's imported by its path)."""
    run = schema.METHODS[name].run
    if isinstance(run, str):
        module, function = run.split(":")
        run = getattr(importlib.import_module(module), function)
    return run


def run_start(session: Session, x0: np.ndarray, resume=None) -> StartResult:
    """One start by the recipe's method; ``resume``: ``(meta, best_x, arrays)`` of its
    checkpoint, or None."""
    return loop_of(session.recipe.optimizer.method)(session, x0, resume)
