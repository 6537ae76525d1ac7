"""The one signal chain: AWG samples -> what the propagator sees.

Every consumer asks this chain; nothing rebuilds it: the optimiser (the recipe's baseband
samples, modulated with the recipe's IF and held by the DAC), ``shaper check``, the
report and ``shaper export`` (a waveform file's samples, which already carry their IF).
Without an IF the chain is the identity on the AWG grid. With one, the DAC holds the
*modulated* value over each sample, which the propagator resolves on
:func:`~shaper.physics.grid.substeps` sub-steps per sample (see
:mod:`shaper.signal.modulation` for the sign convention).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from shaper.physics.grid import substeps
from shaper.signal.modulation import held_drive, modulate


@dataclass(frozen=True)
class Chain:
    """From AWG samples ``(n, k)`` Hz to the propagator's samples on its own grid.

    Attributes:
        iq_columns: ``(p, 2)`` control columns (I, Q) of each I/Q channel.
        period_s: the AWG's sample period.
        if_hz: the IF the played samples carry (0: none).
        sideband: ``"lower"`` or ``"upper"``.
        start: index of the pulse's first sample (time zero of the IF).
        modulated: the input already carries the IF (a waveform file); otherwise the
            chain modulates baseband samples first (the optimiser's).
        steps: propagator slices per AWG sample (default: enough for the IF).
    """

    iq_columns: np.ndarray
    period_s: float
    if_hz: float = 0.0
    sideband: str = "lower"
    start: int = 0
    modulated: bool = False
    steps: int = field(default=0)

    def __post_init__(self):
        if not self.steps:
            object.__setattr__(self, "steps", substeps(self.if_hz, self.period_s)
                               if self.if_hz else 1)

    @property
    def dt_s(self) -> float:
        """The propagator's slice length."""
        return self.period_s / self.steps

    @property
    def identity(self) -> bool:
        return not self.if_hz

    def __call__(self, samples):
        """The propagator's samples ``(n * steps, k)`` (NumPy or JAX in, the same out)."""
        if self.identity:
            return samples
        played = samples if self.modulated else modulate(
            samples, self.iq_columns, self.if_hz, self.period_s, self.sideband, start=self.start)
        return held_drive(played, self.iq_columns, self.if_hz, self.period_s, self.sideband,
                          steps=self.steps, start=self.start)

    def finer(self, factor: int) -> Chain:
        """The same chain on ``factor`` times more sub-steps (for extrapolation)."""
        return Chain(self.iq_columns, self.period_s, self.if_hz, self.sideband, self.start,
                     self.modulated, self.steps * factor)


def for_recipe(recipe) -> Chain:
    """The optimiser's chain: the recipe's baseband samples as its export will play them."""
    return Chain(recipe.system.iq_columns(), recipe.dt, recipe.export.if_frequency_hz,
                 recipe.export.sideband)


def for_waveform(recipe, wave) -> Chain:
    """A waveform file's chain: its samples already carry their IF."""
    return Chain(recipe.system.iq_columns(), 1.0 / wave.sample_rate_hz, wave.if_frequency_hz,
                 wave.sideband, wave.pulse_start, modulated=True)
