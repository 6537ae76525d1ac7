"""The one signal chain: AWG samples -> what the propagator sees (README, "The line").

Every consumer asks this chain; nothing rebuilds it: the optimiser (the recipe's baseband
samples, modulated with the recipe's IF), ``shaper check``, the report and ``shaper
export`` (a waveform file's samples, which already carry their IF and any corrections).
In order:

0. the export's padding (zeros before or after the pulse, to the length granularity), for
   the optimiser's samples: the idle time of a detuned or coupled system is part of the
   gate, so the optimiser sees the file's whole length (a waveform file holds its own);
   then the ring-down: zeros after the last sample while the filters still play
   (:func:`ring_down`), simulated but never exported;
1. IF modulation of baseband samples (skipped for a waveform file: it carries its IF);
2. the I/Q mixer's imperfections (gain, phase, DC offsets; :mod:`shaper.signal.mixer`),
   for waveform files whose recipe describes the mixer;
3. the DAC's hold, and the instrument's output filter (``[awg]``, on every channel: no
   instrument emits a staircase);
4. the line of each DAC output (:mod:`shaper.signal.line`), if the recipe has one;
5. back to the drive frame: each modulated output turns with the IF phase
   (:mod:`shaper.signal.modulation` for the sign convention);
6. a drive whose carrier is not the frame's (``Channel.offset_hz``, e.g. a
   cross-resonance tone on the control's line at the target's frequency) turns in the
   frame by ``exp(-2 pi i offset t)``: the instrument synthesises that carrier, the DAC
   holds its envelope.

The rotating frame (``__call__``) sees 3-6 as the exact mean of the filtered output over
each of its ``steps`` slices per sample, held; the lab frame (:meth:`Chain.lab_envelope`)
sees the continuous output at the very times its integrator needs
(:mod:`shaper.signal.analog`). The mixer's map mixes I and Q of one channel and the filters
are the same linear time-invariant map on both, with unit gain at DC, so the two commute:
the order of 2 and 3-4 does not change the result. Without IF, mixer, output filter and
line the chain is the identity on the AWG grid.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from shaper.physics.grid import carrier_substeps, padding, substeps
from shaper.recipe.lines import Stage
from shaper.signal.analog import FINE, Output, output_kernel, ring_samples
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
        ring: zero samples after those, while the line rings down (README, "The AWG's
            analog output"): simulated, never exported; the gate's footprint ends there.
        ring_residual_rad: the largest angle the output could still turn a qubit by
            after the ring-down (:func:`shaper.signal.analog.ring_samples`).
        rests_corrected: after the input the DAC holds the mixer's correction of zero
            (a mixer-corrected file: README, "Mixer corrections"), so the mixer plays 0 in
            the ring-down; otherwise it holds 0 and the mixer plays its offsets.
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
    ring: int = 0
    ring_residual_rad: float = 0.0
    rests_corrected: bool = False

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
            and not self.lead and not self.tail and not self.ring and self.steps == 1

    def played_samples(self, n: int) -> int:
        """AWG sample periods simulated for an input of ``n`` samples: the padding and the
        ring-down included (the gate's footprint)."""
        return self.lead + n + self.tail + self.ring

    def padded(self, samples):
        """The input with the export's zero padding around it and the ring-down's zeros
        after it (NumPy or JAX)."""
        if not self.lead and not self.tail and not self.ring:
            return samples
        xp = np if isinstance(samples, np.ndarray) else _jnp()
        k = samples.shape[1]
        return xp.concatenate([xp.zeros((self.lead, k)), samples,
                               xp.zeros((self.tail + self.ring, k))])

    def held(self, samples):
        """What the DAC outputs hold over each sample period, ``(played_samples(n), k)``:
        the padded input, IF-modulated (unless it carries its IF), through the mixer."""
        played = self.padded(samples)
        if self.if_hz and not self.modulated:
            played = modulate(played, self.iq_columns, self.if_hz, self.period_s,
                              self.sideband, start=self.start)
        if self.mixer is not None:
            played = self.mixer.plays(played)
            if self.rests_corrected and self.ring:  # the LO leakage cancelled between files
                xp = np if isinstance(played, np.ndarray) else _jnp()
                played = xp.concatenate([played[:-self.ring],
                                         xp.zeros((self.ring, played.shape[1]))])
        return played

    def __call__(self, samples):
        """The propagator's samples ``(played_samples(n) * steps, k)`` (NumPy or JAX in, the
        same out)."""
        if self.identity:
            return samples
        played = self.held(samples)
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

    @property
    def changes(self) -> bool:
        """Whether the output changes inside a propagator slice (a line's response, or an
        envelope turned by the IF or a carrier offset); a staircase on whole samples does
        not."""
        return bool(self.line) or bool(self.if_hz) or bool(self.carriers)

    def cells(self, samples):
        """The propagator's slices as ``(means, slopes)``: each column's mean over every
        slice (what :meth:`__call__` holds) and its rate of change across the slice, Hz/s,
        from the means of the slice's two halves (exact for a line's output,
        :func:`shaper.signal.line.cell_response`); ``slopes`` is None where nothing changes
        inside a slice. With the slopes the propagator is fourth order in the slice length
        (:func:`shaper.physics.propagator.slope_term`; README, "Slices")."""
        if self.identity or not self.changes:
            return self(samples), None
        halves = self.finer(2)(samples)
        return (halves[0::2] + halves[1::2]) / 2, (halves[1::2] - halves[0::2]) * (2 / self.dt_s)

    @property
    def turning_hz(self) -> float:
        """How fast the drive-frame envelope turns inside a held sample: the IF plus the
        largest carrier offset (the lab frame's sub-steps resolve it)."""
        return abs(self.if_hz) + max((abs(f) for _, _, f in self.carriers), default=0.0)

    def outputs(self, offsets: tuple[float, ...], n: int,
                fine: int = FINE) -> dict[int, Output]:
        """Each filtered column's continuous output kernel at ``offsets`` (fractions of a
        sample) for an input of ``n`` samples (:func:`shaper.signal.analog.output_kernel`;
        ``fine``: the grid of a Gaussian or measured stage)."""
        count = self.played_samples(n)
        return {c: output_kernel(stages, self.period_s, offsets, count, fine)
                for c, stages in self.line}

    def resolution(self, n: int) -> float:
        """The largest change of any column's step response when the grid of its Gaussian or
        measured stages is halved (0: every output in closed form)."""
        return max((o.resolution for o in self.outputs((0.5,), n).values()), default=0.0)

    def before(self, offsets: tuple[float, ...], n: int) -> int:
        """Samples before the first one where a non-causal output already plays."""
        return max((o.before for o in self.outputs(offsets, n).values()), default=0)

    def lab_envelope(self, samples, offsets: tuple[float, ...], fine: int = FINE):
        """The drive-frame control values at ``k + offsets[j]`` sample periods from the
        first simulated sample, ``k = -before .. played_samples(n) - 1``, in time order
        ``((before + played) * len(offsets), k)`` (NumPy or JAX in, the same out).

        The continuous output of the instrument and the line, exactly where the lab frame
        needs it (never a staircase re-held on a finer grid, whose steps alias the
        counter-rotating term; README, "The AWG's analog output"), then turned into the
        drive frame by the IF and any carrier offset at the exact time.
        """
        n = samples.shape[0]
        held = self.held(samples)
        xp = np if isinstance(held, np.ndarray) else _jnp()
        outputs = self.outputs(offsets, n, fine)
        before = max((o.before for o in outputs.values()), default=0)
        total, width = held.shape[0], len(offsets)
        columns = []
        for c in range(held.shape[1]):
            if c in outputs:
                out = outputs[c].play(held[:, c], total)
                out = xp.concatenate([xp.zeros((width, before - outputs[c].before)), out],
                                     axis=1)
            else:  # no stage on this column: the staircase itself
                out = xp.broadcast_to(xp.concatenate([xp.zeros(before), held[:, c]])[None, :],
                                      (width, before + total))
            columns.append(out)
        values = xp.stack(columns, axis=-1).transpose(1, 0, 2).reshape(-1, held.shape[1])
        return self._to_drive_frame(values, self.lab_times(offsets, n, before))

    def lab_times(self, offsets: tuple[float, ...], n: int, before: int) -> np.ndarray:
        """Seconds from the pulse start of :meth:`lab_envelope`'s rows."""
        k = np.arange(-before, self.played_samples(n)) - self.start
        return ((k[:, None] + np.asarray(offsets)[None, :]) * self.period_s).reshape(-1)

    def _to_drive_frame(self, values, times: np.ndarray):
        if not self.if_hz and not self.carriers:
            return values
        offsets = {(i, q): f for i, q, f in self.carriers}
        pairs = np.asarray(self.iq_columns, int).reshape(-1, 2)
        turns = np.zeros((len(times), values.shape[1]))  # the angle of each I/Q pair
        for i, q in pairs:
            turns[:, i] = -sign_of(self.sideband) * 2 * np.pi * self.if_hz * times \
                - 2 * np.pi * offsets.get((int(i), int(q)), 0.0) * times
        xp = np if isinstance(values, np.ndarray) else _jnp()
        cos, sin = np.cos(turns), np.sin(turns)
        out = values
        for i, q in pairs:
            re = values[:, i] * cos[:, i] - values[:, q] * sin[:, i]
            im = values[:, i] * sin[:, i] + values[:, q] * cos[:, i]
            out = _set(out, i, re, xp)
            out = _set(out, q, im, xp)
        return out

    def finer(self, factor: int) -> Chain:
        """The same chain on ``factor`` times more sub-steps (for extrapolation)."""
        return replace(self, steps=self.steps * factor)


def _jnp():
    import jax.numpy as jnp
    return jnp


def _set(array, column: int, values, xp):
    if xp is np:
        array = array.copy()
        array[:, column] = values
        return array
    return array.at[:, column].set(values)


def line_columns(recipe, *, line: bool = True,
                 awg: bool = True) -> tuple[tuple[int, tuple[Stage, ...]], ...]:
    """``(column, stages)`` for every control column whose output is filtered: the
    instrument's output (``[awg]``, unless ``awg`` is False) then the channel's ``[line]``
    (unless ``line`` is False)."""
    out = []
    for ch in recipe.system.channels:
        stages = recipe.line.played(ch.name, line=line, awg=awg)
        if stages:
            out.extend((c, stages) for c in ch.columns)
    return tuple(out)


def carriers(system) -> tuple[tuple[int, int, float], ...]:
    """``(I column, Q column, offset Hz)`` of every drive whose carrier is off the frame."""
    return tuple((c.columns[0], c.columns[1], c.offset_hz) for c in system.channels
                 if c.kind == "iq" and c.offset_hz)


RING_SHARE = 0.01  # the ring-down after the footprint may cost this share of the target


def ring_down(recipe, columns, played: int, period_s: float) -> tuple[int, float]:
    """``(samples, residual angle)`` of the ring-down after ``played`` samples: until the
    filtered outputs could turn a qubit by at most ``sqrt(6 RING_SHARE target)`` (a
    rotation by theta costs about theta^2 / 6 of a qubit's average fidelity), bounded by
    each channel's limit over the played length (rounded up to a power of two, at least
    16, so that a sweep's durations of one octave share it and its compiled objective).
    README, "The AWG's analog output"."""
    if not columns:
        return 0, 0.0
    limit = {c: recipe.limits_hz.get(ch.name, 0.0) for ch in recipe.system.channels
             for c in ch.columns}
    length = (1 << max(4, int(np.ceil(np.log2(max(played, 1)))))) * period_s
    angle = ring_angle(recipe)
    rings = [ring_samples(stages, period_s, limit[c] * length, angle) for c, stages in columns]
    return max(r[0] for r in rings), max(r[1] for r in rings)


def ring_angle(recipe) -> float:
    """The angle the ring-down may still turn a qubit by after the footprint (radians)."""
    return float(np.sqrt(6 * RING_SHARE * recipe.optimizer.target_infidelity))


def for_recipe(recipe, *, line: bool = True) -> Chain:
    """The optimiser's chain: the recipe's baseband samples as they reach the chip.

    The instrument's output is always in it. The line is left out when the recipe
    pre-distorts (``export.predistort``: the export inverts the line, so the chip sees the
    samples themselves, through the instrument's output) or when ``line`` is False. The
    export's padding to ``export.granularity`` is part of it (:func:`padding`), and so is
    the ring-down after it.
    """
    lined = line and not recipe.export.predistort
    lead, tail = padding(recipe.samples, recipe.export.granularity, recipe.export.padding)
    columns = line_columns(recipe, line=lined)
    ring, residual = ring_down(recipe, columns, lead + recipe.samples + tail, recipe.dt)
    return Chain(recipe.system.iq_columns(), recipe.dt, recipe.export.if_frequency_hz,
                 recipe.export.sideband, start=lead, line=columns,
                 oversample=recipe.line.oversample, carriers=carriers(recipe.system),
                 lead=lead, tail=tail, ring=ring, ring_residual_rad=residual)


def for_waveform(recipe, wave, *, line: bool = True, mixer: bool = True,
                 awg: bool = True) -> Chain:
    """A waveform file's chain: its samples already carry their IF (and any corrections).

    ``line=False``/``mixer=False`` leave the recipe's line or mixer out (the figures
    "without the line" of the report); ``awg=False`` plays an ideal staircase (no output
    filter: the other end of what an instrument can do).
    """
    model = Mixer.for_recipe(recipe, wave.full_scale_hz) if mixer else None
    period = 1.0 / wave.sample_rate_hz
    columns = line_columns(recipe, line=line, awg=awg)
    ring, residual = ring_down(recipe, columns, wave.fractions.shape[0], period)
    return Chain(recipe.system.iq_columns(), period, wave.if_frequency_hz,
                 wave.sideband, wave.pulse_start, modulated=True, line=columns,
                 oversample=recipe.line.oversample, mixer=model,
                 carriers=carriers(recipe.system), ring=ring, ring_residual_rad=residual,
                 rests_corrected=wave.mixer_corrected)


# The propagator's order in the slice length where a chain gives its slices' slopes
# (shaper.physics.propagator.slope_term): figures on s and 2 s slices per sample are
# extrapolated with it (Richardson), measured at 1/s^4 on a 6x6-level pair
ORDER = 4


def extrapolated(coarse, fine):
    """Richardson's extrapolation of a figure from ``s`` (``coarse``) and ``2 s``
    (``fine``) slices per sample, for an error that falls as ``1/s^ORDER``."""
    return fine + (fine - coarse) / (2 ** ORDER - 1)


def cells_of(drive, samples):
    """``(means, slopes)`` of the propagator's slices for what ``drive`` makes of the
    samples: a :class:`Chain`'s :meth:`Chain.cells`; any other callable's own slices
    (held, no slopes)."""
    if isinstance(drive, Chain):
        return drive.cells(samples)
    return drive(samples), None
