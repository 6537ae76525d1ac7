"""SIGINT and SIGTERM during a run: finish the step, save, stop; a second signal stops at once.

The first signal sets a flag that the optimiser loop reads between steps; the loop
acknowledges it, writes its checkpoint, the best pulse so far and a report with stop
reason "interrupted", and the command exits 130 (SIGINT) or 143 (SIGTERM).

A stuck computation never returns to Python, so Python-level handlers alone cannot be
trusted: the signals also reach a helper thread (through ``signal.set_wakeup_fd``, which
the C-level handler writes even while the main thread is blocked in native code). If
the loop has not acknowledged the first signal within ``grace_s`` seconds, the helper
runs the rescue (checkpoint and best pulse from the last completed evaluation) and
ends the process; a second signal ends it at once. Both exits use ``os._exit`` after
the atomic writes already done, so native threads that will never finish cannot keep
the process alive.
"""

from __future__ import annotations

import os
import signal
import threading
from collections.abc import Callable
from contextlib import contextmanager

EXIT_CODES = {signal.SIGINT: 130, signal.SIGTERM: 143}
GRACE_S = 10.0


class Interrupted(Exception):
    """A command's wait ended by a stop signal (SIGINT/SIGTERM): what finished is saved,
    the command exits with :attr:`exit_code` (130/143)."""

    def __init__(self, signum: int | None):
        self.signum = signum
        name = signal.Signals(signum).name if signum in EXIT_CODES else "a signal"
        super().__init__(f"interrupted by {name}")

    @property
    def exit_code(self) -> int:
        return EXIT_CODES.get(self.signum, 130)


class StopFlag:
    """Truthy once a signal asked the run to stop. ``signal`` is its number."""

    def __init__(self):
        self.signal: int | None = None
        self.acknowledged = threading.Event()
        # set once the command knows them: what to save and where to say so on a forced exit
        self.rescue: Callable[[str], None] | None = None
        self.log: Callable[[str], None] | None = None

    def __bool__(self) -> bool:
        return self.signal is not None

    def acknowledge(self) -> None:
        """The loop has seen the flag and is saving: no forced exit after the grace."""
        self.acknowledged.set()

    @property
    def exit_code(self) -> int:
        return EXIT_CODES.get(self.signal, 130)


@contextmanager
def stop_on_signals(*, grace_s: float | None = None, exit=os._exit):
    """Install the handlers (main thread only); yield the :class:`StopFlag`.

    Enter it before anything slow (importing JAX, reading the recipe): a signal that came
    before the handlers would raise inside whatever ran, and a library may swallow it.
    Set ``flag.rescue`` (called from a helper thread, without JAX, before a forced exit)
    and ``flag.log`` (a line of text about it) once they are known.

    Args:
        grace_s: how long the loop may take to acknowledge the first signal (default
            :data:`GRACE_S`).
        exit: how to end the process (default ``os._exit``).
    """
    grace_s = GRACE_S if grace_s is None else grace_s
    flag = StopFlag()
    if threading.current_thread() is not threading.main_thread():
        yield flag
        return
    read_fd, write_fd = os.pipe()
    os.set_blocking(write_fd, False)
    watcher = _Watcher(flag, read_fd, grace_s, exit)

    def handler(signum, frame):  # runs in the main thread when Python gets control
        if flag.signal is None:
            flag.signal = signum

    old_fd = signal.set_wakeup_fd(write_fd, warn_on_full_buffer=False)
    old = {s: signal.signal(s, handler) for s in EXIT_CODES}
    helper = threading.Thread(target=watcher.watch, name="shaper-signals", daemon=True)
    helper.start()
    try:
        yield flag
    finally:
        watcher.done.set()
        for s, h in old.items():
            signal.signal(s, h)
        signal.set_wakeup_fd(old_fd)
        os.close(write_fd)  # wakes the helper's read with EOF
        helper.join(timeout=1.0)
        os.close(read_fd)


class _Watcher:
    """The helper thread's side: reads signal numbers from the wakeup pipe, starts the
    grace timer on the first and ends the process on the second (or when the grace ends)."""

    def __init__(self, flag: StopFlag, read_fd: int, grace_s: float, exit):
        self.flag, self.read_fd, self.grace_s, self.exit = flag, read_fd, grace_s, exit
        self.done = threading.Event()

    def forced(self, signum: int, why: str) -> None:
        text = f"{signal.Signals(signum).name}: {why}"
        if self.flag.rescue is not None:
            try:
                self.flag.rescue(text)
            except Exception as exc:  # noqa: BLE001 - exit anyway
                text += f"; saving the best pulse failed: {exc}"
        if self.flag.log is not None:
            try:
                self.flag.log(text)
            except Exception:  # noqa: BLE001
                pass
        self.exit(EXIT_CODES.get(signum, 130))

    def watch(self) -> None:
        seen = 0
        while not self.done.is_set():
            try:
                data = os.read(self.read_fd, 16)
            except OSError:
                return
            for signum in data:
                if self.done.is_set() or signum not in EXIT_CODES:
                    continue
                seen += 1
                if self.flag.signal is None:
                    self.flag.signal = signum
                if seen >= 2:
                    self.forced(signum, "second signal, stopping at once")
                    return
                threading.Thread(target=self.grace, args=(signum,), daemon=True).start()

    def grace(self, signum: int) -> None:
        if not self.flag.acknowledged.wait(self.grace_s) and not self.done.is_set():
            saved = ("; wrote the best pulse of the last completed evaluation"
                     if self.flag.rescue is not None else "")
            self.forced(signum, f"the computation did not return within {self.grace_s:.0f} s "
                                f"of the signal{saved}")
