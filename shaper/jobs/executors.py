"""Where a chip's tasks run: worker processes on this machine, or a Dask cluster
(README, "Chips"). Every wait here has a bound and a message, and a stop signal ends it.

An executor has ``submit``, ``completed`` (the futures as they finish), ``result``,
``lost(exc)`` (the machine failure an exception means, exit 3) and ``close``. Its
``completed`` never blocks for long: it polls, so that a stop flag (SIGINT/SIGTERM,
:func:`shaper.optimizer.interrupt.stop_on_signals`) raises
:class:`~shaper.optimizer.interrupt.Interrupted` within a poll, and a Dask cluster that
lost its last worker is waited for at most ``--wait-workers`` before the run ends as a
machine failure naming what was lost. ``close`` ends the local workers at once when
tasks are still running (a stop, a failure) instead of waiting for them to finish.
"""

from __future__ import annotations

import logging
import os
import time

from shaper.errors import EnvironmentFailure, InputError
from shaper.optimizer.interrupt import Interrupted

POLL_S = 0.5  # how often a wait looks at the stop flag and the cluster
DASK_LOGGERS = ("distributed", "tornado", "asyncio", "bokeh")
WAIT_WORKERS_S = 180.0
SCHEDULER_CALL_S = 20.0  # a call to a live scheduler answers in milliseconds
SCHEMES = ("tcp", "tls", "ws", "wss", "ucx")


def _stopped(stop) -> None:
    if stop:
        raise Interrupted(getattr(stop, "signal", None))


class LocalExecutor:
    """Worker processes on this machine (spawned, one thread each, ending with the
    command however it ends)."""

    def __init__(self, workers: int, *, stop=None):
        from concurrent.futures import ProcessPoolExecutor
        from multiprocessing import get_context

        from shaper.optimizer.parallel import pin_threads
        self.pool = ProcessPoolExecutor(max_workers=workers, mp_context=get_context("spawn"),
                                        initializer=pin_threads, initargs=(os.getpid(),))
        self.description = f"{workers} local worker process(es)"
        self.stop, self._futures = stop, []

    def submit(self, fn, *args):
        future = self.pool.submit(fn, *args)
        self._futures.append(future)
        return future

    def completed(self, futures):
        from concurrent.futures import FIRST_COMPLETED, wait
        pending = set(futures)
        while pending:
            _stopped(self.stop)
            done, pending = wait(pending, timeout=POLL_S, return_when=FIRST_COMPLETED)
            yield from done

    def result(self, future):
        from concurrent.futures.process import BrokenProcessPool
        try:
            return future.result()
        except BrokenProcessPool as exc:
            raise EnvironmentFailure(f"a worker process died ({exc}); the finished gates are "
                                     f"saved: run again with --resume") from None

    def close(self):
        """Wait for nothing that is still running: end the workers (SIGKILL; a task's
        files are written atomically and its sweep resumes) and the pool."""
        running = any(not f.done() for f in self._futures)
        processes = list((getattr(self.pool, "_processes", None) or {}).values())
        if running:
            for process in processes:
                try:
                    process.kill()
                except (OSError, AttributeError):
                    pass
        self.pool.shutdown(wait=not running, cancel_futures=True)
        for process in processes:
            process.join(timeout=5)


def check_address(address: str) -> str:
    """A Dask scheduler address as ``--scheduler`` takes it: ``[scheme://]host:port``
    with a scheme Dask's workers speak (``tcp`` when none is given).

    Raises:
        InputError: naming ``--scheduler`` (an http address is the dashboard's, not the
            scheduler's).
    """
    import re

    from shaper.recipe.files import excerpt

    match = re.fullmatch(r"(?:([A-Za-z][A-Za-z0-9+.-]*)://)?(\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9._-]+)"
                         r"(?::(\d{1,5}))?", address.strip())
    where = f"--scheduler {excerpt(address, 80)}"
    if not match:
        raise InputError(f"{where}: expected an address like tcp://10.0.0.5:8786")
    scheme, host, port = match.groups()
    if scheme and scheme.lower() in ("http", "https"):
        raise InputError(f"{where}: an http address is the Dask dashboard's; give the "
                         f"scheduler's, e.g. tcp://{host}:8786")
    if scheme and scheme.lower() not in SCHEMES:
        raise InputError(f"{where}: unknown scheme {scheme!r}; one of {', '.join(SCHEMES)}")
    if port is None or not 1 <= int(port) <= 65535:
        raise InputError(f"{where}: needs a port from 1 to 65535, e.g. {host}:8786")
    return f"{(scheme or 'tcp').lower()}://{host}:{int(port)}"


class DaskExecutor:
    """The same tasks on a Dask distributed cluster (``pip install ".[cluster]"``). The
    workers must see ``root`` (a shared filesystem, as on a batch system).

    A scheduler without workers (at the start, or after losing its last one) is waited
    for at most ``wait_workers_s``, saying so at once; then the run ends as a machine
    failure naming the workers lost (exit 3, ``--resume`` continues). A lost scheduler or
    cancelled tasks end it likewise. Dask's own log stays off stderr unless ``debug``.
    """

    def __init__(self, address: str, timeout_s: float = 10.0, *,
                 wait_workers_s: float = WAIT_WORKERS_S, echo=print, debug: bool = False,
                 stop=None):
        try:
            from distributed import Client
        except ImportError:
            raise EnvironmentFailure("--scheduler needs Dask: pip install \".[cluster]\" "
                                     "(dask.distributed)") from None
        self.debug, self.echo, self.stop = debug, echo, stop
        self.address, self.wait_workers_s, self._futures = address, wait_workers_s, []
        self._silence()
        try:
            self.client = Client(address, timeout=timeout_s)
        except (OSError, TimeoutError) as exc:
            raise EnvironmentFailure(f"cannot reach the Dask scheduler at {address!r} within "
                                     f"{timeout_s:g} s: {exc}") from None
        self.seen = set(self._workers())
        if not self.seen:
            echo(f"the Dask scheduler at {address} has no workers yet; waiting up to "
                 f"{wait_workers_s:g} s for one (--wait-workers)")
            self._wait_for_workers(time.monotonic(), "had no worker, and none joined")
        self.description = f"the Dask scheduler at {address} ({len(self.seen)} worker(s))"
        self._silence()  # loggers Dask made while connecting

    def _silence(self) -> None:
        """Dask's log (reconnection tracebacks and the like) off stderr unless debugging:
        every logger under its names, since Dask's config gives some their own level."""
        if self.debug:
            return
        names = [n for n in list(logging.root.manager.loggerDict)
                 if n.split(".")[0] in DASK_LOGGERS] + list(DASK_LOGGERS)
        for name in names:
            logging.getLogger(name).setLevel(logging.CRITICAL + 1)

    def _workers(self) -> dict:
        """The scheduler's workers now (address -> threads); a scheduler that does not
        answer within :data:`SCHEDULER_CALL_S` is lost."""
        try:
            return self.client.nthreads(callback_timeout=SCHEDULER_CALL_S)
        except Exception as exc:  # noqa: BLE001 - whatever the comm raised: the machine's
            raise self.lost(exc) or EnvironmentFailure(
                f"lost the Dask scheduler at {self.address}: {exc}") from None

    def _wait_for_workers(self, since: float, what: str, pending: int = 0):
        """Wait (polling, so a stop signal ends it) until a worker is there, at most
        ``wait_workers_s`` after ``since``."""
        while True:
            _stopped(self.stop)
            workers = self._workers()
            if workers:
                self.seen |= set(workers)
                return workers
            if time.monotonic() - since > self.wait_workers_s:
                left = f"; {pending} task(s) unfinished" if pending else ""
                raise EnvironmentFailure(
                    f"the Dask scheduler at {self.address} {what} within "
                    f"{self.wait_workers_s:g} s (--wait-workers){left}; the finished gates "
                    f"are saved: start workers and run again with --resume")
            time.sleep(POLL_S)

    def submit(self, fn, *args):
        future = self.client.submit(fn, *args, pure=False)
        self._futures.append(future)
        return future

    def completed(self, futures):
        """The futures as they finish; between them the cluster is watched: with no worker
        left, a new one is waited for at most ``wait_workers_s``."""
        from distributed import wait
        pending = set(futures)
        while pending:
            _stopped(self.stop)
            try:
                done, _ = wait(list(pending), timeout=POLL_S, return_when="FIRST_COMPLETED")
            except TimeoutError:
                done = set()
            pending -= set(done)
            yield from done
            if pending and not self._workers():
                gone = set(self.seen)
                self.echo(f"the Dask scheduler at {self.address} lost its last worker "
                          f"({', '.join(sorted(gone))}); waiting up to "
                          f"{self.wait_workers_s:g} s for another (--wait-workers)")
                self._wait_for_workers(time.monotonic(), f"lost its last worker "
                                       f"({', '.join(sorted(gone))}) and no other joined",
                                       len(pending))
                self.echo(f"a worker joined the Dask scheduler at {self.address}; going on")

    def result(self, future):
        return future.result()

    def lost(self, exc: BaseException) -> EnvironmentFailure | None:
        """The machine failure an exception of the loop means, or None (a task's own)."""
        from asyncio import CancelledError
        from concurrent.futures import CancelledError as FutureCancelled

        from distributed import KilledWorker
        from distributed.comm.core import CommClosedError
        if isinstance(exc, KilledWorker):
            return EnvironmentFailure(f"Dask workers died running a task ({exc}); the "
                                      f"finished gates are saved: run again with --resume")
        if isinstance(exc, CancelledError | FutureCancelled | CommClosedError | OSError
                      | TimeoutError):
            return EnvironmentFailure(f"lost the Dask scheduler at {self.address} or its tasks "
                                      f"({type(exc).__name__}); the finished gates are saved: "
                                      f"run again with --resume")
        return None

    def close(self):
        """Cancel what is still queued or running (the cluster's workers drop it) and
        disconnect."""
        try:
            running = [f for f in self._futures if not f.done()]
            if running:
                self.client.cancel(running, force=True)
            self.client.close(timeout=5)
        except Exception:  # noqa: BLE001 - a scheduler already gone cannot be closed politely
            pass
