"""How to run an optimisation, as one frozen object (what to optimise is the recipe).

The command line builds one :class:`RunOptions`; the job, :func:`~shaper.optimizer.starts.
optimize`, one start and the worker processes all read the same object instead of a dozen
keyword arguments handed down four layers.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, fields, replace
from pathlib import Path

from shaper.errors import InputError


@dataclass(frozen=True, kw_only=True)
class RunOptions:
    """Settings and hooks of one run.

    Attributes:
        seed: overrides ``optimizer.seed``; start i uses seed + i.
        folder: where checkpoints (``checkpoint-<i>.npz``), ``history.jsonl`` and
            ``starts.json`` go; None: no checkpoints.
        resume: continue from the checkpoints in ``folder``; finished starts are kept.
        workers: > 1 runs the starts in that many worker processes.
        checkpoint_every: iterations between checkpoints.
        checkpoint_seconds: and at least this often (seconds).
        progress: called with a dict (iteration, cost, infidelity, leakage, cost_<term>)
            after every iteration (every 10 for the optax methods), serial starts only.
        on_start_done: called with each finished start.
        stop: turns truthy when the run should stop (a signal, :mod:`~shaper.optimizer.
            interrupt`); with workers it reaches them through a file in ``folder``.
        watchdog: a :class:`~shaper.optimizer.watchdog.Watchdog`, beaten after every
            evaluation of a serial start (worker processes run their own with its limit).
        starts: run this many starts instead of ``optimizer.starts`` (a sweep's retry;
            the recipe, its digest and its compiled objective stay the same).
        time_left_s: the wall clock left of a larger budget (a sweep's or a chip's
            ``--hours``): the run stops at the earlier of this and ``optimizer.max_time``.
        prepared: the folder the caller's set-up already prepared for this run
            (:func:`shaper.jobs.setup.run_setup`); the job prepares any other.
    """

    seed: int | None = None
    folder: Path | None = None
    resume: bool = False
    workers: int = 1
    checkpoint_every: int = 100
    checkpoint_seconds: float = 60.0
    progress: Callable[[dict], None] | None = None
    on_start_done: Callable | None = None
    stop: object = None
    watchdog: object = None
    starts: int | None = None
    time_left_s: float | None = None
    prepared: Path | None = None

    def __post_init__(self):
        if self.folder is not None and not isinstance(self.folder, Path):
            object.__setattr__(self, "folder", Path(self.folder))
        if not isinstance(self.workers, int) or self.workers < 1:
            raise InputError(f"workers must be a whole number >= 1, got {self.workers!r}")
        if not isinstance(self.checkpoint_every, int) or self.checkpoint_every < 1:
            raise InputError(f"checkpoint_every must be >= 1, got {self.checkpoint_every!r}")
        if not self.checkpoint_seconds > 0:
            raise InputError(f"checkpoint_seconds must be positive, got "
                             f"{self.checkpoint_seconds!r}")
        if self.starts is not None and (not isinstance(self.starts, int) or self.starts < 1):
            raise InputError(f"starts must be a whole number >= 1, got {self.starts!r}")
        if self.resume and self.folder is None:
            raise InputError("resume needs the folder that holds the checkpoints")

    def with_(self, **changes) -> RunOptions:
        """A copy with some fields changed (validated again)."""
        known = {f.name for f in fields(self)}
        unknown = sorted(set(changes) - known)
        if unknown:
            raise InputError(f"unknown run option(s) {', '.join(unknown)}; known: "
                             f"{', '.join(sorted(known))}")
        return replace(self, **changes)

    def for_worker(self) -> RunOptions:
        """What crosses to a worker process: the settings, not the caller's hooks."""
        return replace(self, progress=None, on_start_done=None, stop=None, watchdog=None)
