"""An I/Q mixer's imperfections, and the correction written into the exported samples.

Convention (README, "Mixer corrections"). With the drive ``eps = I cos(w t) + Q sin(w t)``
of the README's "Conventions", a mixer whose Q path has gain ``g`` relative to I and a
phase error ``phi`` (its Q local oscillator is ``sin(w t + phi)``), fed the DAC outputs
``a`` and ``b`` with DC offsets ``o_I`` and ``o_Q`` (fractions of full scale, as the
instrument's offset settings count them), plays

    I = (a + o_I) + g sin(phi) (b + o_Q),    Q = g cos(phi) (b + o_Q).

The correction inverts it: to play ``(I, Q)`` the file holds
``b = Q / (g cos phi) - o_Q`` and ``a = I - Q tan(phi) - o_I``. (Trigonometric
identity for the product of the Q path with the shifted oscillator; common practice,
no source.)
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from shaper.recipe.schema import MixerSettings


@dataclass(frozen=True)
class Mixer:
    """The mixers of a system's I/Q channels, in Hz: ``(column_i, column_q, settings,
    full_scale_hz)`` per corrected channel."""

    channels: tuple[tuple[int, int, MixerSettings, float], ...]

    @classmethod
    def for_recipe(cls, recipe, full_scale_hz: dict[str, float]) -> Mixer | None:
        """The recipe's mixers (``export.mixer``) with the waveform's full scale; None if ideal."""
        settings = recipe.export.mixer
        rows = tuple((ch.columns[0], ch.columns[1], settings[ch.name], full_scale_hz[ch.name])
                     for ch in recipe.system.channels
                     if ch.kind == "iq" and ch.name in settings)
        return cls(rows) if rows else None

    def plays(self, samples):
        """What the mixers play for DAC samples ``(n, k)`` in Hz (NumPy or JAX)."""
        concrete = isinstance(samples, np.ndarray)
        out = samples.copy() if concrete else samples
        for i, q, m, full in self.channels:
            phi = math.radians(m.phase_deg)
            a = samples[:, i] + m.offset_i * full
            b = samples[:, q] + m.offset_q * full
            new_i, new_q = a + m.gain * math.sin(phi) * b, m.gain * math.cos(phi) * b
            if concrete:
                out[:, i], out[:, q] = new_i, new_q
            else:
                out = out.at[:, i].set(new_i).at[:, q].set(new_q)
        return out

    def corrected(self, samples: np.ndarray) -> np.ndarray:
        """The DAC samples (Hz) for which the mixers play ``samples``."""
        out = np.array(samples, float)
        for i, q, m, full in self.channels:
            phi = math.radians(m.phase_deg)
            out[:, q] = samples[:, q] / (m.gain * math.cos(phi)) - m.offset_q * full
            out[:, i] = samples[:, i] - samples[:, q] * math.tan(phi) - m.offset_i * full
        return out
