"""A coupled system written in its dressed basis (README, "Coupled transmons: the dressed
basis").

The exchange coupling of neighbouring transmons mixes their bare states: the state a lab
prepares, calibrates and reads out as "q0 in 1, q1 in 0" is the eigenstate of the static
Hamiltonian that the bare state ``|10>`` becomes, not ``|10>`` itself. Judged in the bare
basis, even doing nothing looks like an error of order ``(g / detuning)^2`` (the bare
states swap a little at rest). In the dressed basis the drift is diagonal: idling is pure
phase, which virtual Z tracks on each qubit, except the conditional phase of the static ZZ.

:func:`dressed` turns every operator of a :class:`~shaper.physics.systems.System` (drift,
controls, number operators, collapse operators, and the lab-frame model) by the same
unitary ``V``, the eigenvectors of the drift. The drift conserves the total excitation
number ``N`` (the rotating-wave exchange does), so ``V`` is found block by block of ``N``
and commutes with it: the lab frame's harmonics keep their meaning (each operator's
``k``-th harmonic turns into the turned operator's ``k``-th harmonic).
"""

from __future__ import annotations

import dataclasses

import numpy as np

from shaper.errors import InputError


def dressing(drift: np.ndarray, excitations: np.ndarray,
             computational: np.ndarray | None = None) -> np.ndarray:
    """The unitary ``V`` whose column ``j`` is the eigenvector of ``drift`` that the bare
    state ``j`` becomes, phased so that ``V[j, j] > 0``; block-diagonal in the excitation
    number ``excitations`` (whole numbers per state). Within a block, bare states and
    eigenvectors are paired one to one for the largest total overlap (scipy's
    ``linear_sum_assignment``), so that high, nearly degenerate levels never claim one
    eigenvector twice.

    Raises:
        InputError: a ``computational`` state (default: every state) keeps half or less
            of itself in its eigenvector (a resonance: hybridised, no bare label fits).
    """
    from scipy.optimize import linear_sum_assignment

    d = drift.shape[0]
    n = np.rint(np.asarray(excitations, float)).astype(int)
    outside = np.abs(drift[n[:, None] != n[None, :]])
    if outside.size and outside.max() > 1e-9 * max(np.abs(drift).max(), 1.0):
        raise InputError("the drift couples states of different excitation number; the "
                         "dressed basis needs an excitation-conserving drift")
    must = set(range(d) if computational is None else np.asarray(computational).tolist())
    v = np.zeros((d, d), complex)
    for level in np.unique(n):
        states = np.flatnonzero(n == level)
        _, vectors = np.linalg.eigh(drift[np.ix_(states, states)])
        overlap = np.abs(vectors) ** 2  # [bare, eigenvector]
        bare, columns = linear_sum_assignment(-overlap)
        for b, column in zip(bare, columns, strict=True):
            if states[b] in must and overlap[b, column] <= 0.5 + 1e-6:
                raise InputError("two bare states become one dressed state (a resonance at "
                                 "rest): the dressed basis has no labels here")
            vector = vectors[:, column]
            v[states, states[b]] = vector * np.exp(-1j * np.angle(vector[b]))
    return v


def dressed(system):
    """``system`` with every operator written in its dressed basis (module docstring).
    Labels, channels and computational indices stay: the computational states are now the
    dressed states of the bare computational ones.

    Raises:
        InputError: a resonance at rest (:func:`dressing`).
    """
    excitations = (system.lab.excitations if system.lab is not None
                   else np.real(np.diag(sum(system.number_operators))))
    v = dressing(system.drift, excitations, system.computational)
    vh = v.conj().T
    turn = lambda m: vh @ m @ v  # noqa: E731
    lab = system.lab
    if lab is not None:
        lab = dataclasses.replace(lab, static=turn(lab.static),
                                  drives={k: turn(m) for k, m in lab.drives.items()})
    drift = turn(system.drift)
    return dataclasses.replace(
        system, drift=0.5 * (drift + drift.conj().T),
        controls=np.array([turn(c) for c in system.controls]),
        number_operators=np.array([turn(m) for m in system.number_operators]),
        collapse=tuple(turn(c) for c in system.collapse), lab=lab)
