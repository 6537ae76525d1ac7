"""What a long run sets up around the optimiser, for every command that runs one.

The run's folder (prepared first, :mod:`shaper.jobs.folder`), the run log (``run.log``,
warnings of the ``shaper`` logger included), the stall watchdog with its rescue writer, the
plot helper process and the run options; torn down in order when the run ends, however it
ends (README, "Overnight runs").
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import NamedTuple

from shaper.io.runlog import RunLog
from shaper.jobs.folder import prepare_run_folder
from shaper.optimizer.options import RunOptions
from shaper.optimizer.watchdog import Watchdog
from shaper.recipe import Recipe


class Setup(NamedTuple):
    options: RunOptions
    painter: object | None  # shaper.jobs.painter.Painter, or None without plots
    log: RunLog


class _ToRunLog(logging.Handler):
    def __init__(self, log: RunLog):
        super().__init__()
        self.log = log

    def emit(self, record):
        self.log.line(f"warning: {record.getMessage()}")


@contextmanager
def run_setup(folder: Path, *, recipe: Recipe, force: bool, stop, stall_limit_s: float,
              plots: bool, echo, progress: Callable[[RunLog], object],
              **options) -> Iterator[Setup]:
    """Everything around one run of ``recipe`` in ``folder``, which it prepares first
    (:func:`prepare_run_folder`; the job does not prepare it again).

    ``stop``: the signal guard (:func:`shaper.optimizer.interrupt.stop_on_signals`), given
    the rescue writer; ``echo``: where the log is also printed (None: nowhere);
    ``progress(log)``: the progress display, closed at the end; ``options``: the rest of
    :class:`RunOptions` (seed, resume, workers, checkpoint cadence).
    """
    prepare_run_folder(folder, recipe, force=force, resume=options.get("resume", False))
    from shaper.jobs.painter import Painter
    from shaper.jobs.run import rescue_writer

    # the plot helper imports matplotlib on the other core while this process computes
    painter = Painter() if plots else None
    log = RunLog(folder / "run.log", echo=echo)
    shown = progress(log)
    handler = _ToRunLog(log)
    logging.getLogger("shaper").addHandler(handler)
    watchdog = Watchdog(limit_s=stall_limit_s, log=log.line)
    watchdog.rescue = rescue_writer(folder, watchdog)
    stop.rescue, stop.log = watchdog.rescue, log.line
    try:
        with watchdog:
            yield Setup(RunOptions(folder=folder, prepared=folder, progress=shown,
                                   on_start_done=log, stop=stop, watchdog=watchdog, **options),
                        painter, log)
    finally:
        if painter is not None:
            painter.close()
        if hasattr(shown, "close"):
            shown.close()
        logging.getLogger("shaper").removeHandler(handler)
