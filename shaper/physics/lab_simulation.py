"""A played file in the lab frame (no rotating-wave approximation), exactly: the Magnus
integrator of :mod:`shaper.physics.labframe` on the continuous output, and the search for
the worst carrier phase (README, "The lab frame").
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import jax
import jax.numpy as jnp
import numpy as np

from shaper.physics._jax import device
from shaper.physics.alive import alive
from shaper.physics.figures import gate_figures, state_figures
from shaper.physics.figures import project as project_subspace
from shaper.physics.propagator import cycle_exponential, ordered_product
from shaper.physics.systems import System
from shaper.physics.targets import Target


@dataclass(frozen=True)
class LabSimulation:
    """A waveform's figures in the lab frame (no rotating-wave approximation), over the
    carrier phase at the pulse start (README, "The lab frame").

    The figures are trigonometric polynomials in the carrier phase (the counter-rotating
    terms turn as ``exp(2 i phi)``); ``infidelity``/``leakage`` are the worst over every
    phase run: a spread over half a turn, doubled while its highest harmonic is not small
    (at most :data:`MAX_PHASES`), then the maximum of its trigonometric interpolant run
    exactly (:func:`worst_phases`). The worst phases are run again with twice the
    sub-steps per cycle and extrapolated (the method's error falls as the fourth power);
    ``convergence`` is the largest change of their figures between the two, plus the
    change when the envelope's own grid is halved (a Gaussian or measured stage).
    """

    phases_rad: list[float]
    infidelities: list[float]
    leakages: list[float]
    points_per_cycle: int
    slices: int
    convergence: float
    spread_phases: int = 0
    search: str = ""  # how the worst phase was found
    guide_error: float | None = None  # largest |exact - second-order| at the phases run

    @property
    def infidelity(self) -> float:
        return max(self.infidelities)

    @property
    def leakage(self) -> float:
        return max(self.leakages)

    def figures(self) -> dict:
        worst = int(np.argmax(self.infidelities))
        return {"infidelity": self.infidelity, "leakage": self.leakage,
                "infidelity_best": min(self.infidelities),
                "worst_phase_rad": self.phases_rad[worst],
                "phases_rad": self.phases_rad, "infidelity_per_phase": self.infidelities,
                "leakage_per_phase": self.leakages, "spread_phases": self.spread_phases,
                "search": self.search, "second_order_error": self.guide_error,
                "points_per_cycle": self.points_per_cycle, "slices": self.slices,
                "convergence": self.convergence}


LAB_CHUNK_ENTRIES = 4_000_000  # slices x d^2 per compiled lab-frame program (memory bound)
MAX_PHASES = 64  # the spread of carrier phases doubles up to this many
ALIAS_SHARE = 0.02  # the highest harmonic of the spread, relative to its range, resolved


GUIDE_SHARE = 0.02  # the second-order model may differ this much from the exact figures


def guided_phases(run, guide: tuple[np.ndarray, np.ndarray],
                  floor: float = 1e-10) -> tuple[dict, float, bool]:
    """The exact figures where the second-order model (``guide``: phases and their
    ``[infidelity, leakage]``, :func:`shaper.physics.corrected.simulate_corrected`) puts
    each figure's worst phase and the infidelity's best, and how far the model is from
    them (its phase dependence is checked at its two ends); differences below ``floor``
    (far below any target: numerical noise of the two methods) do not count.

    Returns ``(figures by phase, largest difference, whether the model holds)``: it holds
    when every difference is within :data:`GUIDE_SHARE` of the worst exact figure, so the
    true worst over all phases is within twice that of the worst found."""
    phases, values = guide
    picks = {int(np.argmax(values[:, 0])), int(np.argmax(values[:, 1])),
             int(np.argmin(values[:, 0]))}
    figures = {float(phases[i]): run(float(phases[i])) for i in sorted(picks)}
    error = np.max([np.abs(figures[float(phases[i])] - values[i]) for i in picks], axis=0)
    top = np.max(np.array(list(figures.values())), axis=0)
    holds = bool(np.all(error <= GUIDE_SHARE * top + floor))
    return figures, float(np.max(error)), holds


def worst_phases(run, count: int, figures: dict | None = None) -> dict[float, np.ndarray]:
    """Every carrier phase run and its figures ``[infidelity, leakage]``: ``count`` phases
    over ``[0, pi)``, doubled while the highest harmonic either figure shows is above
    :data:`ALIAS_SHARE` of its range (the spread would miss a peak between its phases),
    then, per figure, the maximum of the spread's trigonometric interpolant run exactly.
    ``figures``: phases already run (kept)."""
    figures = dict(figures or {})
    while True:
        grid = [np.pi * k / count for k in range(count)]
        for phase in grid:
            if phase not in figures:
                figures[phase] = run(phase)
        values = np.array([figures[p] for p in grid])  # (count, 2)
        spectrum = np.fft.rfft(values, axis=0) / count
        spread = values.max(axis=0) - values.min(axis=0)
        top = np.abs(spectrum[-1]) + (np.abs(spectrum[-2]) if count > 2 else 0.0)
        resolved = np.all((top <= ALIAS_SHARE * spread) | (spread <= 1e-3 * np.abs(values).max(
            axis=0)))
        if resolved or 2 * count > MAX_PHASES:
            break
        count *= 2
    dense = np.fft.irfft(spectrum * count, 32 * count, axis=0) * 32  # the interpolant
    for column in range(values.shape[1]):
        peak = float(np.pi * np.argmax(dense[:, column]) / (32 * count))
        if all(abs(peak - p) > 1e-9 for p in figures):
            figures[peak] = run(peak)
    return figures


def simulate_lab(system: System, target: Target, envelope_of, samples: int,
                 period_s: float, *, start_s: float = 0.0, phases_rad=None,
                 phase_count: int = 8, envelope_hz: float = 0.0, virtual_z: bool = False,
                 points: int | None = None, exact_envelope: bool = True,
                 guide: tuple[np.ndarray, np.ndarray] | None = None,
                 progress=None, floor: float = 1e-10) -> LabSimulation:
    """The figures of a played waveform with the drive's counter-rotating terms kept.

    Args:
        system: a System with a lab model (:mod:`shaper.physics.labframe`).
        target: what the gate should do.
        envelope_of: ``(offsets, halved) -> (samples * len(offsets), k)`` the drive-frame
            control values (Hz) at ``k + offsets[j]`` sample periods, in time order
            (:meth:`shaper.signal.chain.Chain.lab_envelope`); ``halved``: on half the grid
            of an output without a closed form (its resolution's effect).
        samples: sample periods simulated (the padding and the ring-down included).
        period_s: the sample period.
        start_s: the time of the first simulated sample's start, from the pulse start.
        phases_rad: fixed carrier phases to run (the sequencer fixes the phase); None:
            the worst phase is searched (:func:`worst_phases`, from ``phase_count``).
        envelope_hz: how fast the drive-frame envelope turns (IF, carrier offsets).
        points: sub-steps per cycle of the fastest term (default
            :data:`~shaper.physics.labframe.POINTS_PER_CYCLE`).
        exact_envelope: every output is in closed form; otherwise the worst phases are
            also run with the envelope's grid halved (part of ``convergence``).
        guide: the second-order model's figures over a dense grid of phases
            (:func:`simulate_corrected`): the worst phase is run where it says, and the
            spread only where it does not hold (:func:`guided_phases`).
        progress: called with a line after every run (a long verdict says what it does,
            and keeps a watchdog fed).
    """
    from shaper.physics import labframe as lf

    runner = _Runner(system, target, envelope_of, samples, period_s, start_s, envelope_hz,
                     virtual_z, points or lf.POINTS_PER_CYCLE, progress)
    found, spread, search, error = _search(runner.run, phases_rad, phase_count, guide, floor)
    phases = sorted(found)
    figures = np.array([found[p] for p in phases])
    change = 0.0
    for j in sorted({int(np.argmax(figures[:, 0])), int(np.argmax(figures[:, 1]))}):
        fine = runner.run(phases[j], finer=True)
        change = max(change, float(np.max(np.abs(fine - figures[j]))))
        if not exact_envelope:
            coarse = runner.run(phases[j], halved=True)
            change = max(change, float(np.max(np.abs(coarse - figures[j]))))
        figures[j] = fine + (fine - figures[j]) / 15.0
    return LabSimulation(phases_rad=[float(p) for p in phases],
                         infidelities=figures[:, 0].tolist(),
                         leakages=np.maximum(figures[:, 1], 0.0).tolist(),
                         points_per_cycle=runner.points, slices=runner.slices,
                         convergence=change, spread_phases=spread, search=search,
                         guide_error=error)


def _search(run, phases_rad, phase_count: int, guide, floor: float):
    """``(figures by phase, phases run, how, the second-order model's error)``: the fixed
    phases, or the guided search where the model holds, or the spread."""
    if phases_rad is not None:
        return {float(p): run(float(p)) for p in phases_rad}, 0, "fixed carrier phase", None
    found, holds, error, search = {}, False, None, ""
    if guide is not None:
        found, error, holds = guided_phases(run, guide, floor)
        search = (f"the second-order model over {len(guide[0])} phases, exact at "
                  f"{len(found)} (largest difference {error:.2g})")
    if not holds:
        found = worst_phases(run, phase_count, found)
        search = (f"a spread of phases refined to its peaks ({len(found)} run)"
                  + ("; the second-order model did not hold" if guide is not None else ""))
    return found, len(found), search, error


class _Runner:
    """One exact lab-frame run per call, ``[infidelity, leakage]``, its grid (nodes and
    the envelope there) built once per resolution."""

    def __init__(self, system, target, envelope_of, samples, period_s, start_s,
                 envelope_hz, virtual_z, points, progress):
        from shaper.physics import labframe as lf
        self.lf, self.terms = lf, lf.lab_terms(system)
        self.system, self.target, self.envelope_of = system, target, envelope_of
        self.samples, self.period_s, self.start_s = samples, period_s, start_s
        self.envelope_hz, self.virtual_z, self.points = envelope_hz, virtual_z, points
        self.progress, self.grids = progress, {}
        self.qubits = max(1, int(round(np.log2(len(system.computational)))))

    def grid(self, p: int, halved: bool):
        if (p, halved) not in self.grids:
            lf = self.lf
            steps = lf.steps_per_cell(self.terms, self.period_s, self.envelope_hz, p)
            offsets = tuple(((np.arange(steps)[:, None] + lf.NODES[None, :]) / steps)
                            .reshape(-1).tolist())
            times = lf.node_times(self.samples, self.period_s, steps) + self.start_s
            self.grids[(p, halved)] = (times, self.envelope_of(offsets, halved),
                                       self.period_s / steps / 2)
        return self.grids[(p, halved)]

    @property
    def slices(self) -> int:
        return int(self.grid(self.points, False)[0].shape[0])

    def run(self, phase: float, *, finer: bool = False, halved: bool = False) -> np.ndarray:
        system, target, lf = self.system, self.target, self.lf
        times, values, dt = self.grid(2 * self.points if finer else self.points, halved)
        coefficients = lf.slice_samples(lf.coefficients(self.terms, values, times, phase))
        u = lab_unitary(system.drift, self.terms.operators, coefficients, dt)
        dc = len(system.computational)
        fig = _lab_figures(device(u, complex), device(system.computational),
                           device(target.unitary if target.is_gate else np.zeros((dc, dc)),
                                  complex),
                           qubits=self.qubits, virtual_z=self.virtual_z,
                           is_gate=target.is_gate,
                           initial=None if target.is_gate else tuple(target.initial.tolist()),
                           final=None if target.is_gate else tuple(target.final.tolist()))
        out = np.array([1.0 - float(fig.fidelity), float(fig.leakage)])
        if self.progress is not None:
            self.progress(f"lab frame: carrier phase {np.degrees(phase):.3g} deg"
                          f"{' (twice the sub-steps)' if finer else ''}: infidelity "
                          f"{out[0]:.3e}")
        return out


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
        alive()
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
