"""What a channel's output is *between* its samples: the continuous analog signal.

The propagator of the rotating frame holds the line's mean over each of its slices
(:mod:`shaper.signal.line`); that is exact enough where nothing turns fast. The lab
frame turns at twice the carrier, and a staircase re-held on a grid near that rate aliases
(README, "The AWG's analog output"). There the output is needed at the very times the
integrator asks for it, and after the last sample until it has settled. This module gives
both, for any chain of stages (the instrument's output filter, then the channel's line):

- the **step response** ``s(t)`` of the stages at arbitrary times, in units of the sample
  period: the rational stages (Bessel, Butterworth, settling terms) in closed form, from
  their state space and the augmented matrix exponential (Van Loan, IEEE Trans. Autom.
  Control 23, 395 (1978)); a Gaussian or measured stage convolved with it on a fine grid
  whose error is measured by halving it (:attr:`Output.resolution`);
- the **output at given offsets** inside every sample, for held samples ``u``: a held
  input is a sum of steps, so ``y(k + tau) = sum_m u_m (s(k - m + tau) - s(k - m - 1 +
  tau))``, one convolution per offset (FFT; linear, so exact gradients follow in JAX);
- the **ring-down**: how long after the last sample the output can still turn a qubit by
  more than a stated angle (:func:`ring_samples`).

Pure NumPy/SciPy; JAX only where the optimiser passes traced samples.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

from shaper.recipe.lines import Stage

FINE = 256  # grid points per sample for stages without a closed form (halved to measure it)
MAX_RING_S = 1e-6  # the longest ring-down simulated; beyond it the residual is reported
TAIL_DECAYS = 40.0  # the impulse response's tail is integrated to exp(-40) of its slowest mode


def _forms(stages: tuple[Stage, ...]):
    from shaper.signal.line import RESPONSES
    rational = tuple(st for st in stages if RESPONSES[st.kind].form == "rational")
    other = tuple(st for st in stages if RESPONSES[st.kind].form != "rational")
    return rational, other


@functools.lru_cache(maxsize=64)
def _state_space(stages: tuple[Stage, ...], period_s: float):
    """``(A, B, C, D)`` of the rational stages, time in samples (None: no rational stage)."""
    from scipy import signal

    from shaper.signal.line import analog

    b, a = analog(stages, period_s)
    if len(a) == 1:
        return None
    return tuple(np.atleast_2d(np.asarray(x, float)) for x in signal.tf2ss(b, a))


def _augmented(A, B):
    n = A.shape[0]
    m = np.zeros((n + 1, n + 1))
    m[:n, :n], m[:n, n:] = A, B
    return m


def rational_step(stages: tuple[Stage, ...], period_s: float, offsets: np.ndarray,
                  count: int) -> np.ndarray:
    """``S[j, n] = s(n + offsets[j])`` of the rational stages for ``n = 0 .. count - 1``
    (time in samples, ``0 <= offsets < 1``), exact: ``expm([[A, B], [0, 0]] t)`` holds the
    step response's state in its last column, and ``t = n + tau`` splits into a power of
    the one-sample exponential and one exponential per offset."""
    from scipy import linalg

    ss = _state_space(stages, period_s)
    if ss is None:
        return np.ones((len(offsets), count))
    A, B, C, D = ss
    n = A.shape[0]
    m = _augmented(A, B)
    one = linalg.expm(m)
    v = np.zeros((count, n + 1))
    v[0, n] = 1.0  # the state at t = 0 with the step applied: x = 0, u = 1
    for i in range(1, count):
        v[i] = one @ v[i - 1]
    part = np.stack([linalg.expm(m * tau) for tau in offsets])  # (J, n+1, n+1)
    states = np.einsum("jab,kb->jka", part[:, :n, :], v)
    return np.einsum("a,jka->jk", C[0], states) + D[0, 0]


def _other_masses(other: tuple[Stage, ...], period_s: float, fine: int):
    """The non-rational stages' impulse response as masses on cells of ``1/fine`` sample:
    ``(masses, first)`` with ``masses[i]`` the mass over cell ``first + i``."""
    from scipy.special import ndtr

    masses, first = np.array([1.0]), 0
    for st in other:
        if st.kind == "gaussian":
            sigma = math.sqrt(math.log(2)) / (2 * math.pi * st.params.cutoff_hz
                                              * period_s)  # samples
            reach = int(math.ceil(8 * sigma * fine)) + 1
            edges = (np.arange(-reach, reach + 2) - 0.5) / fine  # cells centred on j / fine
            w, lead = np.diff(ndtr(edges / sigma)), -reach
        elif st.kind == "measured":
            t = np.asarray(st.params.times_s) / period_s
            v = np.asarray(st.params.values, float)
            if st.params.response == "impulse":
                v = np.concatenate([[0.0], np.cumsum(0.5 * (v[1:] + v[:-1]) * np.diff(t))])
            v = v / v[-1]
            edges = (np.arange(0, int(math.ceil(t[-1] * fine)) + 2) - 0.5) / fine
            w, lead = np.diff(np.interp(edges, t, v, left=0.0, right=1.0)), 0
        else:  # a registered kind: its own cell response on the fine grid
            from shaper.signal.line import cell_response
            g, lead_cells = cell_response((st,), period_s, fine, 64 * fine)
            w, lead = g, -lead_cells
        masses, first = np.convolve(masses, w), first + lead
    return masses, first


def _closed_step(st: Stage, period_s: float, offsets: np.ndarray,
                 count: int) -> tuple[np.ndarray, int]:
    """A lone Gaussian (``Phi(t / sigma)``, zero phase) or measured stage (its step response,
    linear between the measured points) in closed form."""
    from scipy.special import ndtr

    if st.kind == "gaussian":
        sigma = math.sqrt(math.log(2)) / (2 * math.pi * st.params.cutoff_hz * period_s)
        before = int(math.ceil(8 * sigma)) + 1
        t = np.arange(-before, count)[None, :] + offsets[:, None]
        return ndtr(t / sigma), before
    t = np.asarray(st.params.times_s) / period_s
    v = np.asarray(st.params.values, float)
    if st.params.response == "impulse":
        v = np.concatenate([[0.0], np.cumsum(0.5 * (v[1:] + v[:-1]) * np.diff(t))])
    times = np.arange(count)[None, :] + offsets[:, None]
    return np.interp(times, t, v / v[-1], left=0.0, right=1.0), 0


def step_values(stages: tuple[Stage, ...], period_s: float, offsets: np.ndarray,
                count: int, fine: int = FINE) -> tuple[np.ndarray, int]:
    """``S[j, before + n] = s(n + offsets[j])`` for ``n = -before .. count - 1``.

    Rational stages alone are exact. With a Gaussian or measured stage, ``s(t) = sum_i
    w_i s_rat(t - u_i)`` with ``w_i`` its impulse response's mass over the cell of ``1/fine``
    sample centred on ``u_i`` (midpoint rule; ``s_rat`` itself exact at every time used).
    """
    offsets = np.asarray(offsets, float)
    rational, other = _forms(stages)
    if not other:
        return rational_step(rational, period_s, offsets, count), 0
    if not rational and len(other) == 1 and other[0].kind in ("gaussian", "measured"):
        return _closed_step(other[0], period_s, offsets, count)
    masses, first = _other_masses(other, period_s, fine)
    before = max(0, int(math.ceil(-first / fine)) + 1)
    # s(n + tau) = sum_p w[p - first] g(n fine - p), g(q) = s_rat(tau + q / fine)
    q_low = -before * fine - (first + len(masses))  # the smallest q any output needs
    q_count = (count + before) * fine - q_low - first + 1
    out = np.empty((len(offsets), before + count))
    n_index = np.arange(-before, count) * fine - first - q_low
    size = 1 << int(math.ceil(math.log2(q_count + len(masses))))
    w_spectrum = np.fft.rfft(masses, size)
    for j, tau in enumerate(offsets):
        q = np.arange(q_low, q_low + q_count)
        t = tau + q / fine  # samples; s_rat(t) = 0 before 0
        whole = np.floor(t + 1e-12).astype(int)
        frac = np.clip(t - whole, 0.0, None)
        keys, inverse = np.unique(np.round(frac, 12), return_inverse=True)
        table = rational_step(rational, period_s, keys, max(int(whole.max()) + 1, 1))
        g = np.where(whole >= 0, table[inverse, np.clip(whole, 0, None)], 0.0)
        conv = np.fft.irfft(np.fft.rfft(g, size) * w_spectrum, size)
        out[j] = conv[n_index]
    return out, before


@dataclass(frozen=True)
class Output:
    """A channel's continuous output kernel at fixed offsets inside every sample.

    ``kernel[j, before + n]`` is the output at ``n + offsets[j]`` samples for one unit
    sample held over ``[0, 1)``; ``resolution``: the largest change of the step response
    when its fine grid is halved (0 where the form is closed).
    """

    offsets: np.ndarray
    kernel: np.ndarray
    before: int
    resolution: float

    def play(self, held, length: int | None = None):
        """``(len(offsets), before + length)`` outputs of held samples ``(n,)`` (NumPy or
        JAX) at ``k + offsets[j]`` for ``k = -before .. length - 1`` (default ``n``)."""
        n = held.shape[0]
        length = n if length is None else length
        width = self.before + length
        size = 1 << int(math.ceil(math.log2(n + self.kernel.shape[1])))
        spectrum = np.fft.rfft(self.kernel[:, :width], size, axis=1)
        if isinstance(held, np.ndarray):
            out = np.fft.irfft(np.fft.rfft(held, size)[None, :] * spectrum, size, axis=1)
        else:
            import jax.numpy as jnp
            out = jnp.fft.irfft(jnp.fft.rfft(held, size)[None, :] * jnp.asarray(spectrum),
                                size, axis=1)
        return out[:, :width]


@functools.lru_cache(maxsize=32)
def output_kernel(stages: tuple[Stage, ...], period_s: float, offsets: tuple[float, ...],
                  count: int, fine: int = FINE) -> Output:
    """The :class:`Output` of ``stages`` at ``offsets`` (fractions of a sample) for outputs up
    to ``count`` samples after a held sample (an empty ``stages``: the staircase itself);
    ``fine``: the grid of a stage without a closed form (its error measured at half)."""
    tau = np.asarray(offsets, float)
    if not stages:
        kernel = np.zeros((len(tau), count + 1))
        kernel[:, 0] = 1.0
        return Output(tau, kernel, 0, 0.0)
    steps, before = step_values(stages, period_s, tau, count + 1, fine)
    # a sample held over [0, 1) is a step at 0 minus a step at 1: s(t) - s(t - 1)
    kernel = np.diff(np.concatenate([np.zeros((len(tau), 1)), steps], axis=1), axis=1)
    resolution = 0.0
    if _forms(stages)[1]:
        coarse, _ = step_values(stages, period_s, tau, count + 1, fine=fine // 2)
        resolution = float(np.max(np.abs(coarse - steps)))
    return Output(tau, kernel, before, resolution)


def impulse_tail(stages: tuple[Stage, ...], period_s: float) -> tuple[np.ndarray, float]:
    """``(R, step)``: ``R[i]`` bounds ``integral_{i step}^inf |h(t)| dt`` of the stages'
    impulse response ``h`` (time in samples), on a grid of ``step`` samples.

    The rational part's ``|h|`` is integrated on a grid that resolves its fastest mode, to
    ``exp(-40)`` of its slowest; a Gaussian or measured stage multiplies it by its own
    total variation and delays it by its reach (``|h1 * h2|`` tails: Young's inequality).
    """
    from scipy import linalg

    rational, other = _forms(stages)
    ss = _state_space(rational, period_s) if rational else None
    gain, reach = 1.0, 0.0
    if other:
        masses, first = _other_masses(other, period_s, 16)
        gain = float(np.sum(np.abs(masses)))
        reach = (len(masses) + max(first, 0)) / 16
    if ss is None:
        grid = np.arange(0, reach + 1.0, 1 / 16)
        return np.where(grid < reach, gain, 0.0), 1 / 16
    A, B, C, _ = ss
    rates = np.linalg.eigvals(A)
    step = min(0.125, 0.125 / float(np.max(np.abs(rates))))
    slowest = float(np.min(-rates.real))
    count = int(math.ceil((TAIL_DECAYS / max(slowest, 1e-12) + reach) / step)) + 2
    count = min(count, 4_000_000)
    one = linalg.expm(A * step)
    h = np.empty(count)
    x = B[:, 0].copy()
    for i in range(count):  # h(i step) = C e^{A i step} B
        h[i] = C[0] @ x
        x = one @ x
    tail = np.cumsum(np.abs(h[::-1]))[::-1] * step * gain
    shift = int(math.ceil(reach / step))
    return np.concatenate([np.full(shift, tail[0]), tail]), step


def ring_samples(stages: tuple[Stage, ...], period_s: float, drive_area: float,
                 angle_rad: float) -> tuple[int, float]:
    """Samples after the last one until the output can no longer turn a qubit by more than
    ``angle_rad``: the smallest ``t`` with ``2 pi A R(t) <= angle`` (``A`` the input's
    ``integral |u| dt`` bound in Hz s, ``R`` :func:`impulse_tail`), at most
    :data:`MAX_RING_S`. Returns ``(samples, residual angle bound at that time)``.

    Since ``y(t) = integral h(t - s) u(s) ds``, the output after ``t_end + t`` integrates
    to at most ``integral |u| ds  R(t)``: the angle it can still turn.
    """
    if not stages:
        return 0, 0.0
    tail, step = impulse_tail(stages, period_s)
    angles = 2 * math.pi * drive_area * tail
    cap = int(math.floor(MAX_RING_S / period_s))
    below = np.flatnonzero(angles <= angle_rad)
    samples = cap if not below.size else min(cap, int(math.ceil(below[0] * step)))
    index = int(math.floor(samples / step))
    return samples, float(angles[index]) if index < len(angles) else 0.0
