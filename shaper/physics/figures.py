"""Figures of merit of a propagator on the computational subspace (README, "Conventions").

All functions are pure JAX, differentiable, and take the projected propagator
``P = V^dag U V`` (``(d_c, d_c)``), which :func:`project` cuts out of ``U``.
"""

from __future__ import annotations

from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np
from jax.typing import ArrayLike

from shaper.physics import _jax  # noqa: F401


class Figures(NamedTuple):
    """What a gate scores. Angles are radians, one per qubit (see :func:`best_frame_angles`)."""

    fidelity: jax.Array      # () average gate fidelity, or state fidelity for a transfer
    leakage: jax.Array       # () population that left the computational subspace
    frame_before: jax.Array  # (q,) Z angles applied before the gate (zeros without virtual Z)
    frame_after: jax.Array   # (q,) Z angles applied after the gate


def project(u: ArrayLike, computational: ArrayLike) -> jax.Array:
    """``V^dag U V``: the block of ``u`` on the computational basis states."""
    idx = jnp.asarray(computational)
    return jnp.asarray(u)[..., idx[:, None], idx[None, :]]


def average_gate_fidelity(p: ArrayLike, target: ArrayLike) -> jax.Array:
    """``F = [Tr(M M^dag) + |Tr M|^2] / [d (d + 1)]`` with ``M = target^dag P``.

    References:
        L. H. Pedersen, N. M. Moller and K. Molmer, Phys. Lett. A 367, 47 (2007).

    Examples:
        >>> import numpy as np
        >>> float(average_gate_fidelity(np.eye(2), np.eye(2)))
        1.0
    """
    p = jnp.asarray(p)
    m = jnp.conj(jnp.asarray(target)).T @ p
    d = p.shape[-1]
    return (jnp.real(jnp.sum(jnp.abs(m) ** 2)) + jnp.abs(jnp.trace(m)) ** 2) / (d * (d + 1))


def leakage(p: ArrayLike) -> jax.Array:
    """``L = 1 - Tr(P P^dag) / d``: the mean population leaving the subspace.

    References:
        C. J. Wood and J. M. Gambetta, Phys. Rev. A 97, 032306 (2018).
    """
    p = jnp.asarray(p)
    return 1.0 - jnp.sum(jnp.abs(p) ** 2) / p.shape[-1]


def qubit_bits(qubits: int) -> np.ndarray:
    """``(2^q, q)`` bits of each computational state, q0 most significant."""
    states = np.arange(2 ** qubits)
    return np.array([(states >> (qubits - 1 - q)) & 1 for q in range(qubits)]).T.astype(float)


def _frame_phases(angles: jax.Array, bits: jax.Array) -> jax.Array:
    return jnp.exp(1j * (bits @ angles))


# fixed starting points of the angle search (radians); the best result wins
_STARTS = np.array([0.0, 0.5 * np.pi, np.pi, 1.5 * np.pi, 0.25 * np.pi, 1.25 * np.pi])


def best_frame_angles(p: ArrayLike, target: ArrayLike, qubits: int, *,
                      sweeps: int = 12, start: tuple | None = None) -> tuple[jax.Array, jax.Array]:
    """Z angles before and after the gate that maximise the fidelity to ``target``.

    The gate then counts as ``Z(after) P Z(before)`` with ``Z(phi) = diag(1, e^{i phi})``
    on each qubit: the control system applies these as virtual Z gates (frame updates),
    D. C. McKay et al., Phys. Rev. A 96, 022330 (2017). Only ``|Tr M|`` depends on the
    angles; each is set in turn to its exact optimum (coordinate ascent, monotone), from
    a few starts, or from ``start`` (``(before, after)`` of a nearby gate: a few sweeps
    then reach the optimum). The result carries no gradient: by the envelope theorem the
    gradient of the maximised fidelity is that at fixed optimal angles.

    Returns:
        ``(before, after)``, each ``(qubits,)`` radians in (-pi, pi].
    """
    p = jax.lax.stop_gradient(jnp.asarray(p))
    c = jnp.conj(jnp.asarray(target)) * p  # Tr(M) = sum_ij c_ij e^{i(a_i + b_j)}
    bits = jnp.asarray(qubit_bits(qubits))
    masks = jnp.concatenate([bits.T, bits.T], axis=0)  # coordinate -> which rows/cols carry it
    is_after = jnp.arange(2 * qubits) < qubits

    def terms(theta):
        return (c * _frame_phases(theta[:qubits], bits)[:, None]
                * _frame_phases(theta[qubits:], bits)[None, :])

    def update(i, theta):
        q = i % (2 * qubits)
        t = terms(theta)
        sel = jnp.where(is_after[q], masks[q][:, None] * jnp.ones_like(t.real),
                        masks[q][None, :] * jnp.ones_like(t.real))
        inside = jnp.sum(sel * t) * jnp.exp(-1j * theta[q])
        outside = jnp.sum((1 - sel) * t)
        best = jnp.angle(outside) - jnp.angle(inside)
        return theta.at[q].set(jnp.angle(jnp.exp(1j * best)))

    def run(theta):
        theta = jax.lax.fori_loop(0, sweeps * 2 * qubits, update, theta)
        return theta, jnp.abs(jnp.sum(terms(theta)))

    if start is not None:  # the optimum near a known one: one run, no canonical choice
        theta, _ = run(jax.lax.stop_gradient(jnp.concatenate([start[1], start[0]])))
        return theta[qubits:], theta[:qubits]
    thetas, values = jax.vmap(lambda s: run(jnp.full(2 * qubits, s)))(jnp.asarray(_STARTS))
    theta = thetas[jnp.argmax(values)]
    return canonical_angles(theta[qubits:], theta[:qubits],
                            lambda b, a: jnp.abs(jnp.sum(c * _frame_phases(a, bits)[:, None]
                                                         * _frame_phases(b, bits)[None, :])))


def canonical_angles(before: jax.Array, after: jax.Array,
                     overlap) -> tuple[jax.Array, jax.Array]:
    """One documented choice among equally good frame angles.

    For many gates only a combination of a qubit's two angles matters: for an X-type gate
    ``Z(a) X Z(b) = X Z(b - a)`` up to a phase (only the difference), for a diagonal gate
    only the sum. Along such a direction the fidelity is exactly constant, so the angle
    search may stop anywhere on it. The choice made here, the same in the report, check
    and export: wherever a qubit's angles are free along a direction, its ``before`` angle
    is 0 and ``after`` carries the rest; every angle is wrapped to (-pi, pi].
    ``overlap(before, after)`` is the angle-dependent part of the fidelity (of the unitary,
    or of the channel).
    """
    trace = overlap

    def wrap(x):
        return jnp.angle(jnp.exp(1j * x))

    scale = trace(before, after) + 1e-300
    step = 0.7  # any generic angle: a symmetry holds for every step or for none
    for q in range(before.shape[0]):
        unit = jnp.zeros_like(before).at[q].set(1.0)
        for sign in (1.0, -1.0):  # after moves with before (difference) or against it (sum)
            free = jnp.abs(trace(before + step * unit, after + sign * step * unit)
                           - trace(before, after)) <= 1e-9 * scale
            shift = jnp.where(free, -before[q], 0.0)
            before = before + shift * unit
            after = after + sign * shift * unit
    return wrap(before), wrap(after)


def apply_frame(p: ArrayLike, before: ArrayLike, after: ArrayLike, qubits: int) -> jax.Array:
    """``Z(after) P Z(before)``, the gate as the control system runs it."""
    bits = jnp.asarray(qubit_bits(qubits))
    return (_frame_phases(jnp.asarray(after), bits)[:, None] * jnp.asarray(p)
            * _frame_phases(jnp.asarray(before), bits)[None, :])


def gate_figures(p: ArrayLike, target: ArrayLike, *, qubits: int,
                 virtual_z: bool = False) -> Figures:
    """Fidelity and leakage of ``P`` against a gate, optionally with free Z frame updates.

    Args:
        p: ``(d_c, d_c)`` projected propagator.
        target: ``(d_c, d_c)`` target unitary.
        qubits: number of qubits (``d_c = 2^qubits``) for the frame angles.
        virtual_z: maximise over Z angles before and after (:func:`best_frame_angles`).
    """
    zeros = jnp.zeros(qubits)
    if virtual_z:
        before, after = best_frame_angles(p, target, qubits)
        framed = apply_frame(p, before, after, qubits)
    else:
        before, after, framed = zeros, zeros, jnp.asarray(p)
    return Figures(average_gate_fidelity(framed, target), leakage(p), before, after)


def state_figures(u: ArrayLike, initial: ArrayLike, final: ArrayLike,
                  computational: ArrayLike, qubits: int) -> Figures:
    """``|<final|U|initial>|^2`` and the population outside the subspace.

    Both states are vectors on the computational subspace.
    """
    u = jnp.asarray(u)
    idx = jnp.asarray(computational)
    out = u[:, idx] @ jnp.asarray(initial)
    inside = out[idx]
    fidelity = jnp.abs(jnp.vdot(jnp.asarray(final), inside)) ** 2
    zeros = jnp.zeros(qubits)
    return Figures(fidelity, 1.0 - jnp.sum(jnp.abs(inside) ** 2), zeros, zeros)
