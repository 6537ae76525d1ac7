"""Predicted single-qubit randomized benchmarking from the noisy maps of a gate set.

A sequence is m Cliffords drawn uniformly from the 24, then the Clifford that inverts their
product, each played as its compilation (:mod:`shaper.physics.clifford`) with the given
maps (:mod:`shaper.physics.gate_maps`); the survival of ``|0>`` is fitted with
``A p^m + B`` and the error per Clifford is ``r = (d - 1)(1 - p)/d``, d = 2 (Magesan,
Gambetta and Emerson, Phys. Rev. Lett. 106, 180504 (2011)). Each sequence's survival is
its exact probability (infinitely many shots).

Two ways to average over sequences:

- ``"exact"`` (the default): the average over all 24^m sequences, for any m and any
  gate-dependent noise, through the transfer operator on the group: the state is carried
  as one (unnormalised) density matrix per element g of the ideal product so far,
  ``X_{m+1}(g) = (1/24) sum_c S_c X_m(c^-1 g)``, and the recovery of element g is applied
  last. One step costs ``(24 d^2)^2``: a few microseconds for a 3-level transmon. Default
  because it is cheap and free of sampling error, so small differences between gate sets
  are not lost in the noise of the prediction.
- ``"sampled"``: what a lab does, ``sequences`` random sequences per length (seeded); the
  mean per length with its standard error.

The survival is fitted as a lab does, ``A p^m + B`` with the offset B free: leakage then
shows in p and in B, which tends to ``(1 - L)/d`` with L the leaked population's steady
state. With more than two levels the population left outside levels 0/1 is fitted as Wood
and Gambetta, Phys. Rev. A 97, 032306 (2018) describe (leakage and seepage per Clifford,
:func:`shaper.physics.rb_fit.fit_leakage`), and ``survival - subspace population / d``
gives the decay inside the qubit alone (``subspace_fit``; a lab needs a readout that tells
level 2 apart for it).
"""

from __future__ import annotations

import time
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from shaper.errors import InputError
from shaper.physics.clifford import Compilation, compile_cliffords, single_qubit_cliffords
from shaper.physics.gate_maps import QubitMaps
from shaper.physics.rb_fit import DecayFit, LeakageFit, fit_decay, fit_leakage

DEFAULT_LENGTHS = (1, 2, 4, 8, 16, 32, 64, 128, 256, 512, 1024, 2048)


@dataclass(frozen=True)
class Benchmark:
    """A predicted RB decay and its fit: everything a plot and a report need."""

    qubits: int                         # 1 or 2 (d = 2^qubits)
    method: str                         # "exact" or "sampled"
    lengths: tuple[int, ...]            # m, Cliffords before the recovery
    survival: tuple[float, ...]         # mean survival of |0...0> per length
    survival_error: tuple[float, ...]   # its standard error (0 for the exact average)
    leaked: tuple[float, ...]           # mean population outside levels 0/1 per length
    sequences: int                      # random sequences per length (0: exact average)
    seed: int | None                    # of the sampled sequences
    fit: DecayFit                       # survival = A p^m + B, B free
    leakage: LeakageFit | None          # None: no population left the qubit levels
    subspace_fit: DecayFit | None       # survival - subspace/d (with leakage only)
    compilation: dict                   # the compilation's summary and averages
    cost: dict | None = None            # the cost stated before running (two qubits)
    seconds: float = 0.0                # time the prediction took

    @property
    def error_per_clifford(self) -> float:
        """``r = (d - 1)(1 - p)/d``."""
        d = 2 ** self.qubits
        return (d - 1) * (1 - self.fit.decay) / d

    @property
    def error_per_clifford_error(self) -> float:
        d = 2 ** self.qubits
        return (d - 1) * self.fit.decay_error / d

    @property
    def subspace_error_per_clifford(self) -> float | None:
        """``(d - 1)(1 - p_s)/d`` of the decay inside the qubit levels (None: no leakage)."""
        if self.subspace_fit is None:
            return None
        d = 2 ** self.qubits
        return (d - 1) * (1 - self.subspace_fit.decay) / d

    def figures(self) -> dict:
        """A JSON-ready dictionary of every figure (plain floats, ints, lists)."""
        fit = self.fit
        out = {"qubits": self.qubits, "method": self.method,
               "sequences_per_length": self.sequences, "seed": self.seed,
               "lengths": list(self.lengths), "survival": list(self.survival),
               "survival_error": list(self.survival_error), "leaked": list(self.leaked),
               "fit": {"A": fit.amplitude, "B": fit.offset, "p": fit.decay,
                       "p_error": fit.decay_error, "B_error": fit.offset_error,
                       "residual_rms": fit.residual_rms},
               "error_per_clifford": self.error_per_clifford,
               "error_per_clifford_error": self.error_per_clifford_error,
               "leakage": None, "compilation": {k: v for k, v in self.compilation.items()
                                                if k != "sequences"},
               "cost": self.cost, "seconds": self.seconds}
        if self.leakage is not None:
            lk = self.leakage
            out["leakage"] = {"leakage_per_clifford": lk.leakage_rate,
                              "leakage_per_clifford_error": lk.leakage_rate_error,
                              "seepage_per_clifford": lk.seepage_rate,
                              "seepage_per_clifford_error": lk.seepage_rate_error,
                              "steady_state_leaked": lk.steady_state_leaked,
                              "subspace_p": self.subspace_fit.decay,
                              "subspace_p_error": self.subspace_fit.decay_error,
                              "subspace_error_per_clifford":
                                  self.subspace_error_per_clifford}
        return out


def clifford_maps(maps: QubitMaps, compilation: Compilation) -> np.ndarray:
    """The noisy superoperator of each compiled Clifford, ``(24, d^2, d^2)``."""
    return np.array([maps.play(seq) for seq in compilation.sequences])


def _readout(levels: int) -> np.ndarray:
    """Rows picking ``<0|rho|0>`` and ``sum_{i<2} <i|rho|i>`` from column-stacked rho."""
    rows = np.zeros((2, levels * levels))
    rows[0, 0] = 1
    rows[1, [0, levels + 1]] = 1
    return rows


def _exact(cmaps: np.ndarray, lengths: Sequence[int], levels: int,
           interleaved: np.ndarray | None, gate_element: int) -> np.ndarray:
    """Exact mean (survival, subspace population) per length via the transfer operator."""
    group = single_qubit_cliffords()
    n, dd = len(group.unitaries), levels * levels
    # T[g, h] = S_c / n with c g-from-h: c = g h^-1
    c = group.product[:, group.inverse]
    t = cmaps[c].transpose(0, 2, 1, 3).reshape(n * dd, n * dd) / n
    if interleaved is not None:  # then the gate: element g -> G g, state -> S_G state
        rows = group.product[group.inverse[gate_element]]  # block g' takes block G^-1 g'
        blocks = t.reshape(n, dd, n * dd)[rows]
        t = np.einsum("ab,gbk->gak", interleaved, blocks).reshape(n * dd, n * dd)
    read = np.einsum("rb,gbc->rgc", _readout(levels), cmaps[group.inverse]).reshape(2, -1)
    x = np.zeros(n * dd, complex)
    x[0] = 1.0  # |0><0| in block of the identity
    out, done = {}, 0
    for m in sorted(set(lengths)):
        for _ in range(m - done):
            # NumPy's own loop, not BLAS: one threaded matrix-vector product per step sat
            # 2-20 ms waking BLAS threads on a loaded 2-core machine (measured)
            x = np.einsum("ij,j->i", t, x)
        done = m
        out[m] = np.real(read @ x)
    return np.array([out[m] for m in lengths])


def _sampled(cmaps: np.ndarray, lengths: Sequence[int], levels: int, sequences: int,
             rng: np.random.Generator, interleaved: np.ndarray | None,
             gate_element: int) -> tuple[np.ndarray, np.ndarray]:
    """Mean and standard error of (survival, subspace population) over random sequences."""
    group = single_qubit_cliffords()
    read = _readout(levels)
    means, errors = [], []
    for m in lengths:
        draws = rng.integers(0, len(group.unitaries), size=(sequences, m))
        state = np.zeros((sequences, levels * levels), complex)
        state[:, 0] = 1.0
        g = np.zeros(sequences, int)
        for j in range(m):
            state = np.einsum("kab,kb->ka", cmaps[draws[:, j]], state)
            g = group.product[draws[:, j], g]
            if interleaved is not None:
                state = np.einsum("ab,kb->ka", interleaved, state)
                g = group.product[gate_element, g]
        state = np.einsum("kab,kb->ka", cmaps[group.inverse[g]], state)
        values = np.real(state @ read.T)
        means.append(values.mean(axis=0))
        errors.append(values.std(axis=0, ddof=1) / np.sqrt(sequences))
    return np.array(means), np.array(errors)


def check_run(lengths, method: str, sequences: int) -> tuple[int, ...]:
    """The lengths as a tuple, after checking them, the method and the sequence count."""
    lengths = tuple(int(m) for m in lengths)
    if not lengths or min(lengths) < 1 or len(set(lengths)) < 3:
        raise InputError(f"give at least 3 different sequence lengths >= 1, got {lengths}")
    if method not in ("exact", "sampled"):
        raise InputError(f"method must be 'exact' or 'sampled', got {method!r}")
    if method == "sampled" and sequences < 2:
        raise InputError(f"sampled RB needs at least 2 sequences per length, got {sequences}")
    return lengths


def decay_result(qubits, method, lengths, means, errors, sequences, seed, summary, *,
                 cost=None, started=None) -> Benchmark:
    """Fit the survival, the leakage curve and the decay inside the qubit into a result.

    ``means`` and ``errors`` are ``(n, 2)``: survival and subspace population per length.
    """
    sigma = None if method == "exact" else errors
    d = 2 ** qubits
    fit = fit_decay(lengths, means[:, 0], None if sigma is None else sigma[:, 0])
    leakage = fit_leakage(lengths, means[:, 1], None if sigma is None else sigma[:, 1])
    subspace = None
    if leakage is not None:
        traceless = means[:, 0] - means[:, 1] / d
        spread = None
        if sigma is not None:  # survival and subspace of one sequence are correlated
            spread = np.abs(sigma[:, 0]) + np.abs(sigma[:, 1]) / d
        subspace = fit_decay(lengths, traceless, spread)
    return Benchmark(qubits, method, tuple(lengths), tuple(map(float, means[:, 0])),
                     tuple(map(float, errors[:, 0])), tuple(map(float, 1 - means[:, 1])),
                     sequences if method == "sampled" else 0,
                     seed if method == "sampled" else None, fit, leakage, subspace,
                     summary, cost, 0.0 if started is None else time.perf_counter() - started)


def predict_rb(maps: QubitMaps, *, compilation: Compilation | None = None,
               lengths: Sequence[int] = DEFAULT_LENGTHS, method: str = "exact",
               sequences: int = 50, seed: int = 0) -> Benchmark:
    """Predicted single-qubit RB of a gate set.

    Args:
        maps: the gate set's noisy maps (:func:`shaper.physics.gate_maps.qubit_maps`).
        compilation: how Cliffords are played; default the shortest from ``maps``' gates
            with virtual Z (:func:`shaper.physics.clifford.compile_cliffords`).
        lengths: sequence lengths m (Cliffords before the recovery), at least 3 different.
        method: ``"exact"`` (every sequence, the default) or ``"sampled"``.
        sequences: random sequences per length (sampled only).
        seed: of the random sequences (sampled only).

    Returns:
        The :class:`Benchmark`.

    Raises:
        InputError: bad lengths, method or sequences, or a compilation playing a gate the
            maps lack.

    References:
        E. Magesan, J. M. Gambetta and J. Emerson, Phys. Rev. Lett. 106, 180504 (2011);
        C. J. Wood and J. M. Gambetta, Phys. Rev. A 97, 032306 (2018).
    """
    started = time.perf_counter()
    lengths = check_run(lengths, method, sequences)
    compilation = compilation or compile_cliffords(maps.gates)
    cmaps = clifford_maps(maps, compilation)
    means, errors = average(cmaps, lengths, maps.levels, method, sequences, seed, None, 0)
    return decay_result(1, method, lengths, means, errors, sequences, seed,
                        compilation.summary(), started=started)


def average(cmaps, lengths, levels, method, sequences, seed, interleaved, element):
    """Mean and standard error of (survival, subspace population) per length, ``(n, 2)``
    each: the exact average or seeded random sequences; ``interleaved`` (a superoperator)
    is played after every Clifford, ``element`` its Clifford index."""
    if method == "exact":
        means = _exact(cmaps, lengths, levels, interleaved, element)
        return means, np.zeros_like(means)
    return _sampled(cmaps, lengths, levels, sequences, np.random.default_rng(seed),
                    interleaved, element)
