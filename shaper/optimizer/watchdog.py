"""A watchdog for long runs: a run that stops computing says so and exits, it never hangs.

The optimiser's loop calls :meth:`Watchdog.beat` after every completed evaluation (and
the later stages of a job at each step). A daemon thread compares the time since the
last beat with the limit ``max(limit_s, factor x median evaluation time)``:

- past ``quiet_s`` it writes a line "no evaluation completed for N s" to the log every
  ``quiet_s``, so a stall is visible while it happens;
- before the first completed evaluation (importing, compiling) the limit is at least
  :data:`STARTUP_S`, so a slow first compile is not taken for a stall;
- past the limit it calls the run's rescue (checkpoint and best pulse so far, written
  with NumPy only: the stuck computation may hold every JAX thread), logs a message
  naming the stall, and ends the process with exit code 3 (:data:`STALLED`), bypassing
  native threads that will never return. ``--resume`` continues from the checkpoint.

Nothing here touches JAX. The clock and the exit are injectable so the tests need no
sleeping product code.
"""

from __future__ import annotations

import os
import statistics
import threading
import time
from collections import deque
from collections.abc import Callable

from shaper.physics.alive import listening

STALLED = 3  # exit code of a run the watchdog stopped (an environment failure)
DEFAULT_LIMIT_S = 600.0
DEFAULT_FACTOR = 100.0
STARTUP_S = 600.0  # before the first evaluation (imports, compiling) the limit is at least this


class Watchdog:
    """Watch the heartbeat of a run; rescue and exit when it stops.

    Args:
        limit_s: the shortest silence (seconds) that counts as a stall.
        factor: a stall is also at least ``factor`` times the median evaluation time.
        rescue: called once, from the watchdog's thread, before the exit; it must not
            use JAX. Exceptions in it are logged and do not prevent the exit.
        log: called with one line of text (run.log and the terminal).
        quiet_s: silence after which the "no evaluation completed" lines start.
        exit: how to end the process (default ``os._exit``).
    """

    def __init__(self, *, limit_s: float = DEFAULT_LIMIT_S, factor: float = DEFAULT_FACTOR,
                 rescue: Callable[[str], None] | None = None,
                 log: Callable[[str], None] | None = None, quiet_s: float = 60.0,
                 exit: Callable[[int], None] = os._exit, poll_s: float | None = None):
        if not limit_s > 0:
            raise ValueError(f"the stall limit must be positive, got {limit_s} s")
        self.limit_s, self.factor, self.rescue, self.log = limit_s, factor, rescue, log
        self.quiet_s, self.exit = min(quiet_s, limit_s / 2), exit
        self.poll_s = poll_s if poll_s is not None else min(1.0, self.limit_s / 20)
        self.durations: deque[float] = deque(maxlen=200)
        self.last = time.monotonic()
        self.what = "starting"
        self.evaluated = False  # has any evaluation completed yet?
        self.fired = False
        self._told = 0.0
        self._done = threading.Event()
        self._thread: threading.Thread | None = None

    def beat(self, what: str = "evaluation") -> None:
        """A unit of work completed (an evaluation, or a stage of the job)."""
        now = time.monotonic()
        if what == "evaluation" and self.what == "evaluation":
            self.durations.append(now - self.last)
        self.evaluated = self.evaluated or what == "evaluation"
        self.last, self.what, self._told = now, what, 0.0

    def alive(self) -> None:
        """A long computation made progress (:mod:`shaper.physics.alive`): the silence
        restarts, the phase and the evaluation times stay as they were."""
        self.last, self._told = time.monotonic(), 0.0

    def silence_s(self) -> float:
        """Seconds since the last beat (shown in progress lines)."""
        return time.monotonic() - self.last

    def limit(self) -> float:
        """The silence that counts as a stall now (seconds)."""
        median = statistics.median(self.durations) if self.durations else 0.0
        floor = self.limit_s if self.evaluated else max(self.limit_s, STARTUP_S)
        return max(floor, self.factor * median)

    def check(self) -> bool:
        """One look at the clock; True when the watchdog fired (then it has exited)."""
        silence, limit = self.silence_s(), self.limit()
        if silence >= limit:
            self._fire(silence)
            return True
        if silence >= self.quiet_s and silence - self._told >= self.quiet_s:
            self._told = silence
            self._say(f"waiting: no evaluation completed for {silence:.0f} s (last: {self.what});"
                      f" the watchdog stops the run after {limit:.0f} s")
        return False

    def _say(self, text: str) -> None:
        if self.log is not None:
            try:
                self.log(text)
            except Exception:  # noqa: BLE001 - a full disk must not stop the watchdog
                pass

    def _fire(self, silence: float) -> None:
        self.fired = True
        message = (f"stalled: no evaluation completed for {silence:.0f} s (limit "
                   f"{self.limit():.0f} s; last completed: {self.what}). The computation is "
                   f"stuck, not slow")
        if self.rescue is not None:
            try:
                self.rescue(message)
            except Exception as exc:  # noqa: BLE001 - exit anyway, say what was lost
                message += f"; saving the best pulse failed: {exc}"
        self._say(message + "; exit code 3, continue with --resume")
        self.exit(STALLED)

    def _run(self) -> None:
        while not self._done.wait(self.poll_s):
            if self.check():
                return

    def __enter__(self) -> Watchdog:
        self.last = time.monotonic()
        self._listening = listening(self.alive)
        self._listening.__enter__()
        self._thread = threading.Thread(target=self._run, name="shaper-watchdog", daemon=True)
        self._thread.start()
        return self

    def __exit__(self, *exc) -> None:
        self._done.set()
        self._listening.__exit__(None, None, None)
