"""One start of the optimiser: scipy's L-BFGS-B or an optax method, with checkpoints.

A :class:`Tracker` does what every loop shares: it keeps the best point, streams the
history to disk, decides when to stop (targets / margin, iterations, wall clock, stall,
a signal) and when to checkpoint. The optax loops (``adam``, ``lbfgs-jit``) run ten steps
per jitted call and resume bit for bit from a checkpoint; scipy's L-BFGS-B keeps its
memory inside scipy, so it resumes from the checkpoint's point with a fresh memory.
"""

from __future__ import annotations

import json
import time
from dataclasses import dataclass, field
from enum import StrEnum
from pathlib import Path

import jax
import jax.numpy as jnp
import numpy as np
import optax
import scipy.optimize

from shaper.costs.verdict import judge
from shaper.io import atomic
from shaper.optimise import checkpoint
from shaper.optimise.objective import Objective
from shaper.physics._jax import device
from shaper.recipe import Recipe

CHUNK = 10  # optax steps per jitted call
HISTORY_IN_MEMORY = 2000  # records kept in memory (thinned)
HISTORY_ON_DISK = 4000  # records of one start in history.jsonl before it is thinned


class StopReason(StrEnum):
    """Why a start stopped: a fixed set of plain words (``stop_detail`` says more)."""

    TARGETS_MET = "targets met"
    ITERATION_LIMIT = "iteration limit"
    TIME_LIMIT = "time limit"
    NO_PROGRESS = "no progress"          # no 0.1 % improvement in stall_iterations
    CONVERGED = "converged"              # the optimiser can find no better point
    NUMERICAL_FAILURE = "numerical failure"
    INTERRUPTED = "interrupted"


def _scipy_detail(message) -> tuple[StopReason, str]:
    """scipy's L-BFGS-B message in plain words."""
    text = message.decode() if isinstance(message, bytes) else str(message)
    if "ABNORMAL" in text.upper():
        return StopReason.CONVERGED, "the line search found no better point (a flat or noisy " \
                                     "cost at this precision)"
    if "FACTR" in text.upper() or "REL_REDUCTION" in text.upper():
        return StopReason.CONVERGED, "the cost stopped decreasing (relative change at machine " \
                                     "precision)"
    if "PROJ" in text.upper() or "GRADIENT" in text.upper():
        return StopReason.CONVERGED, "the gradient vanished"
    return StopReason.CONVERGED, text.lower()


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
    index: int = 0
    stop_detail: str = ""
    member_infidelities: list[float] | None = None  # each ensemble member's, at the best
    member_leakages: list[float] | None = None


@dataclass
class Session:
    """What one start's loop needs besides the point to start from."""

    recipe: Recipe
    objective: Objective
    deadline: float
    seed: int = 0
    index: int = 0
    progress: object = None
    stop: object = None  # a truthy object once a signal asked to stop
    checkpoint_path: Path | None = None
    history_path: Path | None = None
    checkpoint_every: int = 100
    checkpoint_seconds: float = 60.0
    watchdog: object = None  # a shaper.optimise.watchdog.Watchdog: beaten after every evaluation


class Tracker:
    def __init__(self, session: Session, meta: dict | None = None, best_x=None):
        self.s, self.o = session, session.recipe.optimizer
        self.best, self.iteration, self.evaluations = None, 0, 0
        self.stall_best, self.stall_at, self.reason = np.inf, 0, None
        self.detail = ""  # more about the stop reason, in plain words
        self.on_disk = 0  # records of this start written to history.jsonl
        self.members: tuple[list, list] | None = None  # ensemble figures at the best point
        self.history: list[dict] = []
        self.started = time.monotonic()
        if meta:
            self.iteration, self.evaluations = meta["iteration"], meta["evaluations"]
            self.stall_best, self.stall_at = meta["stall_best"], meta["stall_at"]
            b = meta["best"]
            self.best = (b["cost"], np.asarray(best_x), b["parts"], b["infidelity"],
                         b["leakage"])
            if b.get("member_infidelities") is not None:
                self.members = (b["member_infidelities"], b["member_leakages"])
        self.saved_at, self.saved_iteration = time.monotonic(), self.iteration
        if session.watchdog is not None:
            session.watchdog.tracker = self  # what its rescue saves

    def offer(self, value, x, parts, infidelity, leakage, members=None) -> None:
        """One completed evaluation. ``members``: (fidelities, leakages) of every member,
        row 0 the nominal system (:class:`shaper.costs.Evaluation`)."""
        if self.s.watchdog is not None:
            self.s.watchdog.beat()
        if np.isfinite(value) and (self.best is None or value < self.best[0]):
            self.best = (float(value), np.array(x), {k: float(v) for k, v in parts.items()},
                         float(infidelity), float(leakage))
            if members is not None and np.shape(members[0])[0] > 1:
                fid, leak = np.asarray(members[0]), np.asarray(members[1])
                self.members = ((1.0 - fid[1:]).tolist(), leak[1:].tolist())

    def verdict(self):
        """The optimiser's figures judged by the one rule (:mod:`shaper.costs.verdict`),
        with margin."""
        _, _, parts, infid, leak = self.best
        infids, leaks = self.members or (None, None)
        return judge(self.s.recipe, infidelity=infid, leakage=leak, member_infidelities=infids,
                     member_leakages=leaks, out_of_band=parts.get("bandwidth"),
                     margin=self.o.margin)

    def targets_met(self) -> bool:
        return self.verdict().met

    def iterations_done(self, count: int) -> bool:
        """Record ``count`` finished iterations; True when the start should stop."""
        self.iteration += count
        value, _, parts, infid, leak = self.best
        record = {"iteration": self.iteration, "cost": value, "infidelity": infid,
                  "leakage": leak, **{f"cost_{k}": v for k, v in parts.items()}}
        self.history.append(record)
        if len(self.history) > HISTORY_IN_MEMORY:
            self.history = self.history[::2]
        if self.s.history_path is not None:
            self._stream(record)
        if self.s.progress:
            self.s.progress(record)
        if value < self.stall_best * (1 - 1e-3):
            self.stall_best, self.stall_at = value, self.iteration
        if self.s.stop:
            self.reason = StopReason.INTERRUPTED
            acknowledge = getattr(self.s.stop, "acknowledge", None)
            if acknowledge is not None:
                acknowledge()  # saving now: no forced exit after the grace period
        elif self.targets_met():
            self.reason = StopReason.TARGETS_MET
        elif self.iteration >= self.o.max_iterations:
            self.reason = StopReason.ITERATION_LIMIT
        elif time.monotonic() > self.s.deadline:
            self.reason = StopReason.TIME_LIMIT
        elif self.iteration - self.stall_at >= self.o.stall_iterations:
            self.reason = StopReason.NO_PROGRESS
            self.detail = f"no 0.1 % improvement in {self.o.stall_iterations} iterations"
        return self.reason is not None

    def _stream(self, record: dict) -> None:
        """Append to history.jsonl; past HISTORY_ON_DISK records of this start, thin them to
        every other one (as in memory), so a night's run cannot fill the disk."""
        path = self.s.history_path
        atomic.append_line(path, json.dumps({"start": self.s.index, **record}))
        self.on_disk += 1
        if self.on_disk <= HISTORY_ON_DISK:
            return
        mine, others = [], []
        for line in path.read_text().splitlines():
            try:
                item = json.loads(line)
            except json.JSONDecodeError:
                continue  # a line cut by a kill
            (mine if item.get("start") == self.s.index else others).append(line)
        mine = mine[::2]
        atomic.write_text(path, "\n".join(others + mine) + "\n")
        self.on_disk = len(mine)

    def checkpoint_due(self) -> bool:
        return self.s.checkpoint_path is not None and (
            self.reason is not None
            or self.iteration - self.saved_iteration >= self.s.checkpoint_every
            or time.monotonic() - self.saved_at >= self.s.checkpoint_seconds)

    def save(self, x, state_leaves=(), finished: bool = False) -> None:
        value, best_x, parts, infid, leak = self.best
        arrays = {"x": np.asarray(x), "best_x": best_x}
        arrays.update({f"state_{i}": np.asarray(a) for i, a in enumerate(state_leaves)})
        meta = {"recipe_sha256": self.s.recipe.sha256, "method": self.o.method,
                "seed": self.s.seed, "index": self.s.index, "iteration": self.iteration,
                "evaluations": self.evaluations, "stall_best": self.stall_best,
                "stall_at": self.stall_at, "finished": finished,
                "stop_reason": None if self.reason is None else str(self.reason),
                "stop_detail": self.detail,
                "state_leaves": len(state_leaves),
                "best": {"cost": value, "parts": parts, "infidelity": infid, "leakage": leak,
                         "member_infidelities": (self.members or (None, None))[0],
                         "member_leakages": (self.members or (None, None))[1]}}
        checkpoint.save(self.s.checkpoint_path, arrays, meta)
        self.saved_at, self.saved_iteration = time.monotonic(), self.iteration

    def result(self) -> StartResult:
        value, x, parts, infid, leak = self.best
        return StartResult(seed=self.s.seed, params=x, cost=value, parts=parts,
                           infidelity=infid, leakage=leak, iterations=self.iteration,
                           evaluations=self.evaluations, stop_reason=str(self.reason),
                           stop_detail=self.detail,
                           wall_time_s=time.monotonic() - self.started, history=self.history,
                           index=self.s.index,
                           member_infidelities=(self.members or (None, None))[0],
                           member_leakages=(self.members or (None, None))[1])


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
            tracker.reason, tracker.detail = _scipy_detail(res.message)
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


def run_start(session: Session, x0: np.ndarray, resume=None) -> StartResult:
    if session.recipe.optimizer.method == "lbfgs":
        return run_scipy(session, x0, resume)
    return run_optax(session, x0, resume)
