"""No long silences: a line at least every few seconds on every long phase of a command.

A command runs inside a :class:`Heartbeat`. It watches what the command writes to its
terminal (``sys.stdout`` and ``sys.stderr`` are wrapped while it runs) and, whenever
nothing was written for ``every`` seconds (``$SHAPER_HEARTBEAT_S``, default 10), writes
one line to stderr: how long the command has been quiet, what it said last (the phase it
is in: every long phase begins with a line) and, where the command knows more, its
``status()`` (a chip's running tasks, a run's finished starts). Terminal lines only: a
run's log keeps its own events.
"""

from __future__ import annotations

import os
import sys
import threading
import time
from collections.abc import Callable

DEFAULT_EVERY_S = 10.0


def every_s() -> float:
    """The longest silence, from ``$SHAPER_HEARTBEAT_S`` (seconds, at least 0.2)."""
    try:
        value = float(os.environ.get("SHAPER_HEARTBEAT_S", DEFAULT_EVERY_S))
    except ValueError:
        return DEFAULT_EVERY_S
    return max(0.2, value) if value == value else DEFAULT_EVERY_S


class _Watched:
    """A text stream that tells its heartbeat when and what was written."""

    def __init__(self, stream, beat: Heartbeat):
        self._stream, self._beat = stream, beat

    def write(self, text: str) -> int:
        with self._beat.lock:
            written = self._stream.write(text)
            self._beat.wrote(text)
        return written

    def close(self) -> None:
        """Not the terminal's to close: a logging handler made while this wrapped the
        stream (absl's, under JAX) closes "its" stream at exit."""

    def __getattr__(self, name):  # flush, isatty, fileno, encoding, ...
        return getattr(self._stream, name)


class Heartbeat:
    """Say something at least every ``every`` seconds while the ``with`` block runs.

    Args:
        every: the longest silence in seconds (default :func:`every_s`).
        status: what the command is at, in a few words (called from the heartbeat's
            thread: it must only read), or None.
        quiet: do nothing (``--quiet``).
    """

    def __init__(self, *, every: float | None = None, status: Callable[[], str] | None = None,
                 quiet: bool = False):
        self.every, self.status, self.quiet = every or every_s(), status, quiet
        self.lock = threading.RLock()
        self._last = self._started = time.monotonic()
        self._said, self._open, self._said_at = "", "", self._started
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._streams = None

    def wrote(self, text: str) -> None:
        """Called under :attr:`lock` by the watched streams: the time, the line that
        ``text`` completes (a progress bar's ``\r`` ends one too) and what is left open."""
        self._last = time.monotonic()
        parts = (self._open + text).replace("\r", "\n").split("\n")
        done = [part.strip() for part in parts[:-1] if part.strip()]
        if done:
            self._said, self._said_at = done[-1], self._last
        self._open = parts[-1]

    def __enter__(self) -> Heartbeat:
        if self.quiet:
            return self
        self._streams = sys.stdout, sys.stderr
        sys.stdout, sys.stderr = _Watched(sys.stdout, self), _Watched(sys.stderr, self)
        self._thread = threading.Thread(target=self._run, name="shaper-heartbeat",
                                        daemon=True)
        self._thread.start()
        return self

    def __exit__(self, *exc) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout=2)
        if self._streams is not None:
            sys.stdout, sys.stderr = self._streams

    def _run(self) -> None:
        while not self._stop.wait(min(0.5, self.every / 4)):
            if time.monotonic() - self._last < self.every:
                continue
            try:
                status = self.status() if self.status is not None else ""
            except Exception:  # noqa: BLE001 - a status read mid-change: say the rest
                status = ""
            with self.lock:
                now = time.monotonic()
                if now - self._last < self.every:
                    continue
                said = (f", {now - self._said_at:.0f} s after \"{self._said[:100]}\""
                        if self._said else f", {now - self._started:.0f} s after the start")
                line = (f"  ... still at work{said}" + (f"; {status}" if status else "")
                        + f" [{now - self._started:.0f} s in all]")
                lead = "\r" if self._open else ""  # over a bar's line (it ends in \r)
                try:
                    self._streams[1].write(lead + line + "\n")
                    self._streams[1].flush()
                except (OSError, ValueError):  # a closed terminal must not end the command
                    return
                self._last, self._open = time.monotonic(), ""
