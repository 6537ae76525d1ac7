"""Plots drawn by a helper process while the command goes on computing.

matplotlib costs a command about 2 s on a 2-core machine (0.6 s to import, 0.3-0.6 s per
figure), all of it single-threaded Python. A :class:`Painter` starts one helper process
before JAX is imported; the helper imports matplotlib on the other core while the
command loads JAX and optimises, then draws each figure it is handed while the command
computes the rest of its report. :meth:`Painter.finish` waits for every figure, so a
command never returns before its files exist.

The helper is spawned, not forked (a fork of a process running JAX's threads can
deadlock), ignores Ctrl-C (the command decides what an interrupt means) and shares
nothing but the plot functions' arguments. Where it cannot start, the figures are drawn
in the calling process, as a library caller without a painter gets them.
"""

from __future__ import annotations

import logging
import multiprocessing
import os
import signal
from collections.abc import Callable
from concurrent.futures import Future, ProcessPoolExecutor

log = logging.getLogger("shaper")
FIGURE_S = 120.0  # a figure takes under a second; a helper silent this long is stuck


def draw_here(plot: Callable, path, *args, **kwargs) -> None:
    """Draw ``plot(path, ...)`` in this process: what a caller without a painter gets."""
    plot(path, *args, **kwargs)


def _ready() -> None:
    """Nothing: submitted once so that the helper starts (and imports) right away."""


def _prepare(parent: int | None = None) -> None:
    """Die with the command ``parent`` however it ends (kill -9 included: its queue's
    pipe never closes for the helper, which holds both ends); ignore Ctrl-C; import
    matplotlib and draw one throw-away figure (fonts, text layout and the Agg canvas are
    set up on first use), all before any real work."""
    import io

    from shaper.optimizer.parallel import die_with_parent

    die_with_parent(parent)
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    from shaper.jobs.plots import _figure, _finish

    fig, (ax,) = _figure(2, 2)
    ax.semilogy([0, 1], [1e-3, 1], label="warm-up")
    ax.set_xlabel("x")
    ax.legend()
    _finish(fig, io.BytesIO(), "warm-up")


class Painter:
    """One helper process that draws figures; ``draw`` queues, ``finish`` waits."""

    def __init__(self) -> None:
        self._pending: list[tuple[str, Future]] = []
        self._stuck = False
        try:
            self._pool: ProcessPoolExecutor | None = ProcessPoolExecutor(
                max_workers=1, mp_context=multiprocessing.get_context("spawn"),
                initializer=_prepare, initargs=(os.getpid(),))
        except (OSError, RuntimeError) as exc:  # no processes here: draw in this one
            log.warning("plots drawn in this process (no helper: %s)", exc)
            self._pool = None
        else:
            self._pool.submit(_ready)  # a pool starts its process on the first task

    def draw(self, plot: Callable, path, *args, **kwargs) -> None:
        """``plot(path, *args, **kwargs)`` in the helper (here if there is none)."""
        if self._pool is not None:
            try:
                self._pending.append((str(path), self._pool.submit(plot, path, *args,
                                                                   **kwargs)))
                return
            except RuntimeError as exc:  # the helper died: draw the rest here
                log.warning("plot helper stopped (%s); drawing in this process", exc)
                self._pool = None
        draw_here(plot, path, *args, **kwargs)

    def finish(self) -> dict[str, str]:
        """Wait for every queued figure, each at most :data:`FIGURE_S` (a helper that stopped
        answering does not hold the command); return ``{path: error}`` for those that
        failed."""
        from concurrent.futures import TimeoutError as FutureTimeout
        failed = {}
        for path, future in self._pending:
            try:
                future.result(timeout=FIGURE_S)
            except FutureTimeout:
                failed[path] = f"the plot helper did not draw it within {FIGURE_S:g} s"
                self._stuck = True
            except Exception as exc:  # noqa: BLE001 - a figure must not cost the result
                failed[path] = f"{type(exc).__name__}: {exc}"
        self._pending = []
        return failed

    def close(self) -> None:
        """End the helper: at once if it stopped answering (or figures are still queued),
        else once its queue is empty."""
        if self._pool is not None:
            stuck = self._stuck or any(not f.done() for _, f in self._pending)
            if stuck:
                for process in list((getattr(self._pool, "_processes", None) or {}).values()):
                    process.kill()
            self._pool.shutdown(wait=not stuck, cancel_futures=True)
            self._pool = None

    def __enter__(self) -> Painter:
        return self

    def __exit__(self, *exc) -> None:
        self.close()
