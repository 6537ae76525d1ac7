"""The budget options every long command takes: ``--hours``, ``--iterations``, ``--starts``
(README, "Overnight runs"), read and checked in one place."""

from __future__ import annotations

import argparse
import time

MAX_HOURS = 24 * 31  # a month: anything longer is a typo


def add_arguments(parser: argparse.ArgumentParser, *, what: str) -> None:
    """``what``: what ``--hours`` bounds, for the help text."""
    parser.add_argument("--hours", type=float, help=f"wall-clock budget of {what} in hours")
    parser.add_argument("--iterations", type=int, help="iteration budget per start")
    parser.add_argument("--starts", type=int,
                        help="independently seeded starts per optimisation (default: the "
                             "recipe's optimizer.starts)")


def read(args: argparse.Namespace) -> dict:
    """The budget as ``{"hours", "iterations", "starts", "deadline"}`` (``deadline``:
    ``time.time()`` at which ``--hours`` ends, or None).

    Raises:
        InputError: naming the option.
    """
    from shaper.errors import InputError

    for name in ("iterations", "starts"):
        value = getattr(args, name)
        if value is not None and value < 1:
            raise InputError(f"--{name} must be at least 1, got {value}")
    hours = args.hours
    if hours is not None and not 0 < hours <= MAX_HOURS:
        raise InputError(f"--hours must be positive and at most {MAX_HOURS}, got {hours}")
    return {"hours": hours, "iterations": args.iterations, "starts": args.starts,
            "deadline": None if hours is None else time.time() + hours * 3600}
