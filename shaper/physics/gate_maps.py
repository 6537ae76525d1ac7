"""Noisy gate maps for benchmarking: unitaries or superoperators, frame updates, figures.

A gate's map acts on all ``d`` levels of a transmon (levels 0 and 1 the qubit, the rest
leakage; README, "Conventions"), or on ``d_a d_b`` levels of a pair (q0 most significant).
It is given either as a ``(d, d)`` unitary or as a ``(d^2, d^2)`` superoperator in the
column-stacking convention ``vec(A X B) = (B^T kron A) vec(X)`` of
:mod:`shaper.physics.lindblad`; inside, every map is a superoperator.

Virtual Z (a frame update) is exact: ``Z(theta) = exp(i theta N) = diag(1, e^{i theta},
e^{2 i theta}, ...)``, a phase ``n theta`` on level n. On levels 0 and 1 this is the README's
``Z(phi) = diag(1, e^{i phi})``, ``exp(-i theta sigma_z / 2)`` up to a global phase. It is
what shifting the phase of every later drive does on every level of a transmon: the drift
commutes with N and ``exp(i theta N) a exp(-i theta N) = exp(-i theta) a`` (McKay et al.,
Phys. Rev. A 96, 022330 (2017); README, "Gate sets").
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike

from shaper.errors import InputError
from shaper.physics.clifford import IDLE, ROTATIONS, VIRTUAL_Z

UNITARITY_TOLERANCE = 1e-8  # max |U^dag U - 1| of a map given as a unitary
TRACE_TOLERANCE = 1e-6      # max |vec(1)^dag S - vec(1)^dag| of a superoperator


def frame_unitary(angle_rad: float, levels: int) -> np.ndarray:
    """``exp(i angle N)`` on ``levels`` levels: the exact virtual Z of a transmon.

    Examples:
        >>> np.round(frame_unitary(np.pi / 2, 3).diagonal(), 12)
        array([ 1.+0.j,  0.+1.j, -1.+0.j])
    """
    return np.diag(np.exp(1j * angle_rad * np.arange(levels)))


def superoperator(u: ArrayLike) -> np.ndarray:
    """``conj(U) kron U``: ``rho -> U rho U^dag`` on column-stacked ``rho``."""
    u = np.asarray(u, complex)
    return np.kron(u.conj(), u)


def as_superoperator(m: ArrayLike, levels: int, name: str) -> np.ndarray:
    """A gate's map as a checked ``(d^2, d^2)`` superoperator.

    Args:
        m: a ``(d, d)`` unitary or a ``(d^2, d^2)`` trace-preserving superoperator.
        levels: d, the levels the map acts on.
        name: the gate's name, for messages.

    Raises:
        InputError: another shape, non-finite entries, a ``(d, d)`` matrix that is not
            unitary, or a superoperator that does not preserve the trace.
    """
    m = np.asarray(m)
    d = int(levels)
    if not np.issubdtype(m.dtype, np.number) or not np.all(np.isfinite(m)):
        raise InputError(f"the map of {name!r} must be finite numbers")
    if m.shape == (d, d):
        error = float(np.max(np.abs(m.conj().T @ m - np.eye(d))))
        if error > UNITARITY_TOLERANCE:
            raise InputError(f"the map of {name!r} is a {d}x{d} matrix but not unitary "
                             f"(max |U^dag U - 1| = {error:.3g}); give a {d * d}x{d * d} "
                             f"superoperator for a map that is not unitary")
        return superoperator(m)
    if m.shape == (d * d, d * d):
        s = m.astype(complex)
        trace_row = np.eye(d).reshape(-1)  # vec(1) is symmetric: column order does not matter
        error = float(np.max(np.abs(trace_row @ s - trace_row)))
        if error > TRACE_TOLERANCE:
            raise InputError(f"the superoperator of {name!r} does not preserve the trace "
                             f"on its {d} levels (deviation {error:.3g}); keep every level "
                             f"the map can reach")
        return s
    raise InputError(f"the map of {name!r} must be a {d}x{d} unitary or a {d * d}x{d * d} "
                     f"superoperator (column-stacking), got shape {m.shape}")


@dataclass(frozen=True)
class QubitMaps:
    """The noisy physical gates of one transmon, as superoperators on its levels."""

    levels: int                         # d >= 2: levels 0 and 1 the qubit
    gates: Mapping[str, np.ndarray]     # physical gate name -> (d^2, d^2) superoperator
    idle: np.ndarray = field(repr=False)  # (d^2, d^2): one idle slot (identity if not given)

    def op(self, name: str) -> np.ndarray:
        """The superoperator of one compiled operation (gate, virtual Z or idle slot)."""
        if name in VIRTUAL_Z:
            return superoperator(frame_unitary(VIRTUAL_Z[name], self.levels))
        if name == IDLE:
            return self.idle
        if name not in self.gates:
            raise InputError(f"the compilation plays {name!r}, which the gate maps lack "
                             f"(they have {', '.join(self.gates)})")
        return self.gates[name]

    def play(self, ops: Sequence[str], slots: int | None = None) -> np.ndarray:
        """The superoperator of ``ops`` played in order, padded with idle slots to ``slots``."""
        s = np.eye(self.levels ** 2, dtype=complex)
        for name in ops:
            s = self.op(name) @ s
        used = sum(op in ROTATIONS or op == IDLE for op in ops)
        for _ in range((slots or used) - used):
            s = self.idle @ s
        return s


def qubit_maps(gates: Mapping[str, ArrayLike], *, levels: int = 2,
               idle: ArrayLike | None = None) -> QubitMaps:
    """Check and collect one transmon's physical gate maps.

    Args:
        gates: physical gate name (``X``, ``X/2``, ...: see
            :data:`shaper.physics.clifford.ROTATIONS`) -> its ``(d, d)`` unitary or
            ``(d^2, d^2)`` superoperator on all d levels, as played.
        levels: d, at least 2.
        idle: the map of one idle slot (a gate's length of waiting); the identity if None.

    Raises:
        InputError: bad levels, an unknown gate name, or a bad map (:func:`as_superoperator`).
    """
    if int(levels) != levels or levels < 2:
        raise InputError(f"levels must be an integer >= 2 (levels 0 and 1 are the qubit), "
                         f"got {levels!r}")
    levels = int(levels)
    checked = {}
    for name, m in gates.items():
        key = str(name).strip().upper()
        if key not in ROTATIONS:
            raise InputError(f"unknown physical gate {name!r}; known: {', '.join(ROTATIONS)} "
                             f"(virtual Z needs no map)")
        checked[key] = as_superoperator(m, levels, key)
    if not checked:
        raise InputError("give at least one physical gate's map")
    idle_s = np.eye(levels ** 2, dtype=complex) if idle is None else \
        as_superoperator(idle, levels, "idle")
    return QubitMaps(levels, checked, idle_s)


def computational_indices(levels: Sequence[int]) -> np.ndarray:
    """Indices of the computational states (00, 01, ...) in a product of transmon levels."""
    idx = np.zeros(1, int)
    for d in levels:
        idx = (idx[:, None] * d + np.arange(2)[None, :]).reshape(-1)
    return idx


def channel_figures(s: ArrayLike, target: ArrayLike,
                    levels: Sequence[int]) -> tuple[float, float]:
    """Average gate infidelity and leakage of a map on the computational subspace.

    ``F = [Tr(S_U^dag S_c) + sum_i Tr_c E(|i><i|)] / (d (d + 1))`` with ``S_c`` the map's
    block on the subspace and ``S_U = conj(U) kron U`` (the form of
    :func:`shaper.physics.lindblad.channel_figures`); for a unitary map it is Pedersen's
    formula. The map as given: no frame update is optimised.

    Args:
        s: ``(D^2, D^2)`` superoperator, ``D = prod(levels)``.
        target: ``(d, d)`` ideal unitary on the subspace (any global phase).
        levels: levels of each transmon, q0 first.

    Returns:
        ``(1 - F, L)``, L the leakage ``1 - sum_i Tr_c E(|i><i|) / d``.

    References:
        L. H. Pedersen, N. M. Moller and K. Molmer, Phys. Lett. A 367, 47 (2007); C. J.
        Wood and J. M. Gambetta, Phys. Rev. A 97, 032306 (2018).
    """
    big = int(np.prod(levels))
    comp = computational_indices(levels)
    flat = (comp[:, None] + big * comp[None, :]).T.reshape(-1)  # vec order: column, row
    block = np.asarray(s)[np.ix_(flat, flat)]
    u = np.asarray(target, complex)
    d = u.shape[0]
    overlap = np.real(np.sum(superoperator(u).conj() * block))
    diag = np.arange(d) * (d + 1)
    kept = float(np.real(block[np.ix_(diag, diag)].sum()))
    return float(1 - (overlap + kept) / (d * (d + 1))), 1 - kept / d
