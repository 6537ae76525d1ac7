"""Pulse parametrisation (the bounded map from free parameters to samples) and first guesses.

The optimiser moves real, unbounded parameters ``x`` of shape ``(m, k)`` on its own
grid (each value held for ``hold`` AWG samples). They become samples in Hz by

- an I/Q channel with limit A: ``I + iQ = A tanh(r)/r (x_I + i x_Q)``, r = |x|,
  so ``|I + iQ| < A`` holds exactly for every sample, not just on average;
- a baseband channel with range [lo, hi] (``lo <= 0 <= hi``; default ``-B, B``):
  ``u = c + w tanh(x)`` with ``c = (hi + lo)/2``, ``w = (hi - lo)/2``, so a one-sided flux
  line never leaves its side;
- then a fixed envelope (zero first and last sample, optional sin^2 ramps).

A channel whose limit is 0 is not driven: it has no parameters and its samples are 0.
Parameters are ``(m, f)`` with ``f`` the driven control columns (:attr:`Layout.free_columns`).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import jax.numpy as jnp
import numpy as np

from shaper.errors import InputError
from shaper.physics import _jax  # noqa: F401
from shaper.physics.systems import System
from shaper.recipe.schema import GUESSES


@dataclass(frozen=True)
class Layout:
    """How parameters become samples. All arrays are numpy constants.

    Attributes:
        iq_columns: ``(p, 2)`` control columns (I, Q) of each I/Q channel.
        iq_limits_hz: ``(p,)`` maximum |I + iQ| per I/Q channel, Hz.
        baseband_columns: ``(b,)`` control columns of baseband channels.
        baseband_limits_hz: ``(b,)`` maximum |u| per baseband channel, Hz.
        baseband_ranges_hz: ``(b, 2)`` lowest and highest u per baseband channel, Hz.
        free_columns: ``(f,)`` the driven control columns, in order: one parameter each.
        envelope: ``(n,)`` fixed factor in [0, 1] per AWG sample.
        hold: AWG samples per optimiser slice.
        controls: number of control columns k.
    """

    iq_columns: np.ndarray
    iq_limits_hz: np.ndarray
    baseband_columns: np.ndarray
    baseband_limits_hz: np.ndarray
    baseband_ranges_hz: np.ndarray
    free_columns: np.ndarray
    envelope: np.ndarray
    hold: int
    controls: int

    @property
    def samples(self) -> int:
        return int(self.envelope.shape[0])

    @property
    def shape(self) -> tuple[int, int]:
        """The parameters' shape: (slices, driven control columns)."""
        return self.slices, len(self.free_columns)

    def parameter_of(self, columns) -> np.ndarray:
        """The parameter index of each (driven) control column."""
        return np.searchsorted(self.free_columns, np.asarray(columns, int))

    @property
    def slices(self) -> int:
        return self.samples // self.hold

    def column_limits(self) -> np.ndarray:
        """``(k,)`` limit (Hz) of each control column."""
        out = np.zeros(self.controls)
        for (i, q), lim in zip(self.iq_columns, self.iq_limits_hz, strict=True):
            out[i] = out[q] = lim
        out[self.baseband_columns] = self.baseband_limits_hz
        return out


def make_layout(system: System, limits_hz: dict[str, float], samples: int, *, hold: int = 1,
                zero_ends: bool = True, ramp_samples: int = 0,
                ranges_hz: dict[str, tuple[float, float]] | None = None) -> Layout:
    """Build the :class:`Layout` for a system and per-channel limits (Hz; 0: not driven) and
    flux ranges (default: symmetric about 0 within the limit)."""
    if samples % hold:
        raise InputError(f"{samples} samples are not a whole number of slices of {hold}")
    ranges_hz = ranges_hz or {}
    iq, iq_lim, bb, bb_lim, bb_range = [], [], [], [], []
    for ch in system.channels:
        if ch.name not in limits_hz:
            raise InputError(f"no amplitude limit for channel {ch.name!r}")
        limit = limits_hz[ch.name]
        if not limit > 0:
            continue  # not driven
        if ch.kind == "iq":
            iq.append(ch.columns)
            iq_lim.append(limit)
        else:
            bb.append(ch.columns[0])
            bb_lim.append(limit)
            bb_range.append(ranges_hz.get(ch.name, (-limit, limit)))
    envelope = np.ones(samples)
    if ramp_samples:
        ramp = np.sin(0.5 * np.pi * (np.arange(ramp_samples) + 0.5) / ramp_samples) ** 2
        envelope[:ramp_samples] = ramp
        envelope[samples - ramp_samples:] = ramp[::-1]
    if zero_ends and samples > 2:
        envelope[0] = envelope[-1] = 0.0
    iq = np.array(iq, int).reshape(-1, 2)
    return Layout(iq, np.array(iq_lim, float), np.array(bb, int), np.array(bb_lim, float),
                  np.array(bb_range, float).reshape(-1, 2),
                  np.sort(np.concatenate([iq.ravel(), np.array(bb, int)])), envelope,
                  int(hold), len(system.control_names))


def padded(layout: Layout, samples: int) -> Layout:
    """The layout with its envelope zero-padded to ``samples`` (a shared size)."""
    if samples < layout.samples or samples % layout.hold:
        raise InputError(f"cannot pad {layout.samples} samples to {samples}")
    envelope = np.concatenate([layout.envelope, np.zeros(samples - layout.samples)])
    return dataclasses.replace(layout, envelope=envelope)


def _tanh_over_r(r2, xp=jnp):
    # tanh(r)/r, safe at r = 0 (value 1, gradient finite): the double-where pattern
    small = r2 < 1e-12
    r = xp.sqrt(xp.where(small, 1.0, r2))
    return xp.where(small, 1.0 - r2 / 3.0, xp.tanh(r) / r)


def to_samples(params, layout: Layout, envelope=None):
    """Parameters ``(m, f)`` -> samples ``(m * hold, k)`` in Hz, within the limits.

    ``envelope`` (an array argument, so that it can change without recompiling) replaces
    ``layout.envelope``. NumPy parameters give NumPy samples without touching JAX (the
    watchdog writes the best pulse that way while a computation is stuck).
    """
    xp = np if isinstance(params, np.ndarray) else jnp
    columns = [xp.zeros(params.shape[0])] * layout.controls
    if len(layout.iq_columns):
        xy = params[:, layout.parameter_of(layout.iq_columns)]  # (m, p, 2)
        scale = _tanh_over_r(xp.sum(xy ** 2, axis=-1), xp) * layout.iq_limits_hz
        for j, (i, q) in enumerate(layout.iq_columns):
            columns[i], columns[q] = xy[:, j, 0] * scale[:, j], xy[:, j, 1] * scale[:, j]
    for c, (low, high) in zip(layout.baseband_columns, layout.baseband_ranges_hz, strict=True):
        x = params[:, layout.parameter_of(c)]
        centre, width = 0.5 * (high + low), 0.5 * (high - low)
        columns[c] = xp.tanh(x) * width + centre if centre else xp.tanh(x) * width
    envelope = layout.envelope if envelope is None else envelope
    return xp.repeat(xp.stack(columns, axis=1), layout.hold, axis=0) * envelope[:, None]


def to_params(samples: np.ndarray, layout: Layout, *, headroom: float = 0.98) -> np.ndarray:
    """Inverse of :func:`to_samples` for a first guess (amplitudes capped at headroom x limit)."""
    samples = np.asarray(samples, float)
    env = layout.envelope[:, None]
    held = np.where(env > 1e-9, samples / np.where(env > 1e-9, env, 1.0), 0.0)
    held = held.reshape(layout.slices, layout.hold, -1).mean(axis=1)
    params = np.zeros(layout.shape)
    for (i, q), lim in zip(layout.iq_columns, layout.iq_limits_hz, strict=True):
        z = (held[:, i] + 1j * held[:, q]) / lim
        rho = np.minimum(np.abs(z), headroom)
        gain = np.where(rho > 0, np.arctanh(rho) / np.where(rho > 0, np.abs(z), 1.0), 1.0)
        pi, pq = layout.parameter_of([i, q])
        params[:, pi], params[:, pq] = (z * gain).real, (z * gain).imag
    for col, (low, high) in zip(layout.baseband_columns, layout.baseband_ranges_hz, strict=True):
        centre, width = 0.5 * (high + low), 0.5 * (high - low)
        # a one-sided line rests at one end of its range, where tanh is flat: start it a
        # step inside (|x| <= 1, slope >= 0.42) so that the gradient can move it
        cap = min(headroom, math.tanh(1.0)) if centre else headroom
        params[:, layout.parameter_of(col)] = np.arctanh(
            np.clip((held[:, col] - centre) / width, -cap, cap))
    return params


def rotation_area(target_label: str) -> float:
    """The pulse area (integral of the Rabi frequency, cycles) of a first guess.

    A rotation by theta needs area theta / (2 pi) (Rabi's resonant solution): 1/2 for
    a pi pulse, 1/4 for pi/2. Gates without an obvious angle start from a pi/2 area.
    """
    label = target_label.upper()
    if label in ("X", "Y", "H"):
        return 0.5
    if label in ("X/2", "Y/2"):
        return 0.25
    return 0.25


def gaussian_shape(samples: int, dt: float) -> np.ndarray:
    """A Gaussian of sigma = duration/4 sampled at sample centres, offset to zero at the ends,
    normalised to unit area (1/s)."""
    t = (np.arange(samples) + 0.5) * dt
    duration = samples * dt
    sigma = duration / 4
    g = np.exp(-0.5 * ((t - duration / 2) / sigma) ** 2)
    g -= np.exp(-0.5 * (duration / 2 / sigma) ** 2)
    return g / (g.sum() * dt)


def drag_quadrature(main: np.ndarray, dt: float, anharmonicity_hz: float) -> np.ndarray:
    """The first-order DRAG quadrature of an in-phase envelope: ``Q(t) = -dI/dt / (2 pi
    alpha)`` in these units (Rabi frequencies and the anharmonicity alpha in Hz), which
    cancels the leading 1-2 transition; the derivative by central differences.

    Args:
        main: ``(n,)`` the in-phase envelope I(t) in Hz.
        dt: the sample period in seconds.
        anharmonicity_hz: alpha = f12 - f01 (negative for a transmon), not zero.

    References:
        F. Motzoi, J. M. Gambetta, P. Rebentrost and F. K. Wilhelm, Phys. Rev. Lett. 103,
        110501 (2009).
    """
    return -np.gradient(main, dt) / (2 * np.pi * anharmonicity_hz)


def first_guess(kind: str, system: System, layout: Layout, dt: float, *, area: float,
                rng: np.random.Generator, drag_scale: float = 1.0,
                axis: str = "x") -> np.ndarray:
    """Samples (Hz) of a first guess on every I/Q channel; baseband channels start at zero.

    Args:
        kind: ``"gaussian"``, ``"drag"``, ``"cosine"`` or ``"random"``.
        area: pulse area in cycles (see :func:`rotation_area`).
        axis: ``"x"`` puts the pulse on I, ``"y"`` on Q.
        drag_scale: multiple of the first-order DRAG correction.

    The DRAG quadrature is :func:`drag_quadrature` times ``drag_scale``.
    """
    n = layout.samples
    samples = np.zeros((n, layout.controls))
    if kind == "random":
        limits = layout.column_limits()
        return rng.uniform(-0.3, 0.3, size=(n, layout.controls)) * limits
    if kind == "gaussian" or kind == "drag":
        shape = gaussian_shape(n, dt)
    elif kind == "cosine":
        t = (np.arange(n) + 0.5) / n
        shape = (1 - np.cos(2 * np.pi * t)) / (np.sum(1 - np.cos(2 * np.pi * t)) * dt)
    else:
        raise InputError(f"unknown first guess {kind!r}; choose one of {', '.join(GUESSES)}")
    driven = set(layout.iq_columns.ravel().tolist())
    for ch in system.channels:
        if ch.kind != "iq" or ch.columns[0] not in driven:
            continue
        i, q = ch.columns
        main = area * shape
        quad = np.zeros(n)
        if kind == "drag":
            alpha = system.transition_frequencies.get(ch.name, {})
            alpha = alpha.get("f12_hz", 0.0) - alpha.get("f01_hz", 0.0)
            if alpha == 0.0:
                raise InputError(f"a DRAG first guess needs the anharmonicity of {ch.name!r}; "
                                 f"this model has none")
            quad = drag_scale * drag_quadrature(main, dt, alpha)
        if axis == "y":
            samples[:, i], samples[:, q] = -quad, main
        else:
            samples[:, i], samples[:, q] = main, quad
    return samples
