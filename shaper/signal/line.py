"""The line between a DAC and the chip as the propagator sees it (README, "The line").

The DAC holds each sample; the line's stages are linear and time-invariant, so the whole
line of one DAC output is one response. On the propagator's fine grid (``steps`` slices
per AWG sample, length ``h``) this module computes the line's *cell response*: the mean
over each fine cell of the output for a unit input held over the first cell. A held
waveform on the fine grid, convolved with it, gives the exact mean of the line's output
over every fine cell (for the rational stages), which the propagator then holds: the
piecewise-constant error falls as ``h^2`` (tested).

- Rational stages (``bessel``, ``butterworth``, ``exponential``) are combined into one
  analog transfer function (designed with :mod:`scipy.signal`, cutoffs at -3 dB) and
  discretised exactly for a held input (the augmented matrix exponential of Van Loan,
  IEEE Trans. Autom. Control 23, 395 (1978)).
- ``gaussian``: the zero-phase Gaussian response of the given -3 dB cutoff, integrated
  exactly over the cells (the instrument's fixed delay is taken as compensated).
- ``measured``: the file's step (or impulse) response, normalised to unit gain at DC,
  interpolated linearly and integrated exactly over the cells.

Non-rational stages are combined with the rest by discrete convolution on the fine grid.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable
from typing import NamedTuple

import numpy as np

from shaper.errors import InputError
from shaper.recipe.lines import Stage, register_reader


class Response(NamedTuple):
    """How a line stage kind responds, on the fine grid of cell length ``h`` (seconds):

    - ``"rational"``: ``make(stage, h) -> (b, a)``, an analog transfer function in
      ``s' = s h``; all rational stages are combined and discretised exactly together.
    - ``"kernel"``: ``make(stage, h) -> (cells, lead)``, a cell response reaching ``lead``
      cells before its input (non-causal, e.g. zero-phase).
    - ``"causal"``: ``make(stage, h, cells) -> cells``, a causal cell response of that
      length.
    """

    form: str
    make: Callable


def _lowpass(st: Stage, h: float):
    from scipy import signal  # here: importing scipy.signal costs every command ~0.3 s

    wc = 2 * math.pi * st.params.cutoff_hz * h
    if st.kind == "bessel":  # norm="mag": -3 dB at the cutoff, like Butterworth
        return signal.bessel(st.params.order, wc, analog=True, norm="mag")
    return signal.butter(st.params.order, wc, analog=True)


def _exponential(st: Stage, h: float):
    # step response 1 + sum_k A_k exp(-t/tau_k): H = 1 + sum_k A_k tau_k s/(1 + tau_k s)
    bs, as_ = np.array([1.0]), np.array([1.0])
    for amp, tau in zip(st.params.amplitudes, st.params.time_constants_s, strict=True):
        tau = tau / h
        term_b, term_a = np.array([amp * tau, 0.0]), np.array([tau, 1.0])
        bs = np.polyadd(np.polymul(bs, term_a), np.polymul(term_b, as_))
        as_ = np.polymul(as_, term_a)
    return bs, as_


def analog(stages: tuple[Stage, ...], h: float) -> tuple[np.ndarray, np.ndarray]:
    """The rational stages' combined transfer function ``(b, a)`` in ``s' = s h`` (time in
    units of the fine cell, which keeps the polynomials well scaled)."""
    b, a = np.array([1.0]), np.array([1.0])
    for st in stages:
        response = RESPONSES[st.kind]
        if response.form == "rational":
            bs, as_ = response.make(st, h)
            b, a = np.polymul(b, bs), np.polymul(a, as_)
    return b, a


def rational_cells(b: np.ndarray, a: np.ndarray, cells: int) -> np.ndarray:
    """Mean output over each unit cell for a unit input held over cell 0 (``(cells,)``)."""
    from scipy import linalg, signal

    out = np.zeros(cells)
    if len(a) == 1:  # a pure gain
        out[0] = b[-1] / a[0]
        return out
    A, B, C, D = signal.tf2ss(b, a)
    n = A.shape[0]
    # xi = [x, u] evolves with M = [[A, B], [0, 0]]; expm([[M, I], [0, 0]]) holds e^M and
    # its integral over the cell, from which the state's cell mean follows (Van Loan).
    m = np.zeros((n + 1, n + 1))
    m[:n, :n], m[:n, n:] = A, B
    big = np.zeros((2 * (n + 1), 2 * (n + 1)))
    big[:n + 1, :n + 1], big[:n + 1, n + 1:] = m, np.eye(n + 1)
    e = linalg.expm(big)
    step, mean = e[:n + 1, :n + 1], e[:n + 1, n + 1:]
    out[0] = (C @ mean[:n, n]).item() + D.item()
    x = step[:n, n]
    decay, mean_x = step[:n, :n], C @ mean[:n, :n]
    for j in range(1, cells):
        out[j] = (mean_x @ x).item()
        x = decay @ x
    return out


def _integrated_gauss(x):
    """An antiderivative of the normal CDF: x Phi(x) + phi(x)."""
    from scipy.special import ndtr
    return x * ndtr(x) + np.exp(-0.5 * x * x) / math.sqrt(2 * math.pi)


def gaussian_cells(cutoff_hz: float, h: float) -> tuple[np.ndarray, int]:
    """Cell response of a zero-phase Gaussian low-pass with -3 dB at ``cutoff_hz``.

    ``|H(f)| = exp(-f^2 / (2 sigma_f^2))`` with ``sigma_f = cutoff / sqrt(ln 2)``; the impulse
    response is a Gaussian of ``sigma_t = 1 / (2 pi sigma_f)``. Returns the response and
    its lead (cells before the input's cell).
    """
    sigma = 1.0 / (2 * math.pi * cutoff_hz / math.sqrt(math.log(2))) / h  # in cells
    lead = int(math.ceil(8 * sigma)) + 1
    j = np.arange(-lead, lead + 1, dtype=float)
    # mean over cell [j, j+1) of Phi(t/s) - Phi((t-1)/s): second differences of s Psi(t/s)
    psi = lambda t: sigma * _integrated_gauss(t / sigma)  # noqa: E731
    return psi(j + 1) - 2 * psi(j) + psi(j - 1), lead


def measured_cells(stage: Stage, h: float, cells: int) -> np.ndarray:
    """Cell response of a measured step or impulse response, normalised to unit DC gain."""
    t = np.asarray(stage.params.times_s)
    v = np.asarray(stage.params.values)
    if stage.params.response == "impulse":  # the step response is its running integral
        v = np.concatenate([[0.0], np.cumsum(0.5 * (v[1:] + v[:-1]) * np.diff(t))])
        v = v / v[-1]
    else:
        v = v / v[-1]
    grid = np.arange(cells + 2) * h
    # S(t) = integral of the step response from 0 (piecewise linear, held after the end)
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (v[1:] + v[:-1]) * np.diff(t))])
    inside = np.minimum(grid, t[-1])
    s_grid = np.interp(inside, t, cum) + np.maximum(grid - t[-1], 0.0) * v[-1]
    big_s = np.concatenate([[0.0], s_grid])  # S at -h (zero) and at 0, h, 2h, ...
    # mean over [jh, (j+1)h) of s(t) - s(t - h) = (S(j+1) - 2 S(j) + S(j-1)) / h
    return (big_s[2:cells + 2] - 2 * big_s[1:cells + 1] + big_s[:cells]) / h


@functools.lru_cache(maxsize=64)
def cell_response(stages: tuple[Stage, ...], period_s: float, steps: int,
                  cells: int) -> tuple[np.ndarray, int]:
    """The line's cell response on ``steps`` cells per AWG sample, and its lead.

    Returns ``(g, lead)`` with ``g[lead + j]`` the mean output over fine cell ``j`` for a
    unit input held over cell 0, for ``j`` from ``-lead`` to ``cells - 1``.
    """
    h = period_s / steps
    kernels = [RESPONSES[st.kind].make(st, h) for st in stages
               if RESPONSES[st.kind].form == "kernel"]
    lead = sum(extra for _, extra in kernels)
    span = cells + lead  # later cells of the causal part reach back through the leads
    g = rational_cells(*analog(stages, h), span)
    for st in stages:
        if RESPONSES[st.kind].form == "causal":
            g = np.convolve(g, RESPONSES[st.kind].make(st, h, span))[:span]
    for kernel, _ in kernels:
        g = np.convolve(g, kernel)
    g = np.array(g[:lead + cells])
    g.setflags(write=False)
    return g, lead


def apply(fine, g: np.ndarray, lead: int):
    """The line's output (cell means) for held input ``fine`` ``(N,)`` on the same grid.

    ``out[j] = sum_i fine[i] g[lead + j - i]``, by FFT (NumPy or JAX in, the same out; linear,
    so exact gradients follow).
    """
    n = fine.shape[0]
    size = 1 << int(math.ceil(math.log2(n + len(g))))
    if isinstance(fine, np.ndarray):
        out = np.fft.irfft(np.fft.rfft(fine, size) * np.fft.rfft(g, size), size)
    else:
        import jax.numpy as jnp
        out = jnp.fft.irfft(jnp.fft.rfft(fine, size) * jnp.asarray(np.fft.rfft(g, size)), size)
    return out[lead:lead + n]


def sample_response(stages: tuple[Stage, ...], period_s: float, steps: int,
                    samples: int) -> tuple[np.ndarray, int]:
    """The line's output averaged over each AWG sample for one unit held sample.

    Returns ``(q, before)``: ``q[before + m]`` is the mean output over sample ``m`` (from
    ``-before``, where a non-causal response reaches back, to ``samples - 1``).
    """
    g, lead = cell_response(stages, period_s, steps, samples * steps)
    before = -(-lead // steps)  # whole AWG samples the response reaches back
    held = np.convolve(np.concatenate([np.zeros(before * steps - lead), g]), np.ones(steps))
    held = np.concatenate([held, np.zeros(steps)])[:(before + samples) * steps]
    return held.reshape(before + samples, steps).mean(axis=1), before


def through_line(held: np.ndarray, stages: tuple[Stage, ...], period_s: float,
                 steps: int) -> np.ndarray:
    """The line's output averaged over each AWG sample, for held samples ``(n,)`` (by FFT
    convolution: no ``n x n`` matrix, whatever the length)."""
    q, before = sample_response(stages, period_s, steps, held.shape[0])
    return apply(np.asarray(held, float), q, before)


def sample_matrix(stages: tuple[Stage, ...], period_s: float, steps: int,
                  samples: int) -> np.ndarray:
    """The same map as a dense ``(samples, samples)`` Toeplitz matrix (lower triangular for
    a causal line): for inspection and for inverting a non-causal line of modest length."""
    from scipy import linalg

    q, before = sample_response(stages, period_s, steps, samples)
    row = np.zeros(samples)
    row[:before + 1] = q[before::-1][:samples]
    return linalg.toeplitz(q[before:], row)


MAX_DENSE_SAMPLES = 8000  # a non-causal line is inverted by least squares on a dense matrix


def predistort(intended: np.ndarray, stages: tuple[Stage, ...], period_s: float, steps: int,
               *, channel: str) -> tuple[np.ndarray, float]:
    """The held samples whose line output, averaged over each sample, equals ``intended``.

    A causal line is inverted exactly by forward substitution (``scipy.signal.lfilter``
    with the per-sample response as its denominator: O(n) memory); a non-causal one
    (a zero-phase Gaussian) by least squares, up to :data:`MAX_DENSE_SAMPLES` samples.

    Returns ``(samples, residual)`` with the residual the largest error of the line's
    output against ``intended``, relative to its peak.

    Raises:
        InputError: the inverse is unstable or ill-conditioned for this line, or too long.
    """
    from scipy import linalg, signal

    n = intended.shape[0]
    q, before = sample_response(stages, period_s, steps, n)
    if before == 0:
        if not q[0] > 1e-6:
            raise InputError(f"line.{channel}: the line passes almost nothing within one "
                             f"sample ({q[0]:.3g}); it cannot be inverted sample by sample")
        # the response's tail below 1e-15 of its peak changes nothing: drop it (speed)
        last = int(np.max(np.flatnonzero(np.abs(q) > 1e-15 * np.max(np.abs(q)))))
        with np.errstate(over="ignore", invalid="ignore"):
            out = signal.lfilter([1.0], q[:last + 1], intended)
    elif n <= MAX_DENSE_SAMPLES:
        out = linalg.lstsq(sample_matrix(stages, period_s, steps, n), intended)[0]
    else:
        raise InputError(f"line.{channel}: a non-causal (Gaussian) line is pre-distorted on "
                         f"at most {MAX_DENSE_SAMPLES} samples, this waveform has {n}")
    peak = max(float(np.max(np.abs(intended))), 1e-300)
    with np.errstate(over="ignore", invalid="ignore"):
        residual = float(np.max(np.abs(apply(out, q, before) - intended))) / peak
        growth = float(np.max(np.abs(out))) / peak
    if not np.all(np.isfinite(out)) or not residual <= 1e-6 or not growth <= 1e3:
        raise InputError(f"line.{channel}: the inverse of this line is unstable (peak "
                         f"{growth:.3g}x the intended waveform, residual {residual:.3g}); "
                         f"pre-distortion cannot correct it. A low-pass that rolls off "
                         f"below the sample rate has no stable inverse at the AWG's rate: "
                         f"keep such a line in the optimiser's loop (export.predistort = "
                         f"false)")
    return out, residual


RESPONSES: dict[str, Response] = {
    "bessel": Response("rational", _lowpass),
    "butterworth": Response("rational", _lowpass),
    "exponential": Response("rational", _exponential),
    "gaussian": Response("kernel", lambda st, h: gaussian_cells(st.params.cutoff_hz, h)),
    "measured": Response("causal", measured_cells),
}


def register_kind(name: str, keys: tuple[str, ...], read: Callable, response: Response,
                  params: type) -> None:
    """A new line stage kind: ``[[line.<channel>]] kind = "<name>"`` with ``keys`` (besides
    ``kind``), read into ``Stage(name, params(...))`` by ``read(r, table, where,
    sample_rate_hz)`` (``params``: the frozen dataclass of the kind's own parameters, SI
    units, which the stage's report lists), responding as ``response`` (DEVELOPERS.md,
    "Where new things go")."""
    register_reader(name, keys, read, params)
    RESPONSES[name] = response
