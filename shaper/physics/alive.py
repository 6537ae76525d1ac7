"""A sign of life from inside long computations.

A lab-frame verdict of a long two-qubit gate runs for minutes inside one call
(:func:`shaper.physics.lab_simulation.lab_unitary`: thousands of compiled chunks); the
run's stall watchdog must not take that for a hung process. Such loops call :func:`alive`
after every unit of work; a watchdog listens with :func:`listening`. No listener: a no-op.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager

_listeners: list[Callable[[], None]] = []


def alive() -> None:
    """One unit of a long computation completed."""
    for listener in tuple(_listeners):
        listener()


@contextmanager
def listening(callback: Callable[[], None]) -> Iterator[None]:
    """Call ``callback`` on every :func:`alive` while the block runs."""
    _listeners.append(callback)
    try:
        yield
    finally:
        _listeners.remove(callback)
