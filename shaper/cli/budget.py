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


MAX_ITERATIONS = 10 ** 9  # per start; --hours is the bound that matters past this
WORKERS_PER_CORE = 4  # a local worker is a JAX process of its own (a few hundred MB)


def read(args: argparse.Namespace) -> dict:
    """The budget as ``{"hours", "iterations", "starts", "deadline"}`` (``deadline``:
    ``time.time()`` at which ``--hours`` ends, or None); ``--seed`` and ``--workers`` are
    checked too where the command has them.

    Raises:
        InputError: naming the option and its bounds.
    """
    from shaper.errors import InputError
    from shaper.recipe.schema import MAX_SEED, MAX_STARTS

    bounds = {"iterations": (1, MAX_ITERATIONS), "starts": (1, MAX_STARTS),
              "seed": (0, MAX_SEED), "workers": (1, max_workers())}
    for name, (low, high) in bounds.items():
        value = getattr(args, name, None)
        if value is not None and not low <= value <= high:
            why = f" ({WORKERS_PER_CORE} per core here)" if name == "workers" else ""
            raise InputError(f"--{name} must be from {low} to {high:,}{why}, got {value}")
    hours = args.hours
    if hours is not None and not 0 < hours <= MAX_HOURS:  # NaN is neither
        raise InputError(f"--hours must be positive and at most {MAX_HOURS}, got {hours}")
    return {"hours": hours, "iterations": args.iterations, "starts": args.starts,
            "deadline": None if hours is None else time.time() + hours * 3600}


def max_workers() -> int:
    """The most local worker processes a command starts: :data:`WORKERS_PER_CORE` per
    core of this machine."""
    import os

    return WORKERS_PER_CORE * (os.cpu_count() or 1)
