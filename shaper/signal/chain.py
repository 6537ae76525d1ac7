"""The one signal chain: AWG samples -> what the propagator sees (README, "The line").

Every consumer asks this chain; nothing rebuilds it: the optimiser (the recipe's baseband
samples, modulated with the recipe's IF), ``shaper check``, the report and ``shaper
export`` (a waveform file's samples, which already carry their IF and any corrections).
In order:

0. the export's padding (zeros before or after the pulse, to the length granularity), for
   the optimiser's samples: the idle time of a detuned or coupled system is part of the
   gate, so the optimiser sees the file's whole length (a waveform file holds its own);
1. IF modulation of baseband samples (skipped for a waveform file: it carries its IF);
2. the I/Q mixer's imperfections (gain, phase, DC offsets; :mod:`shaper.signal.mixer`),
   for waveform files whose recipe describes the mixer;
3. the DAC's hold on ``steps`` propagator slices per sample;
4. the line of each DAC output (:mod:`shaper.signal.line`), if the recipe has one;
5. back to the drive frame: each held modulated slice turns with the IF phase
   (:mod:`shaper.signal.modulation` for the sign convention);
6. a drive whose carrier is not the frame's (``Channel.offset_hz``, e.g. a
   cross-resonance tone on the control's line at the target's frequency) turns in the
   frame by ``exp(-2 pi i offset t)`` at the middle of each slice: the instrument
   synthesises that carrier, the DAC holds its envelope.

The mixer's map mixes I and Q of one channel and the line is the same linear
time-invariant filter on both, with unit gain at DC, so the two commute: the order
of 2 and 4 does not change the result. Without IF, mixer and line the chain is the
identity on the AWG grid.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from shaper.physics.grid import carrier_substeps, padding, substeps
from shaper.recipe.lines import Stage
from shaper.signal.line import apply, cell_response
from shaper.signal.mixer import Mixer
from shaper.signal.modulation import modulate, sign_of, to_drive_frame


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
        line: ``(column, stages)`` per control column that has a line.
        mixer: the I/Q mixer's imperfections (None: ideal).
        steps: propagator slices per AWG sample (default: enough for the IF and the line).
        lead, tail: zero samples put before and after the input (the export's padding).
    """

    iq_columns: np.ndarray
    period_s: float
    if_hz: float = 0.0
    sideband: str = "lower"
    start: int = 0
    modulated: bool = False
    line: tuple[tuple[int, tuple[Stage, ...]], ...] = ()
    oversample: int = 1
    mixer: Mixer | None = None
    carriers: tuple[tuple[int, int, float], ...] = ()  # (I column, Q column, offset Hz)
    steps: int = field(default=0)
    lead: int = 0
    tail: int = 0

    def __post_init__(self):
        if not self.steps:
            steps = substeps(self.if_hz, self.period_s) if self.if_hz else 1
            steps = max([steps, self.oversample if self.line else 1]
                        + [carrier_substeps(f, self.period_s) for _, _, f in self.carriers])
            object.__setattr__(self, "steps", steps)

    @property
    def dt_s(self) -> float:
        """The propagator's slice length."""
        return self.period_s / self.steps

    @property
    def identity(self) -> bool:
        return not self.if_hz and not self.line and self.mixer is None and not self.carriers \
            and not self.lead and not self.tail

    def padded(self, samples):
        """The input with the export's zero padding around it (NumPy or JAX)."""
        if not self.lead and not self.tail:
            return samples
        xp = np if isinstance(samples, np.ndarray) else _jnp()
        k = samples.shape[1]
        return xp.concatenate([xp.zeros((self.lead, k)), samples, xp.zeros((self.tail, k))])

    def __call__(self, samples):
        """The propagator's samples ``((lead + n + tail) * steps, k)`` (NumPy or JAX in, the
        same out)."""
        if self.identity:
            return samples
        played = self.padded(samples)
        if self.if_hz and not self.modulated:
            played = modulate(samples, self.iq_columns, self.if_hz, self.period_s,
                              self.sideband, start=self.start)
        if self.mixer is not None:
            played = self.mixer.plays(played)
        xp = np if isinstance(played, np.ndarray) else _jnp()
        fine = xp.repeat(played, self.steps, axis=0)
        if self.line:
            lines = dict(self.line)
            columns = []
            for c in range(fine.shape[1]):
                if c in lines:
                    g, lead = cell_response(lines[c], self.period_s, self.steps, fine.shape[0])
                    columns.append(apply(fine[:, c], g, lead))
                else:
                    columns.append(fine[:, c])
            fine = xp.stack(columns, axis=1)
        if self.if_hz:
            fine = to_drive_frame(fine, self.iq_columns, self.if_hz, self.period_s,
                                  self.sideband, steps=self.steps, start=self.start)
        for i, q, offset in self.carriers:
            fine = to_drive_frame(fine, [(i, q)], offset, self.period_s, "lower",
                                  steps=self.steps, start=self.start)
        return fine

    def cells(self, samples: np.ndarray) -> np.ndarray:
        """What the DAC outputs put on the line, on the chain's slices ``(n * steps, k)``
        (NumPy): after IF modulation, mixer, hold and line, before any turn into the
        drive frame."""
        played = self.padded(np.asarray(samples, float))
        if self.if_hz and not self.modulated:
            played = modulate(played, self.iq_columns, self.if_hz, self.period_s,
                              self.sideband, start=self.start)
        if self.mixer is not None:
            played = self.mixer.plays(played)
        fine = np.repeat(played, self.steps, axis=0)
        for column, stages in self.line:
            g, lead = cell_response(stages, self.period_s, self.steps, fine.shape[0])
            fine[:, column] = apply(fine[:, column], g, lead)
        return fine

    @property
    def turning_hz(self) -> float:
        """How fast the drive-frame envelope turns inside a held cell: the IF plus the
        largest carrier offset (the lab frame's sub-steps resolve it)."""
        return abs(self.if_hz) + max((abs(f) for _, _, f in self.carriers), default=0.0)

    def envelope_at(self, cells: np.ndarray, times: np.ndarray) -> np.ndarray:
        """The drive-frame control values ``(m, k)`` at ``times`` (seconds from the pulse
        start, sorted), from the held outputs ``cells`` (:meth:`cells`): each cell turned by
        the IF and any carrier offset at the exact time, not at the cell's middle (the lab
        frame, :mod:`shaper.physics.labframe`, needs them between its nodes)."""
        index = np.floor((times / self.dt_s) + self.start * self.steps + 1e-9).astype(int)
        out = cells[np.clip(index, 0, cells.shape[0] - 1)]
        turn = -sign_of(self.sideband) * 2 * np.pi * self.if_hz * times
        offsets = {(i, q): f for i, q, f in self.carriers}
        for i, q in np.asarray(self.iq_columns, int).reshape(-1, 2):
            angle = turn - 2 * np.pi * offsets.get((int(i), int(q)), 0.0) * times
            z = (out[:, i] + 1j * out[:, q]) * np.exp(1j * angle)
            out[:, i], out[:, q] = z.real, z.imag
        return out

    def finer(self, factor: int) -> Chain:
        """The same chain on ``factor`` times more sub-steps (for extrapolation)."""
        return Chain(self.iq_columns, self.period_s, self.if_hz, self.sideband, self.start,
                     self.modulated, self.line, self.oversample, self.mixer, self.carriers,
                     self.steps * factor, self.lead, self.tail)


def _jnp():
    import jax.numpy as jnp
    return jnp


def line_columns(recipe) -> tuple[tuple[int, tuple[Stage, ...]], ...]:
    """``(column, stages)`` for every control column whose channel has a line."""
    stages = recipe.line.stages
    return tuple((c, stages[ch.name]) for ch in recipe.system.channels
                 if stages.get(ch.name) for c in ch.columns)


def carriers(system) -> tuple[tuple[int, int, float], ...]:
    """``(I column, Q column, offset Hz)`` of every drive whose carrier is off the frame."""
    return tuple((c.columns[0], c.columns[1], c.offset_hz) for c in system.channels
                 if c.kind == "iq" and c.offset_hz)


def for_recipe(recipe, *, line: bool = True) -> Chain:
    """The optimiser's chain: the recipe's baseband samples as they reach the chip.

    The line is left out when the recipe pre-distorts (``export.predistort``: the export
    inverts the line, so the chip sees the samples themselves) or when ``line`` is False.
    The export's padding to ``export.granularity`` is part of it (:func:`padding`).
    """
    lined = line and not recipe.export.predistort
    lead, tail = padding(recipe.samples, recipe.export.granularity, recipe.export.padding)
    return Chain(recipe.system.iq_columns(), recipe.dt, recipe.export.if_frequency_hz,
                 recipe.export.sideband, start=lead, line=line_columns(recipe) if lined else (),
                 oversample=recipe.line.oversample, carriers=carriers(recipe.system),
                 lead=lead, tail=tail)


def for_waveform(recipe, wave, *, line: bool = True, mixer: bool = True) -> Chain:
    """A waveform file's chain: its samples already carry their IF (and any corrections).

    ``line=False``/``mixer=False`` leave the recipe's line or mixer out (the figures
    "without the line" of the report).
    """
    model = Mixer.for_recipe(recipe, wave.full_scale_hz) if mixer else None
    return Chain(recipe.system.iq_columns(), 1.0 / wave.sample_rate_hz, wave.if_frequency_hz,
                 wave.sideband, wave.pulse_start, modulated=True,
                 line=line_columns(recipe) if line else (), oversample=recipe.line.oversample,
                 mixer=model, carriers=carriers(recipe.system))
