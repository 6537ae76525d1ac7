"""The drive without the rotating-wave approximation (README, "The lab frame").

A transmon model's :class:`~shaper.physics.systems.System` is the rotating-wave
approximation of a lab-frame Hamiltonian that its :class:`LabModel` keeps whole:

    H_lab/h = H_static + sum_c eps_c(t) D_c,   eps_c = Re[w_c(t) exp(-2 pi i f t)]

with ``w_c = I_c + i Q_c`` the channel's envelope in the drive frame (Hz, after IF,
mixer, hold and line: :meth:`shaper.signal.chain.Chain.envelope_at`), ``f`` the frame
frequency and ``D_c`` the physical drive operator (``a + a^dag`` for a Duffing
transmon, ``n / n_01`` for a charge-model one). In the frame ``R = exp(2 pi i f N t)``
(``N`` the total excitation number) every operator ``X`` splits into harmonics
``X^(k)`` (the entries with ``N_i - N_j = k``) that turn as ``exp(2 pi i k f t)``:

    H_frame = [H_static^(0) - f N] + sum_{k>0} [cos(k theta) P_k + sin(k theta) M_k]
              + sum_c eps_c(t) [D_c^(0) + sum_{k>0} (cos(k theta) P_ck + sin(k theta) M_ck)]

with ``theta = 2 pi f (t + t0)``, ``P_k = X^(k) + X^(k)dag`` and ``M_k = i (X^(k) -
X^(k)dag)``. The first bracket is the System's drift; the co-rotating half of
``eps_c (P_c1, M_c1)`` is its I/Q drive; everything else (terms at ``2f``, ``3f``, ... and
the coupling's ``a b + a^dag b^dag``) is what the rotating-wave approximation drops.
``t0`` is the frame's time at the pulse start: ``phi = 2 pi f t0`` is the carrier phase
a waveform file does not fix. Every term is a fixed operator times a real coefficient,
so the existing propagator (and its exact derivative) runs it unchanged.

The time integration is the fourth-order commutator-free Magnus method of S. Blanes and
P. C. Moan, Appl. Numer. Math. 56, 1519 (2006) (cited from memory): on each sub-step
of length ``h`` two exponentials, of ``(a2 H(t1) + a1 H(t2)) h`` then ``(a1 H(t1) + a2
H(t2)) h``, at the Gauss nodes ``t1, t2 = h (1/2 -+ sqrt(3)/6)``, ``a1, a2 = (3 -+ 2
sqrt(3)) / 12``. Each is a piecewise-constant slice of length ``h / 2``. Sub-steps never
straddle a held sample's edge, where the envelope jumps.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

SQRT3 = math.sqrt(3.0)
NODES = np.array([0.5 - SQRT3 / 6, 0.5 + SQRT3 / 6])  # Gauss nodes in a sub-step
A1, A2 = (3 - 2 * SQRT3) / 12, (3 + 2 * SQRT3) / 12
# first slice weights (a2, a1), second (a1, a2); a slice of h/2 carries twice the weights
SLICE_WEIGHTS = 2 * np.array([[A2, A1], [A1, A2]])
POINTS_PER_CYCLE = 8  # sub-steps per period of the fastest term (see steps_per_cell)


@dataclass(frozen=True)
class LabModel:
    """What the rotating-frame System approximates.

    Attributes:
        frame_hz: the frame frequency ``f`` (Hz) the System's drift is written in.
        excitations: ``(d,)`` the diagonal of ``N``, the frame's generator (whole numbers).
        static: ``(d, d)`` the static lab Hamiltonian (Hz), frame not applied.
        drives: I/Q channel name -> ``(d, d)`` physical drive operator ``D_c``.
    """

    frame_hz: float
    excitations: np.ndarray
    static: np.ndarray
    drives: dict

    def harmonics(self, operator: np.ndarray) -> dict[int, np.ndarray]:
        """``k -> X^(k)`` for k >= 0 (the entries with ``N_i - N_j = k``), non-zero ones."""
        n = self.excitations
        scale = max(float(np.abs(operator).max(initial=0.0)), 1e-300)
        rows, cols = np.nonzero(np.abs(operator) > 1e-15 * scale)
        diff = np.rint(n[rows] - n[cols]).astype(int)
        out = {}
        for k in np.unique(diff[diff >= 0]):
            pick = diff == k
            part = np.zeros_like(operator)
            part[rows[pick], cols[pick]] = operator[rows[pick], cols[pick]]
            out[int(k)] = part
        return out

    def rotating_drift(self) -> np.ndarray:
        """``H_static^(0) - f N``: the drift the System keeps (a test compares the two)."""
        n = self.excitations
        same = np.abs(n[:, None] - n[None, :]) < 0.5
        return np.where(same, self.static, 0) - self.frame_hz * np.diag(n).astype(complex)


@dataclass(frozen=True)
class LabTerms:
    """The frame Hamiltonian's operators and how each one's coefficient is made.

    ``operators`` ``(K, d, d)``; ``source[j]``: -1 for a static term, the I/Q channel's
    index (in ``channels`` order) for a drive term, or ``-2 - column`` for a baseband
    control column passed through; ``harmonic[j]``: k; ``quadrature[j]``: 0 for
    ``cos``/``P`` (or the k = 0 part), 1 for ``sin``/``M``.
    """

    operators: np.ndarray
    source: np.ndarray
    harmonic: np.ndarray
    quadrature: np.ndarray
    channels: tuple[str, ...]
    iq_columns: np.ndarray  # (p, 2) the System's control columns of each I/Q channel
    frame_hz: float

    def fastest_hz(self, envelope_hz: float = 0.0) -> float:
        """The highest frequency a coefficient turns at: ``k f`` of a static term, ``(k + 1)
        f`` of a drive term (its carrier) plus ``envelope_hz``, how fast the drive-frame
        envelope itself turns (an IF, a carrier offset)."""
        static = self.harmonic[self.source == -1]
        drive = self.harmonic[self.source >= 0]
        return max(self.frame_hz * int(static.max(initial=0)),
                   self.frame_hz * (int(drive.max(initial=-1)) + 1) + abs(envelope_hz)
                   if drive.size else 0.0)


def _split(x: np.ndarray, k: int) -> list[tuple[np.ndarray, int]]:
    if k == 0:
        return [(0.5 * (x + x.conj().T), 0)]
    return [(x + x.conj().T, 0), (1j * (x - x.conj().T), 1)]


def lab_terms(system) -> LabTerms:
    """The frame Hamiltonian of ``system``'s lab model, term by term.

    Raises:
        ValueError: the system has no lab model (matrices given by the user).
    """
    lab: LabModel | None = system.lab
    if lab is None:
        raise ValueError("this system has no lab-frame model")
    ops, source, harmonic, quad = [], [], [], []
    for k, part in lab.harmonics(lab.static).items():
        if k == 0:
            continue
        for op, q in _split(part, k):
            ops.append(op)
            source.append(-1)
            harmonic.append(k)
            quad.append(q)
    names, columns = [], []
    for c in system.channels:
        if c.kind != "iq":
            continue
        index = len(names)
        names.append(c.name)
        columns.append(c.columns)
        for k, part in lab.harmonics(lab.drives[c.name]).items():
            for op, q in _split(part, k):
                ops.append(op)
                source.append(index)
                harmonic.append(k)
                quad.append(q)
    for c in system.channels:
        if c.kind == "baseband":
            ops.append(system.controls[c.columns[0]])
            source.append(-2 - c.columns[0])
            harmonic.append(0)
            quad.append(0)
    return LabTerms(operators=np.array(ops), source=np.array(source, int),
                    harmonic=np.array(harmonic, int), quadrature=np.array(quad, int),
                    channels=tuple(names), iq_columns=np.array(columns, int).reshape(-1, 2),
                    frame_hz=lab.frame_hz)


def _numpy_of(x):
    """NumPy for host arrays, jax.numpy for traced ones (the optimiser's lab drive)."""
    if isinstance(x, np.ndarray):
        return np
    import jax.numpy as jnp
    return jnp


def coefficients(terms: LabTerms, envelope, times: np.ndarray, phase_rad):
    """Every term's coefficient at ``times`` (NumPy or JAX ``envelope`` and phase in, the
    same out: the verdict and the optimiser's :mod:`shaper.signal.labdrive` share it).

    Args:
        envelope: ``(m, k)`` the System's control values (Hz, drive frame) at ``times``.
        times: ``(m,)`` seconds from the pulse start.
        phase_rad: ``phi = 2 pi f t0``, the frame's phase at the pulse start.

    Returns:
        ``(m, K)`` real, Hz (static terms: the cos/sin factor alone).
    """
    xp = _numpy_of(envelope)
    theta = 2 * np.pi * terms.frame_hz * times + phase_rad
    # eps = Re[(I + iQ) exp(-i theta)] = I cos(theta) + Q sin(theta)
    cos, sin = xp.cos(theta), xp.sin(theta)
    eps = [envelope[:, i] * cos + envelope[:, q] * sin for i, q in terms.iq_columns]
    columns = []
    for s, k, q in zip(terms.source, terms.harmonic, terms.quadrature, strict=True):
        factor = (xp.cos if q == 0 else xp.sin)(k * theta) if k else xp.ones_like(theta)
        if s == -1:
            columns.append(factor)
        elif s >= 0:
            columns.append(eps[s] * factor)
        else:
            columns.append(envelope[:, -2 - s])
    return xp.stack(columns, axis=1)


def steps_per_cell(terms: LabTerms, cell_s: float, envelope_hz: float = 0.0,
                   points: int = POINTS_PER_CYCLE) -> int:
    """Sub-steps per held cell so that the fastest term turns by at most 1/points of a
    cycle per sub-step."""
    return max(1, math.ceil(terms.fastest_hz(envelope_hz) * cell_s * points))


def node_times(cells: int, cell_s: float, steps: int) -> np.ndarray:
    """``(cells * steps * 2,)`` the Gauss nodes of every sub-step, in time order."""
    h = cell_s / steps
    starts = np.arange(cells * steps) * h
    return (starts[:, None] + NODES[None, :] * h).reshape(-1)


def slice_samples(coefficient):
    """Node coefficients ``(2 s, K)`` -> the two half-step slices of every sub-step
    ``(2 s, K)``: the Magnus combination of the module docstring (NumPy or JAX)."""
    xp = _numpy_of(coefficient)
    pairs = coefficient.reshape(-1, 2, coefficient.shape[1])
    return xp.einsum("ab,sbk->sak", SLICE_WEIGHTS, pairs).reshape(coefficient.shape)
