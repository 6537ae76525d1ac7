"""``run.log`` in a run folder: one timestamped line per event, flushed at once.

Written by the job itself (:func:`shaper.jobs.run.run`), so a run from Python logs as
one from the command line does; the command line only adds an echo to the terminal.
Lines are appended without following a symbolic link planted at the path.
"""

from __future__ import annotations

import time
from pathlib import Path

from shaper.io.atomic import append_line


class RunLog:
    """``run.log`` in the run folder: one timestamped line per event, flushed at once."""

    def __init__(self, path: Path, echo=None):
        self.path, self.echo = path, echo

    def line(self, text: str, echo: bool = True) -> None:
        append_line(self.path, f"{time.strftime('%Y-%m-%d %H:%M:%S')} {text}")
        if echo and self.echo is not None:
            print(text, file=self.echo, flush=True)

    def __call__(self, start) -> None:  # a start has finished
        self.line(f"start {start.index} (seed {start.seed}): infidelity {start.infidelity:.3e}, "
                  f"leakage {start.leakage:.3e}, {start.iterations} iterations, "
                  f"{start.stop_reason}")
