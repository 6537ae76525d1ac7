"""A played file in the lab frame to second order (:mod:`shaper.physics.effective`): its
figures at every carrier phase, and its whole map (for predicted benchmarking).

One propagation with the effective term on the rotating frame's grid, then two kicks per
phase: the phase dependence the verdict's exact lab frame is searched by
(:mod:`shaper.physics.lab_simulation`), at the rotating frame's cost.
"""

from __future__ import annotations

import functools

import jax
import jax.numpy as jnp
import numpy as np

from shaper.physics._jax import device
from shaper.physics.figures import apply_frame, average_gate_fidelity, gate_figures, leakage
from shaper.physics.figures import project as project_subspace
from shaper.physics.propagator import (
    ordered_product,
    slice_unitaries,
    taylor_exponential,
    with_slope_term,
)
from shaper.physics.systems import System
from shaper.physics.targets import Target


def simulate_corrected(system: System, target: Target, samples: np.ndarray, dt: float, *,
                       phases_rad: np.ndarray, start_s: float,
                       virtual_z: bool = False, slopes: np.ndarray | None = None) -> np.ndarray:
    """``(P, 2)`` infidelity and leakage at every carrier phase of the lab frame to second
    order (:mod:`shaper.physics.effective`): one propagation with the effective term, then
    the two kicks per phase. ``samples`` ``(n, k)`` on slices of ``dt`` from ``start_s``
    (seconds from the pulse start); ``slopes``: their rates of change across each slice
    (:func:`shaper.physics.propagator.slope_term`)."""
    from shaper.physics.effective import correction_for

    corr = correction_for(system, float(np.max(np.abs(samples), initial=0.0)))
    qubits = max(1, int(round(np.log2(len(system.computational)))))
    dc = len(system.computational)
    out = _corrected(device(system.drift, complex), device(system.controls, complex),
                     device(np.asarray(samples, float), float), device(dt, float),
                     device(system.computational),
                     device(target.unitary if target.is_gate else np.zeros((dc, dc)), complex),
                     device(np.asarray(phases_rad, float), float), corr, start_s,
                     None if slopes is None else device(np.asarray(slopes, float), float),
                     qubits=qubits, virtual_z=virtual_z)
    return np.asarray(out)


def _corrected(drift, controls, samples, dt, computational, target, phases, corr, start_s,
               slopes, *, qubits, virtual_z):
    """One compiled program per layout (the correction's arrays are arguments: a second
    file on the same system is not traced again)."""
    from dataclasses import replace as swap

    from shaper.physics.effective import effective_term, kick

    arrays = (corr.basis, corr.static, corr.raise_, corr.lower, corr.plus, corr.minus)
    key = (qubits, virtual_z, slopes is None, corr.frame_hz, corr.iq_columns.tobytes(),
           corr.orders.tobytes(), tuple(a.shape for a in arrays))
    if key not in _CORRECTED:
        def program(drift, controls, samples, dt, computational, target, phases, start,
                    arrays, slopes):
            c = swap(corr, basis=arrays[0], static=arrays[1], raise_=arrays[2],
                     lower=arrays[3], plus=arrays[4], minus=arrays[5])
            extra = effective_term(c, samples)
            u = ordered_product(slice_unitaries(drift, controls, samples, dt, extra=extra,
                                                slopes=slopes))
            f, total = c.frame_hz, dt * samples.shape[0]

            # frame angles found once, without the kicks (they move them by about the
            # kick's size, a second-order change of the figures): each phase is cheap
            base = gate_figures(project_subspace(u, computational), target, qubits=qubits,
                                virtual_z=virtual_z)

            def one(phase):
                k0 = kick(c, samples[0], 2 * jnp.pi * f * start + phase)
                k1 = kick(c, samples[-1], 2 * jnp.pi * f * (start + total) + phase)
                ends = taylor_exponential(jnp.stack([k1, -k0]) / (2 * jnp.pi))
                p = project_subspace(ends[0] @ u @ ends[1], computational)
                framed = apply_frame(p, base.frame_before, base.frame_after, qubits)
                return jnp.stack([1.0 - average_gate_fidelity(framed, target), leakage(p)])

            return jax.vmap(one)(phases)

        if len(_CORRECTED) >= 8:
            _CORRECTED.pop(next(iter(_CORRECTED)))
        _CORRECTED[key] = jax.jit(program)
    return _CORRECTED[key](drift, controls, samples, dt, computational, target, phases,
                           start_s, tuple(device(a, complex if np.iscomplexobj(a) else float)
                                          for a in arrays), slopes)


_CORRECTED: dict = {}  # compiled corrected-lab programs, by layout


def gate_map(system: System, target: Target, samples: np.ndarray, dt: float, *,
             phase_rad: float | None, start_s: float, virtual_z: bool,
             slopes: np.ndarray | None = None) -> dict:
    """A played file's map on every level, for predicted benchmarking
    (:mod:`shaper.physics.benchmarking`): the rotating frame with, where ``phase_rad`` is
    given, the lab frame's second-order term and kicks at that carrier phase
    (:mod:`shaper.physics.effective`), and the system's T1/T2 (Lindblad) where it has
    them; the frame updates that serve ``target`` best applied (virtual Z on every
    level n by ``exp(i n theta)``, the convention of :mod:`shaper.physics.figures`).

    Returns a dict with ``unitary`` ``(d, d)`` (closed) or ``superoperator``
    ``(d^2, d^2)`` (column-stacked), ``frame_before_rad``, ``frame_after_rad``.
    """
    from scipy.linalg import expm

    from shaper.physics.effective import correction_for, effective_term, kick
    from shaper.physics.figures import gate_figures
    from shaper.physics.lindblad import best_channel_angles, channel_block

    samples = np.asarray(samples, float)
    corr = correction_for(system, float(np.max(np.abs(samples), initial=0.0))) \
        if phase_rad is not None else None
    extra = None if corr is None else np.asarray(effective_term(corr, samples))
    if slopes is not None:  # the controls' change across each slice, as a term of its own
        extra = np.asarray(with_slope_term(
            device(system.drift, complex), device(system.controls, complex),
            device(samples, float), device(np.asarray(slopes, float), float), dt,
            None if extra is None else device(extra, complex)))
    ends = [np.eye(system.dimension), np.eye(system.dimension)]
    if corr is not None:
        f, total = corr.frame_hz, dt * samples.shape[0]
        ends = [expm(1j * kick(corr, samples[0], 2 * np.pi * f * start_s + phase_rad)),
                expm(-1j * kick(corr, samples[-1],
                                2 * np.pi * f * (start_s + total) + phase_rad))]
    qubits = max(1, int(round(np.log2(len(system.computational)))))
    numbers = np.array([np.real(np.diag(n)) for n in system.number_operators])  # (q, d)
    out = {}
    if system.collapse:
        s = _channel(system, samples, dt, extra)
        s = np.kron(ends[1].conj(), ends[1]) @ s @ np.kron(ends[0].conj(), ends[0])
        before, after = (np.zeros(qubits), np.zeros(qubits)) if not virtual_z else \
            tuple(np.asarray(a) for a in best_channel_angles(
                channel_block(s, system.computational, system.dimension), target.unitary,
                qubits))
        z = [np.diag(np.exp(1j * (a @ numbers))) for a in (before, after)]
        out["superoperator"] = np.kron(z[1].conj(), z[1]) @ s @ np.kron(z[0].conj(), z[0])
    else:
        u = np.asarray(_closed_map(device(system.drift, complex),
                                   device(system.controls, complex), device(samples, float),
                                   device(dt, float),
                                   None if extra is None else device(extra, complex)))
        u = ends[1] @ u @ ends[0]
        fig = gate_figures(project_subspace(u, system.computational), target.unitary,
                           qubits=qubits, virtual_z=virtual_z)
        before, after = np.asarray(fig.frame_before), np.asarray(fig.frame_after)
        z = [np.diag(np.exp(1j * (a @ numbers))) for a in (before, after)]
        out["unitary"] = z[1] @ u @ z[0]
    out.update(frame_before_rad=before.tolist(), frame_after_rad=after.tolist())
    return out


def _channel(system: System, samples: np.ndarray, dt: float, extra) -> np.ndarray:
    """The Lindblad channel of ``samples`` (and the effective term ``extra``, if any)."""
    from shaper.physics.lindblad import dissipator, scalings_for

    noise = dissipator(system.collapse, system.dimension)
    drift = system.drift + (0 if extra is None else np.max(np.abs(extra), axis=0))
    return np.asarray(_open_map(device(system.drift, complex), device(system.controls, complex),
                                device(samples, float), device(dt, float),
                                device(noise, complex),
                                None if extra is None else device(extra, complex),
                                scalings=scalings_for(drift, system.controls, samples, dt,
                                                      noise) + 1))


@jax.jit
def _closed_map(drift, controls, samples, dt, extra):
    return ordered_product(slice_unitaries(drift, controls, samples, dt, extra=extra))


@functools.partial(jax.jit, static_argnames=("scalings",))
def _open_map(drift, controls, samples, dt, noise, extra, *, scalings):
    from shaper.physics.lindblad import propagate_open
    return propagate_open(drift, controls, samples, dt, noise, scalings=scalings, extra=extra)
