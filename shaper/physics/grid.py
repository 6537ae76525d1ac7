"""The propagator's time grid where a DAC plays IF-modulated samples.

A held modulated sample turns in the drive frame within its interval (see
:mod:`shaper.signal.modulation`); the propagator resolves that on sub-steps. Pure
arithmetic, no JAX: the recipe reader uses it to estimate a problem's memory.
"""

from __future__ import annotations

import math

MAX_PHASE_STEP = 0.005  # radians of IF phase per sub-step


def substeps(if_hz: float, dt: float) -> int:
    """Sub-steps per sample so that the IF phase moves at most MAX_PHASE_STEP per sub-step.

    Examples:
        >>> substeps(0.0, 1e-9), substeps(100e6, 1 / 2.4e9)
        (1, 53)
    """
    return max(1, math.ceil(2 * math.pi * abs(if_hz) * dt / MAX_PHASE_STEP))


CARRIER_PHASE_STEP = 0.05  # radians of a drive's carrier offset per propagator slice


def carrier_substeps(offset_hz: float, dt: float) -> int:
    """Slices per sample for a drive whose carrier is ``offset_hz`` from the frame: its
    envelope turns by at most CARRIER_PHASE_STEP per slice, taken at the slice's middle
    (error ~ step^2; the report's figures are extrapolated from s and 2s slices).

    Examples:
        >>> carrier_substeps(0.0, 1e-9), carrier_substeps(-100e6, 1 / 2.4e9)
        (1, 6)
    """
    return max(1, math.ceil(2 * math.pi * abs(offset_hz) * dt / CARRIER_PHASE_STEP))


def padding(samples: int, granularity: int, placement: str) -> tuple[int, int]:
    """Zero samples (before, after) that pad ``samples`` to a multiple of ``granularity``
    (``placement``: "after", "before" or "centre"), as the export pads."""
    extra = (-samples) % granularity
    before = {"after": 0, "before": extra, "centre": extra // 2}[placement]
    return before, extra - before

