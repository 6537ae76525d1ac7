"""What every optimisation method shares: the best point, the history, when to stop.

A :class:`Tracker` keeps the best point, streams the history to disk, decides when to stop
(targets / margin, iterations, wall clock, stall, a signal) and when to checkpoint; a
method (:mod:`shaper.optimizer.methods`) offers it each evaluation and each iteration.
"""

from __future__ import annotations

import json
import time
from dataclasses import dataclass, field
from enum import StrEnum
from pathlib import Path

import numpy as np

from shaper.costs.verdict import judge
from shaper.io import atomic
from shaper.optimizer import checkpoint
from shaper.optimizer.objective import Objective
from shaper.recipe import Recipe

HISTORY_IN_MEMORY = 2000  # records kept in memory (thinned)
HISTORY_ON_DISK = 4000  # records of one start in history.jsonl before it is thinned


class StopReason(StrEnum):
    """Why a start stopped: a fixed set of plain words (``stop_detail`` says more)."""

    # its own figures met the targets (with the margin) in its own model; the file is
    # judged after that, on the most faithful model (shaper.jobs.playback.Playback.verdict)
    TARGETS_MET = "met in the optimiser's model"
    ITERATION_LIMIT = "iteration limit"
    TIME_LIMIT = "time limit"
    NO_PROGRESS = "no progress"          # no 0.1 % improvement in stall_iterations
    CONVERGED = "converged"              # the optimiser can find no better point
    NUMERICAL_FAILURE = "numerical failure"
    INTERRUPTED = "interrupted"


def scipy_detail(message) -> tuple[StopReason, str]:
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
    watchdog: object = None  # a shaper.optimizer.watchdog.Watchdog: beaten after every evaluation


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
        meta = {"recipe_sha256": self.s.recipe.sha256,
                "problem_sha256": self.s.recipe.problem_sha256, "method": self.o.method,
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
        if self.best is None:  # not one finite evaluation: say why, never a bare crash
            from shaper.errors import InputError
            raise InputError(f"{self.s.recipe.path or self.s.recipe.name}: the optimiser "
                             f"found no finite cost from its first guess ("
                             f"{self.detail or 'no evaluation completed'}); check "
                             f"pulse.duration and pulse.max_rabi (units: ns, us), or give "
                             f"optimizer.initial")
        value, x, parts, infid, leak = self.best
        return StartResult(seed=self.s.seed, params=x, cost=value, parts=parts,
                           infidelity=infid, leakage=leak, iterations=self.iteration,
                           evaluations=self.evaluations, stop_reason=str(self.reason),
                           stop_detail=self.detail,
                           wall_time_s=time.monotonic() - self.started, history=self.history,
                           index=self.s.index,
                           member_infidelities=(self.members or (None, None))[0],
                           member_leakages=(self.members or (None, None))[1])


