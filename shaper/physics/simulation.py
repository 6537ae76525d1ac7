"""Re-simulate a finished waveform: figures of merit and level populations over time.

Used for reports and checks; no gradients here. The figures follow the README's "Conventions".
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import jax
import jax.numpy as jnp
import numpy as np

from shaper.errors import InputError
from shaper.physics._jax import device
from shaper.physics.figures import gate_figures, state_figures
from shaper.physics.figures import project as project_subspace
from shaper.physics.propagator import propagate
from shaper.physics.systems import System
from shaper.physics.targets import Target


@dataclass(frozen=True)
class Simulation:
    """What a waveform does on a system.

    Attributes:
        fidelity, infidelity, leakage: the figures of the README's "Conventions".
        frame_before_rad, frame_after_rad: virtual Z angles per qubit (zeros without).
        unitary: ``(d, d)`` total propagator.
        populations: ``(d_c, n + 1, d)``: for each computational input state, the
            population of every basis state after 0..n samples.
    """

    fidelity: float
    infidelity: float
    leakage: float
    frame_before_rad: list[float]
    frame_after_rad: list[float]
    unitary: np.ndarray
    populations: np.ndarray

    def figures(self) -> dict:
        """The scalar figures as a JSON-ready dict."""
        return {"fidelity": self.fidelity, "infidelity": self.infidelity,
                "leakage": self.leakage, "frame_before_rad": self.frame_before_rad,
                "frame_after_rad": self.frame_after_rad}


def simulate(system: System, target: Target, samples: np.ndarray, dt: float, *,
             virtual_z: bool = False, method: str = "eigh",
             slopes: np.ndarray | None = None) -> Simulation:
    """Simulate ``samples`` ``(n, k)`` Hz on ``system`` and score them against ``target``
    (``slopes``: their rates of change across each slice, Hz/s, where the samples are the
    slices' means of a changing output: :func:`shaper.physics.propagator.slope_term`).

    One compiled program per shape (propagation, populations and figures together), so a
    report or a check does not run the propagator operation by operation.
    """
    samples = np.asarray(samples, float)
    if samples.ndim != 2 or samples.shape[1] != system.controls.shape[0] \
            or not np.all(np.isfinite(samples)):
        raise InputError(f"samples must be finite, of shape (n, {system.controls.shape[0]}); "
                         f"got {samples.shape}")
    qubits = max(1, int(round(np.log2(len(system.computational)))))
    dc = len(system.computational)
    zeros = np.zeros(dc, complex)
    populations, fig, u = _run(
        device(system.drift, complex), device(system.controls, complex),
        device(samples, float), device(dt, float), device(system.computational),
        device(target.unitary if target.is_gate else np.zeros((dc, dc)), complex),
        device(zeros if target.is_gate else target.initial, complex),
        device(zeros if target.is_gate else target.final, complex),
        None if slopes is None else device(np.asarray(slopes, float), float),
        method=method, qubits=qubits, virtual_z=virtual_z, is_gate=target.is_gate)
    fidelity = float(fig.fidelity)
    return Simulation(fidelity=fidelity, infidelity=1.0 - fidelity, leakage=float(fig.leakage),
                      frame_before_rad=[float(x) for x in fig.frame_before],
                      frame_after_rad=[float(x) for x in fig.frame_after],
                      unitary=np.asarray(u), populations=np.asarray(populations))


@functools.partial(jax.jit, static_argnames=("method", "qubits", "virtual_z", "is_gate"))
def _run(drift, controls, samples, dt, computational, target, initial, final, slopes, *,
         method, qubits, virtual_z, is_gate):
    history = propagate(drift, controls, samples, dt, method=method, history=True,
                        slopes=slopes)
    u = history[-1]
    if is_gate:
        fig = gate_figures(project_subspace(u, computational), target, qubits=qubits,
                           virtual_z=virtual_z)
    else:
        fig = state_figures(u, initial, final, computational, qubits)
    populations = jnp.abs(history[:, :, computational]) ** 2  # (n+1, d, d_c)
    return jnp.transpose(populations, (2, 0, 1)), fig, u


@dataclass(frozen=True)
class OpenSimulation:
    """The error budget of a waveform on an open system (README, "Decoherence").

    ``infidelity`` and ``leakage`` are those of the channel (the Lindblad evolution of
    the same samples); ``coherent_error`` is the closed-system infidelity of the same
    samples (the pulse's fault), ``incoherent_error`` the rest (the chip's).
    """

    fidelity: float
    infidelity: float
    leakage: float
    coherent_error: float
    incoherent_error: float
    frame_before_rad: list[float]
    frame_after_rad: list[float]

    def figures(self) -> dict:
        return dict(self.__dict__)


def simulate_open(system: System, target: Target, samples: np.ndarray, dt: float, *,
                  virtual_z: bool = False, closed: Simulation | None = None,
                  slopes: np.ndarray | None = None) -> OpenSimulation:
    """The channel figures of ``samples`` on ``system`` with its collapse operators.

    ``closed``: the closed-system simulation of the same samples, if already made.

    Raises:
        InputError: the system has no collapse operators, or the target is a state.
    """
    from shaper.physics.lindblad import dissipator, scalings_for

    if not system.collapse:
        raise InputError("no coherence times: give t1/t2 (or collapse operators) to simulate "
                         "the open system")
    if not target.is_gate:
        raise InputError("open-system figures are those of a gate; this target is a state")
    closed = closed or simulate(system, target, samples, dt, virtual_z=virtual_z,
                                slopes=slopes)
    qubits = max(1, int(round(np.log2(len(system.computational)))))
    noise = dissipator(system.collapse, system.dimension)
    samples = np.asarray(samples, float)
    fig = _open(device(system.drift, complex), device(system.controls, complex),
                device(samples, float), device(dt, float), device(noise, complex),
                device(system.computational), device(target.unitary, complex),
                None if slopes is None else device(np.asarray(slopes, float), float),
                qubits=qubits, virtual_z=virtual_z,
                scalings=scalings_for(system.drift, system.controls, samples, dt, noise))
    fidelity = float(fig.fidelity)
    return OpenSimulation(fidelity=fidelity, infidelity=1.0 - fidelity,
                          leakage=float(fig.leakage), coherent_error=closed.infidelity,
                          incoherent_error=(1.0 - fidelity) - closed.infidelity,
                          frame_before_rad=[float(x) for x in fig.frame_before],
                          frame_after_rad=[float(x) for x in fig.frame_after])


@functools.partial(jax.jit, static_argnames=("qubits", "virtual_z", "scalings"))
def _open(drift, controls, samples, dt, noise, computational, target, slopes, *, qubits,
          virtual_z, scalings):
    from shaper.physics.lindblad import open_figures
    return open_figures(drift, controls, samples, dt, noise, computational, target,
                        qubits=qubits, virtual_z=virtual_z, scalings=scalings, slopes=slopes)
