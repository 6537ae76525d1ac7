"""Fits of randomized-benchmarking decays: survival ``A p^m + B`` and the leakage curve.

The model is linear in its amplitudes for a fixed decay, so the decay is found by a scan
of ``log(1 - p)`` and a bounded one-dimensional refinement, the amplitudes by weighted
least squares at each trial (variable projection): no starting guess, no failure on data
without a decay (ideal gates give ``p = 1``). Standard errors come from the Jacobian at
the optimum: with given standard errors of the points they are absolute (sampled
sequences); without, scaled by the residual (the exact average, where only the model's
own misfit is left).

With leakage, Wood and Gambetta, Phys. Rev. A 97, 032306 (2018), fit the population left
in the computational subspace after m Cliffords, ``A_L + B_L lambda^m``; the leakage and
seepage rates per Clifford are ``L1 = (1 - A_L)(1 - lambda)`` and ``L2 = A_L (1 - lambda)``
(from memory), and the population outside the qubit approaches ``L1 / (L1 + L2)``. The
survival then holds two decays, lambda and p; a fit of both with free amplitudes is
ill-conditioned when they are close (measured: amplitudes of 1e6 and a p of 1 - 3e-10 on
sequences up to 128 with lambda = 0.995, p = 0.997). Their separation instead: once the
Clifford twirl has spread the subspace's population evenly, ``survival - subspace / d``
holds only the traceless part of the subspace's state, which decays with p alone (derived
from the twirled channel's block form in Wood and Gambetta), a one-exponential fit.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.optimize
from numpy.typing import ArrayLike

FLAT = 1e-12  # data spanning less than this have no decay to fit (p = 1)


@dataclass(frozen=True)
class DecayFit:
    """``y(m) = amplitude decay^m + offset``."""

    amplitude: float        # A
    offset: float           # B
    decay: float            # p, in [0, 1]
    decay_error: float      # standard error of p
    offset_error: float     # standard error of B
    covariance: float       # covariance of B and p (for rates derived from both)
    residual_rms: float     # root mean square of the (unweighted) residuals


def _design(lengths: np.ndarray, p: float) -> np.ndarray:
    return np.stack([p ** lengths, np.ones_like(lengths)], axis=1)


def _solve(lengths, y, w, p):
    a = _design(lengths, p)
    coef = np.linalg.lstsq(a * w[:, None], y * w, rcond=None)[0]
    return coef, float(np.sum(((a @ coef - y) * w) ** 2))


def fit_decay(lengths: ArrayLike, values: ArrayLike,
              errors: ArrayLike | None = None) -> DecayFit:
    """Least-squares fit of ``A p^m + B``.

    Args:
        lengths: ``(n,)`` sequence lengths m (Cliffords before the recovery).
        values: ``(n,)`` mean survival (or subspace population) per length.
        errors: ``(n,)`` standard errors of the means, or None (exact averages: unweighted,
            errors scaled by the residual).

    Returns:
        The :class:`DecayFit`.

    References:
        E. Magesan, J. M. Gambetta and J. Emerson, Phys. Rev. Lett. 106, 180504 (2011);
        C. J. Wood and J. M. Gambetta, Phys. Rev. A 97, 032306 (2018).
    """
    m = np.asarray(lengths, float)
    y = np.asarray(values, float)
    w = np.ones_like(y) if errors is None else 1 / np.maximum(np.asarray(errors, float),
                                                              1e-15)
    if np.ptp(y) < FLAT:
        return DecayFit(0.0, float(y.mean()), 1.0, 0.0, 0.0, 0.0,
                        float(np.sqrt(np.mean((y - y.mean()) ** 2))))
    grid = np.logspace(-12, 0, 241)  # 1 - p
    costs = [_solve(m, y, w, 1 - q)[1] for q in grid]
    k = int(np.argmin(costs))
    lo, hi = np.log10(grid[max(k - 1, 0)]), np.log10(grid[min(k + 1, len(grid) - 1)])
    best = scipy.optimize.minimize_scalar(
        lambda x: _solve(m, y, w, 1 - 10.0 ** x)[1], bounds=(lo, hi),
        method="bounded", options={"xatol": 1e-10})
    p = 1 - 10.0 ** float(best.x) if best.fun <= costs[k] else 1 - grid[k]
    coef, chi2 = _solve(m, y, w, p)
    a_amp, b_off = float(coef[0]), float(coef[1])
    # Jacobian of the model in (A, B, p), weighted
    jac = np.column_stack([_design(m, p),
                           a_amp * m * p ** np.maximum(m - 1, 0)]) * w[:, None]
    cov = np.linalg.pinv(jac.T @ jac)
    dof = max(len(y) - jac.shape[1], 1)
    if errors is None:
        cov = cov * chi2 / dof
    return DecayFit(a_amp, b_off, float(p), float(np.sqrt(max(cov[-1, -1], 0))),
                    float(np.sqrt(max(cov[1, 1], 0))), float(cov[1, -1]),
                    float(np.sqrt(np.mean((_design(m, p) @ coef - y) ** 2))))


@dataclass(frozen=True)
class LeakageFit:
    """Leakage and seepage per Clifford from the subspace population's decay."""

    leakage_rate: float          # L1: population leaving levels 0/1 per Clifford
    leakage_rate_error: float
    seepage_rate: float          # L2: population returning per Clifford
    seepage_rate_error: float
    decay: float                 # lambda = 1 - L1 - L2
    steady_state_leaked: float   # L1 / (L1 + L2): leaked population as m -> infinity
    fit: DecayFit                # the subspace population A_L + B_L lambda^m (A_L: offset)


def fit_leakage(lengths: ArrayLike, subspace: ArrayLike,
                errors: ArrayLike | None = None) -> LeakageFit | None:
    """Wood and Gambetta's leakage fit of the population in the computational subspace.

    Args:
        lengths: ``(n,)`` sequence lengths.
        subspace: ``(n,)`` mean population in levels 0/1 after the sequence.
        errors: their standard errors, or None for exact averages.

    Returns:
        The :class:`LeakageFit`, or None when no population leaves the subspace (all
        points within 1e-12 of 1).

    References:
        C. J. Wood and J. M. Gambetta, Phys. Rev. A 97, 032306 (2018).
    """
    y = np.asarray(subspace, float)
    if np.max(np.abs(1 - y)) < FLAT:
        return None
    fit = fit_decay(lengths, y, errors)
    a, lam = fit.offset, fit.decay
    l1, l2 = (1 - a) * (1 - lam), a * (1 - lam)
    cov = np.array([[fit.offset_error ** 2, fit.covariance],
                    [fit.covariance, fit.decay_error ** 2]])
    g1 = np.array([-(1 - lam), -(1 - a)])  # d L1 / d(A_L, lambda)
    g2 = np.array([1 - lam, -a])
    total = l1 + l2
    return LeakageFit(float(l1), float(np.sqrt(max(g1 @ cov @ g1, 0))), float(l2),
                      float(np.sqrt(max(g2 @ cov @ g2, 0))), float(lam),
                      float(l1 / total) if total > 0 else 0.0, fit)
