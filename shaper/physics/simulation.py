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
from shaper.physics.propagator import cycle_exponential, ordered_product, propagate
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
             virtual_z: bool = False, method: str = "eigh") -> Simulation:
    """Simulate ``samples`` ``(n, k)`` Hz on ``system`` and score them against ``target``.

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
        method=method, qubits=qubits, virtual_z=virtual_z, is_gate=target.is_gate)
    fidelity = float(fig.fidelity)
    return Simulation(fidelity=fidelity, infidelity=1.0 - fidelity, leakage=float(fig.leakage),
                      frame_before_rad=[float(x) for x in fig.frame_before],
                      frame_after_rad=[float(x) for x in fig.frame_after],
                      unitary=np.asarray(u), populations=np.asarray(populations))


@functools.partial(jax.jit, static_argnames=("method", "qubits", "virtual_z", "is_gate"))
def _run(drift, controls, samples, dt, computational, target, initial, final, *, method,
         qubits, virtual_z, is_gate):
    history = propagate(drift, controls, samples, dt, method=method, history=True)
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
                  virtual_z: bool = False, closed: Simulation | None = None) -> OpenSimulation:
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
    closed = closed or simulate(system, target, samples, dt, virtual_z=virtual_z)
    qubits = max(1, int(round(np.log2(len(system.computational)))))
    noise = dissipator(system.collapse, system.dimension)
    samples = np.asarray(samples, float)
    fig = _open(device(system.drift, complex), device(system.controls, complex),
                device(samples, float), device(dt, float), device(noise, complex),
                device(system.computational), device(target.unitary, complex),
                qubits=qubits, virtual_z=virtual_z,
                scalings=scalings_for(system.drift, system.controls, samples, dt, noise))
    fidelity = float(fig.fidelity)
    return OpenSimulation(fidelity=fidelity, infidelity=1.0 - fidelity,
                          leakage=float(fig.leakage), coherent_error=closed.infidelity,
                          incoherent_error=(1.0 - fidelity) - closed.infidelity,
                          frame_before_rad=[float(x) for x in fig.frame_before],
                          frame_after_rad=[float(x) for x in fig.frame_after])


@functools.partial(jax.jit, static_argnames=("qubits", "virtual_z", "scalings"))
def _open(drift, controls, samples, dt, noise, computational, target, *, qubits, virtual_z,
          scalings):
    from shaper.physics.lindblad import open_figures
    return open_figures(drift, controls, samples, dt, noise, computational, target,
                        qubits=qubits, virtual_z=virtual_z, scalings=scalings)


@dataclass(frozen=True)
class LabSimulation:
    """A waveform's figures in the lab frame (no rotating-wave approximation), over the
    carrier phase at the pulse start (README, "The lab frame").

    ``infidelity``/``leakage`` are the worst over ``phases_rad`` (each its own worst
    phase). Every phase is run with ``points_per_cycle`` sub-steps per cycle of the
    fastest term; the worst phases again with twice as many, and extrapolated (the
    method's error falls as the fourth power); ``convergence`` is the largest change of
    their figures between the two.
    """

    phases_rad: list[float]
    infidelities: list[float]
    leakages: list[float]
    points_per_cycle: int
    slices: int
    convergence: float

    @property
    def infidelity(self) -> float:
        return max(self.infidelities)

    @property
    def leakage(self) -> float:
        return max(self.leakages)

    def figures(self) -> dict:
        return {"infidelity": self.infidelity, "leakage": self.leakage,
                "infidelity_best": min(self.infidelities),
                "phases_rad": self.phases_rad, "infidelity_per_phase": self.infidelities,
                "leakage_per_phase": self.leakages,
                "points_per_cycle": self.points_per_cycle, "slices": self.slices,
                "convergence": self.convergence}


LAB_CHUNK_ENTRIES = 4_000_000  # slices x d^2 per compiled lab-frame program (memory bound)


def simulate_lab(system: System, target: Target, envelope_at, cells: int, cell_s: float, *,
                 start_s: float = 0.0, phases_rad=(0.0,), envelope_hz: float = 0.0,
                 virtual_z: bool = False, points: int | None = None) -> LabSimulation:
    """The figures of a played waveform with the drive's counter-rotating terms kept.

    Args:
        system: a System with a lab model (:mod:`shaper.physics.labframe`).
        target: what the gate should do.
        envelope_at: ``times (m,) -> (m, k)`` the drive-frame control values (Hz) at
            times counted from the pulse start (``Chain.envelope_at``).
        cells, cell_s: the held grid the envelope is constant or smooth on.
        start_s: the time of the first cell's start, from the pulse start (padding first:
            negative).
        phases_rad: the frame's phase at the pulse start, one run each.
        envelope_hz: how fast the drive-frame envelope turns within a cell (IF, offsets).
        points: sub-steps per cycle of the fastest term (default
            :data:`~shaper.physics.labframe.POINTS_PER_CYCLE`).
    """
    from shaper.physics import labframe as lf

    terms = lf.lab_terms(system)
    points = points or lf.POINTS_PER_CYCLE
    qubits = max(1, int(round(np.log2(len(system.computational)))))
    grids = {}

    def run(p: int, phase: float) -> np.ndarray:
        if p not in grids:
            steps = lf.steps_per_cell(terms, cell_s, envelope_hz, p)
            times = lf.node_times(cells, cell_s, steps) + start_s
            grids[p] = (times, envelope_at(times), cell_s / steps / 2)
        times, values, dt = grids[p]
        samples = lf.slice_samples(lf.coefficients(terms, values, times, phase))
        u = lab_unitary(system.drift, terms.operators, samples, dt)
        fig = _lab_figures(device(u, complex), device(system.computational),
                           device(target.unitary if target.is_gate else
                                  np.zeros((len(system.computational),) * 2), complex),
                           qubits=qubits, virtual_z=virtual_z, is_gate=target.is_gate,
                           initial=None if target.is_gate else tuple(target.initial.tolist()),
                           final=None if target.is_gate else tuple(target.final.tolist()))
        return np.array([1.0 - float(fig.fidelity), float(fig.leakage)])

    figures = np.array([run(points, phase) for phase in phases_rad])
    change = 0.0
    for j in sorted({int(np.argmax(figures[:, 0])), int(np.argmax(figures[:, 1]))}):
        fine = run(2 * points, phases_rad[j])
        change = max(change, float(np.max(np.abs(fine - figures[j]))))
        figures[j] = fine + (fine - figures[j]) / 15.0
    return LabSimulation(phases_rad=[float(p) for p in phases_rad],
                         infidelities=figures[:, 0].tolist(),
                         leakages=np.maximum(figures[:, 1], 0.0).tolist(),
                         points_per_cycle=points, slices=int(grids[points][0].shape[0]),
                         convergence=change)


def lab_unitary(drift: np.ndarray, operators: np.ndarray, samples: np.ndarray,
                dt: float) -> np.ndarray:
    """The propagator of ``samples`` ``(n, K)`` on ``operators`` in chunks of a power of two
    slices (the last padded with slices of zero length), so that memory stays bounded and a
    few compiled programs serve every pulse length.

    The lab frame's slices are short (a small fraction of a cycle of every term), so each
    slice's exponential is a Taylor polynomial of a degree that makes its remainder below
    1e-16 (:func:`taylor_degree`): 2-3x faster than diagonalising each slice at d = 25,
    measured; slices too long for that are diagonalised.
    """
    d = drift.shape[0]
    n = samples.shape[0]
    cap = max(64, 1 << int(np.log2(max(LAB_CHUNK_ENTRIES // (d * d), 1))))
    chunk = min(cap, 1 << int(np.ceil(np.log2(max(n, 1)))))
    bound = 2 * np.pi * dt * (np.abs(drift).sum(axis=0).max()
                              + np.abs(samples).max(axis=0, initial=0.0)
                              @ np.abs(operators).sum(axis=1).max(axis=1))
    degree = taylor_degree(float(bound))
    u = np.eye(d, dtype=complex)
    h0, ops = device(drift, complex), device(operators, complex)
    for start in range(0, n, chunk):
        block = samples[start:start + chunk]
        lengths = np.zeros(chunk)
        lengths[:block.shape[0]] = dt
        padded = np.zeros((chunk, samples.shape[1]))
        padded[:block.shape[0]] = block
        u = np.asarray(_lab_chunk(h0, ops, device(padded, float), device(lengths, float),
                                  degree=degree)) @ u
    return u


def taylor_degree(theta: float, tolerance: float = 1e-16) -> int:
    """The smallest degree K whose Taylor remainder ``theta^(K+1) e^theta / (K+1)!`` of
    ``exp(A)``, ``||A|| <= theta``, is below ``tolerance``; 0 (diagonalise instead) when
    ``theta`` is over 1 or K would pass 18.

    Examples:
        >>> taylor_degree(0.04), taylor_degree(0.3), taylor_degree(2.0)
        (8, 12, 0)
    """
    if not theta <= 1.0:
        return 0
    term, k = theta * np.exp(theta), 0
    while term > tolerance:
        k += 1
        term *= theta / (k + 1)
        if k > 18:
            return 0
    return max(k, 2)


@functools.partial(jax.jit, static_argnames=("degree",))
def _lab_chunk(drift, operators, samples, lengths, *, degree):
    hamiltonians = drift + jnp.einsum("nk,kij->nij", samples.astype(operators.dtype), operators)
    phases = hamiltonians * lengths[:, None, None]
    if not degree:
        return ordered_product(cycle_exponential(phases))
    a = -2j * jnp.pi * phases
    eye = jnp.eye(drift.shape[-1], dtype=a.dtype)
    u = eye + a / degree
    for k in range(degree - 1, 0, -1):  # Horner: I + A (I + A/2 (I + ... A/K))
        u = eye + (a @ u) / k
    return ordered_product(u)


@functools.partial(jax.jit, static_argnames=("qubits", "virtual_z", "is_gate", "initial",
                                             "final"))
def _lab_figures(u, computational, target, *, qubits, virtual_z, is_gate, initial, final):
    if is_gate:
        return gate_figures(project_subspace(u, computational), target, qubits=qubits,
                            virtual_z=virtual_z)
    return state_figures(u, jnp.array(initial), jnp.array(final), computational, qubits)
