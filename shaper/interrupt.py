"""SIGINT and SIGTERM during a run: finish the step, save, stop; a second signal stops at once.

The first signal only sets a flag that the optimiser loop reads between steps, so the
run writes its checkpoint, the best pulse so far and a report with stop reason
"interrupted". A second signal raises KeyboardInterrupt straight away; every file is
written atomically, so none is left half-written.
"""

from __future__ import annotations

import signal
import threading
from contextlib import contextmanager

EXIT_CODES = {signal.SIGINT: 130, signal.SIGTERM: 143}


class StopFlag:
    def __init__(self):
        self.signal: int | None = None

    def __bool__(self) -> bool:
        return self.signal is not None


@contextmanager
def stop_on_signals():
    """Install the handlers (main thread only); yield the :class:`StopFlag`."""
    flag = StopFlag()
    if threading.current_thread() is not threading.main_thread():
        yield flag
        return

    def handler(signum, frame):
        if flag:
            raise KeyboardInterrupt
        flag.signal = signum

    old = {s: signal.signal(s, handler) for s in EXIT_CODES}
    try:
        yield flag
    finally:
        for s, h in old.items():
            signal.signal(s, h)
