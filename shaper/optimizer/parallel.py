"""Many starts in worker processes, one JAX process per worker, threads pinned.

Each worker sets its BLAS and XLA thread counts to one before JAX is imported, so that
two workers on two cores do not fight over them. Workers get the recipe, the seed and
the start index; start i always uses seed + i, so the results do not depend on the
number of workers.
"""

from __future__ import annotations

import os
import time
from concurrent.futures import ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from dataclasses import replace
from multiprocessing import get_context

from shaper.errors import EnvironmentFailure

_PINNED = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1",
           "XLA_FLAGS": "--xla_cpu_multi_thread_eigen=false intra_op_parallelism_threads=1"}


def pin_threads(parent: int | None = None) -> None:
    """Worker initialiser: one thread per worker (before anything imports JAX); die with
    the parent (:func:`die_with_parent`); SIGINT and SIGTERM are the parent's to answer
    (it passes them on through the stop file, or ends its workers itself)."""
    os.environ.update(_PINNED)
    import signal
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_IGN)
    die_with_parent(parent)


PR_SET_PDEATHSIG = 1  # prctl(2): the signal this process gets when its parent thread ends


def die_with_parent(parent: int | None) -> None:
    """End this child process within a second of its parent ``parent`` (a pid), however the
    parent ends, kill -9 included: a process whose parent was killed would otherwise hold
    its memory (and its share of the resource tracker's pipe) forever, re-parented to init.

    On Linux the kernel sends SIGKILL when the parent dies (``prctl(PR_SET_PDEATHSIG)``,
    asked for here, in the process the parent's main thread spawned); everywhere a thread
    also watches ``os.getppid()`` and exits when it changes (re-parented to init or a
    subreaper).
    """
    if parent is None:
        return
    import signal
    import sys
    import threading
    if sys.platform.startswith("linux"):
        try:
            import ctypes
            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(PR_SET_PDEATHSIG, signal.SIGKILL, 0, 0, 0)
        except (OSError, AttributeError):
            pass  # the watching thread below still ends it
    if os.getppid() != parent:  # the parent ended before the signal was asked for
        os._exit(1)

    def watch_parent():
        while os.getppid() == parent:
            time.sleep(0.5)
        os._exit(1)
    threading.Thread(target=watch_parent, name="shaper-parent-watch", daemon=True).start()


def _worker(raw_recipe, path, index, seed, options, job):
    """One start in a worker process. ``options`` are the run's settings (no hooks);
    ``job`` what this process needs besides: the optimiser settings with the remaining
    time, the stop file, the watchdog's limit and the first guess."""
    from shaper.optimizer.objective import make_objective
    from shaper.optimizer.one_start import compile_now, run_one
    from shaper.optimizer.watchdog import Watchdog
    from shaper.recipe import load_recipe

    watchdog = None
    if job["stall_limit_s"] is not None:  # a stuck worker saves its checkpoint and exits 3
        def rescue(message):
            tracker = getattr(watchdog, "tracker", None)
            if tracker is not None and tracker.best is not None \
                    and tracker.s.checkpoint_path is not None:
                tracker.save(tracker.best[1])
        watchdog = Watchdog(limit_s=job["stall_limit_s"], rescue=rescue).__enter__()

    recipe = load_recipe(raw_recipe if path is None else path)
    # the same recipe (same digest: its checkpoints stay valid) with the wall clock that is
    # left of the run's budget; not a new recipe, so not through the loader
    recipe = replace(recipe, optimizer=job["optimizer"])
    objective = make_objective(recipe)
    compile_time = compile_now(objective)
    stop_file = job["stop_file"]

    class FileFlag:
        def __bool__(self):
            return stop_file is not None and os.path.exists(stop_file)
    options = options.with_(stop=FileFlag(), watchdog=watchdog)
    try:
        result = run_one(recipe, objective, index, seed, options,
                         deadline=time.monotonic() + recipe.optimizer.max_time_s,
                         first=job["first"])
    finally:
        if watchdog is not None:
            watchdog.__exit__()
    result.history = result.history[-200:]
    return result, compile_time


def run_parallel(recipe, seed, options, *, deadline, first=None, count=None):
    """Run every start of ``recipe`` on ``options.workers`` processes.

    Returns:
        (starts in index order, the longest compile time of a worker in seconds).
    """
    folder, stop, watchdog = options.folder, options.stop, options.watchdog
    stop_file = None if folder is None else str(folder / ".stop")
    if stop_file and os.path.exists(stop_file):
        os.remove(stop_file)
    # worker clocks are monotonic per process: hand over the remaining time instead
    remaining = max(deadline - time.monotonic(), 0.0)
    job = {"optimizer": replace(recipe.optimizer, max_time_s=remaining), "stop_file": stop_file,
           "stall_limit_s": watchdog.limit_s if watchdog is not None else None, "first": first}
    results, compile_time = [], 0.0
    context = get_context("spawn")
    with ProcessPoolExecutor(max_workers=options.workers, mp_context=context,
                             initializer=pin_threads, initargs=(os.getpid(),)) as pool:
        futures = [pool.submit(_worker, recipe.raw if recipe.path is None else None,
                               recipe.path, i, seed + i, options.for_worker(), job)
                   for i in range(count or recipe.optimizer.starts)]
        pending = set(futures)
        while pending:
            if stop and stop_file:  # pass a signal on to the workers
                open(stop_file, "w").close()
            done = [f for f in pending if f.done()]
            for f in done:
                pending.discard(f)
                try:
                    result, seconds = f.result()
                except BrokenProcessPool as exc:
                    raise EnvironmentFailure(
                        "a worker process ended without a result (stalled and stopped by its "
                        "watchdog, killed, or out of memory); finished starts and checkpoints "
                        "are kept: continue with --resume") from exc
                results.append(result)
                compile_time = max(compile_time, seconds)
                if options.on_start_done:
                    options.on_start_done(result)
            if pending:
                if watchdog is not None:  # the workers watch themselves
                    watchdog.beat("waiting for worker processes")
                time.sleep(0.05)
    if stop_file and os.path.exists(stop_file):
        os.remove(stop_file)
    return sorted(results, key=lambda r: r.index), compile_time
