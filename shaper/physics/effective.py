"""The lab frame's counter-rotating terms to second order, at the rotating frame's cost.

In the frame of the System (README, "The lab frame") the lab Hamiltonian is the
rotating-wave Hamiltonian ``H_0(t)`` plus terms that turn at whole multiples of the frame
frequency ``f``:

    H(t) = H_0(t) + sum_{m >= 1} [V_m(t) exp(i m theta) + V_m(t)^dag exp(-i m theta)],
    theta = 2 pi f t + phi,

    V_m = S^(m) + sum_c (w_c X_c^(m+1) + conj(w_c) X_c^(m-1)) / 2

with ``S^(k)``, ``X_c^(k)`` the parts of the static Hamiltonian and of drive ``c``'s
operator that raise the excitation number by ``k`` (:meth:`LabModel.harmonics`) and ``w_c
= I_c + i Q_c`` the channel's drive-frame envelope. A time-dependent change of frame
``exp(-i K(t))`` removes the turning terms to first order (a Schrieffer-Wolff
transformation in time, the high-frequency expansion of periodically driven systems:
A. Eckardt and E. Anisimovas, New J. Phys. 17, 093039 (2015), from memory): in the
eigenbasis of the static rotating drift (energies ``E_a``, Hz)

    (K_m)_ab = -i (V_m)_ab / (m f + E_a - E_b),   K(t) = sum_m K_m exp(i m theta) + h.c.,

and what is left is a slowly varying effective Hamiltonian, independent of ``phi``,

    H_eff = H_0 + 1/2 sum_{m != 0} sum_c (V_m)_ac (V_-m)_cb [1/(m f + E_a - E_c)
                                                             + 1/(m f + E_b - E_c)]

(for one two-level transition driven at Rabi frequency ``Omega`` it is the Bloch-Siegert
shift ``Omega^2 / (4 f)``). The lab propagator is then ``exp(-i K(T)) U_eff exp(i K(0))``:
the carrier phase enters only through the two kicks. Neglected: terms of third order in
``V / f`` and the envelope's rate of change over ``f^2`` (an instrument's output filter
keeps it small); :func:`shaper.jobs.playback.Playback` measures the difference against the
exact lab frame for every file it judges.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

RESONANCE_HZ = 1e6  # a denominator below this is a multi-photon resonance: not corrected
NEGLIGIBLE_HZ = 1.0  # a harmonic whose second-order term is below this is left out...
NEGLIGIBLE_KICK = 1e-6  # ...if its kick is also below this (radians): 1e-12 of a figure


@dataclass(frozen=True)
class Correction:
    """The arrays of the second-order correction of one System, built once per recipe.

    Shapes: ``h`` harmonics (their orders ``m`` in ``orders``), ``c`` I/Q channels, ``d``
    levels. Every operator is written in the eigenbasis of the static rotating drift
    (``basis``: its columns).

    Attributes:
        frame_hz: the frame frequency ``f``.
        orders: ``(h,)`` the harmonics kept: those whose second-order term or kick is not
            negligible at the drives' limit (:data:`NEGLIGIBLE_HZ`, :data:`NEGLIGIBLE_KICK`).
        basis: ``(d, d)`` eigenvectors of the System's drift.
        static: ``(h, d, d)`` ``S^(m)``.
        raise_: ``(c, h, d, d)`` ``X_c^(m+1) / 2`` (multiplies ``w_c``).
        lower: ``(c, h, d, d)`` ``X_c^(m-1) / 2`` (multiplies ``conj(w_c)``).
        plus, minus: ``(h, d, d)`` ``1 / (m f + E_a - E_c)`` and ``1 / (-m f + E_a - E_c)``.
        iq_columns: ``(c, 2)`` the System's control columns of each I/Q channel.
    """

    frame_hz: float
    orders: np.ndarray
    basis: np.ndarray
    static: np.ndarray
    raise_: np.ndarray
    lower: np.ndarray
    plus: np.ndarray
    minus: np.ndarray
    iq_columns: np.ndarray


def correction_for(system, drive_hz: float = 1e9) -> Correction:
    """The :class:`Correction` of a System with a lab model; ``drive_hz``: the largest
    envelope any channel plays (a harmonic is kept if it matters at that drive).

    Raises:
        ValueError: no lab model, or a counter-rotating process is resonant (a
            denominator below :data:`RESONANCE_HZ`): use the exact lab frame.
    """
    lab = system.lab
    if lab is None:
        raise ValueError("this system has no lab-frame model")
    energies, basis = np.linalg.eigh(system.drift)
    turn = lambda x: basis.conj().T @ x @ basis  # noqa: E731
    static = {k: turn(x) for k, x in lab.harmonics(lab.static).items()}
    channels = [c for c in system.channels if c.kind == "iq"]
    drives = [{k: turn(x) for k, x in lab.harmonics(lab.drives[c.name]).items()}
              for c in channels]
    top = max([k for k in static] + [k + 1 for dr in drives for k in dr] + [1])
    d = system.dimension
    zero = np.zeros((d, d), complex)

    def size(m: int) -> float:  # the largest entry V_m can reach
        return float(np.abs(static.get(m, zero)).max()) + drive_hz * sum(
            0.5 * (np.abs(dr.get(m + 1, zero)).max() + np.abs(dr.get(m - 1, zero)).max())
            for dr in drives)
    harmonics = [m for m in range(1, top + 1)
                 if size(m) ** 2 / (m * lab.frame_hz) >= NEGLIGIBLE_HZ
                 or size(m) / (m * lab.frame_hz) >= NEGLIGIBLE_KICK] or [1]
    h = len(harmonics)
    s = np.array([static.get(m, zero) for m in harmonics])
    up = np.array([[0.5 * dr.get(m + 1, zero) for m in harmonics] for dr in drives]) \
        .reshape(len(drives), h, d, d)
    down = np.array([[0.5 * dr.get(m - 1, zero) for m in harmonics] for dr in drives]) \
        .reshape(len(drives), h, d, d)
    gaps = energies[:, None] - energies[None, :]
    m = np.array(harmonics, float)[:, None, None] * lab.frame_hz
    smallest = float(np.min(np.abs(np.concatenate([m + gaps, -m + gaps]))))
    if smallest < RESONANCE_HZ:
        raise ValueError(f"a counter-rotating process is resonant ({smallest:.3g} Hz from a "
                         f"multiple of the frame): the correction does not hold")
    return Correction(frame_hz=lab.frame_hz, orders=np.array(harmonics, float), basis=basis,
                      static=s, raise_=up, lower=down,
                      plus=1.0 / (m + gaps), minus=1.0 / (-m + gaps),
                      iq_columns=np.array([c.columns for c in channels], int).reshape(-1, 2))


def _xp(x):
    if isinstance(x, np.ndarray):
        return np
    import jax.numpy as jnp
    return jnp


def turning(corr: Correction, values):
    """``V_m`` of every slice, ``(n, h, d, d)``, in the drift's eigenbasis, from the System's
    control values ``(n, k)`` (Hz, drive frame; NumPy or JAX)."""
    xp = _xp(values)
    w = values[:, corr.iq_columns[:, 0]] + 1j * values[:, corr.iq_columns[:, 1]]  # (n, c)
    out = xp.einsum("nc,chij->nhij", w, corr.raise_) \
        + xp.einsum("nc,chij->nhij", xp.conj(w), corr.lower)
    return out + corr.static[None]


def effective_term(corr: Correction, values):
    """The second-order correction ``H_eff - H_0`` of every slice, ``(n, d, d)`` Hz, in the
    System's basis (NumPy or JAX): add it to each slice's Hamiltonian."""
    xp = _xp(values)
    v = turning(corr, values)
    vh = xp.conj(xp.swapaxes(v, -1, -2))
    plus, minus = corr.plus[None], corr.minus[None]
    swap = lambda x: xp.swapaxes(x, -1, -2)  # noqa: E731
    # sum_c V_ac V^dag_cb [D+_ac + D+_bc] for m > 0, and V^dag_ac V_cb [D-_ac + D-_bc]
    part = (v * plus) @ vh + v @ (vh * swap(plus)) + (vh * minus) @ v + vh @ (v * swap(minus))
    term = 0.5 * part.sum(axis=1)
    b = corr.basis
    return b @ term @ b.conj().T


def kick(corr: Correction, values, theta):
    """``K`` at one time, ``(d, d)`` in the System's basis: ``values`` ``(k,)`` the control
    values there, ``theta`` the frame's phase ``2 pi f t + phi`` (radians)."""
    xp = _xp(values)
    v = turning(corr, values[None])[0]  # (h, d, d)
    k_m = -1j * v * corr.plus  # (K_m)_ab = -i V_ab / (m f + E_a - E_b)
    k = xp.einsum("h,hij->ij", xp.exp(1j * corr.orders * theta), k_m)
    k = k + xp.conj(k.T)
    b = corr.basis
    return b @ k @ b.conj().T
