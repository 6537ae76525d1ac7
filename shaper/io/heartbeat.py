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
        self._line, self._said, self._open = "", "", ""
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._streams = None

    def wrote(self, text: str) -> None:
        """Called under :attr:`lock` by the watched streams."""
        self._last = time.monotonic()
        self._open = (self._open + text).rsplit("\n", 1)[-1].rsplit("\r", 1)[-1]
        lines = [part for part in text.replace("\r", "\n").split("\n") if part.strip()]
        if "\n" in text and lines:
            self._said = lines[-1].strip()

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
                quiet_s = time.monotonic() - self._last
                if quiet_s < self.every:
                    continue
                said = f" since \"{self._said[:100]}\"" if self._said else ""
                line = (f"  ... still at work: {quiet_s:.0f} s{said}"
                        + (f"; {status}" if status else "")
                        + f" [{time.monotonic() - self._started:.0f} s in all]")
                # a bar's line (ends in \r) is overwritten; a half-written line is ended
                lead = "\r" if self._open and not self._open.endswith("\n") else ""
                try:
                    self._streams[1].write(lead + line + "\n")
                    self._streams[1].flush()
                except (OSError, ValueError):  # a closed terminal must not end the command
                    return
                self._last, self._open = time.monotonic(), ""
