"""Cost terms: small factories of pure functions, summed with weights by :func:`combine`.

Each factory returns a :class:`CostTerm`, whose ``value(samples, problem, scores)``
is a real scalar (unweighted). :func:`combine` sums ``weight * value`` over terms
and returns the parts beside the total, ready for
``jax.value_and_grad(..., has_aux=True)``. Weights are an array argument, so changing
them does not recompile. A new term is one factory here and one line in ``TERMS``.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from shaper import _jax  # noqa: F401
from shaper.errors import InputError
from shaper.figures import Figures, gate_figures, project, state_figures
from shaper.propagator import ordered_product, slice_unitaries


class Problem(NamedTuple):
    """The arrays of one optimisation problem, as they cross ``jit``.

    Shapes: d levels, k controls, d_c computational states, q qubits, e ensemble members.
    """

    drift: jax.Array            # (d, d) complex128, Hz
    controls: jax.Array         # (k, d, d) complex128, dimensionless
    dt: jax.Array               # () float64, seconds per AWG sample
    computational: jax.Array    # (d_c,) int, indices of computational states
    target: jax.Array           # (d_c, d_c) complex128 target gate (zeros for a transfer)
    initial: jax.Array          # (d_c,) complex128 initial state of a transfer (else zeros)
    final: jax.Array            # (d_c,) complex128 final state of a transfer (else zeros)
    number_operators: jax.Array  # (q, d, d) complex128, level number per subsystem
    detunings: jax.Array        # (m, q) float64, Hz: detuning offset of each member per qubit
    scales: jax.Array           # (m,) float64: amplitude scale factor of each member
    #                             member 0 is the nominal system (0 Hz, 1.0); members 1..m-1
    #                             are the robustness ensemble, if the recipe has one
    envelope: jax.Array         # (n,) float64 in [0, 1]: fixed factor per AWG sample
    active: jax.Array           # (m,) float64, 1 or 0: propagator slices that take dt
    #                             (0: padding to a shared size, an identity slice)


class Evaluation(NamedTuple):
    """The figures of every member of a problem, from one batched propagation."""

    nominal: Figures  # member 0: the system as the recipe gives it
    members: Figures  # every member, each field with a leading (m,) axis (row 0 = nominal)


class CostTerm(NamedTuple):
    """A named cost: ``value(samples (n, k) Hz, problem, evaluation) -> ()`` real."""

    name: str
    value: Callable[[jax.Array, Problem, Evaluation], jax.Array]


def evaluate(samples: jax.Array, problem: Problem, *, qubits: int, is_gate: bool,
             virtual_z: bool, method: str = "eigh", drive: Callable | None = None) -> Figures:
    """Fidelity and leakage of the samples on the problem's system (nominal parameters).

    ``drive``, if given, maps the AWG's samples to what the propagator sees on the grid of
    ``problem.dt`` (for IF exports: the held modulated samples on sub-steps).
    """
    if drive is not None:
        samples = drive(samples)
    dt = (problem.dt * problem.active)[:, None, None]
    u = ordered_product(slice_unitaries(problem.drift, problem.controls, samples, dt,
                                        method=method))
    return figures_of(u, problem, qubits=qubits, is_gate=is_gate, virtual_z=virtual_z)


def evaluate_members(samples: jax.Array, problem: Problem, *, qubits: int, is_gate: bool,
                     virtual_z: bool, method: str = "eigh",
                     drive: Callable | None = None) -> Evaluation:
    """Figures of the nominal system and of every ensemble member, in ONE batched propagation.

    Member m sees ``drift + sum_q detunings[m, q] n_q`` and the samples times ``scales[m]``.
    Batching all members with ``jax.vmap`` is not only cheaper than separate calls: it
    keeps every compiled objective to a single batched eigendecomposition, which is what
    avoids the LAPACK thread-pool deadlock described in DEVELOPERS.md ("One
    eigendecomposition per program").
    """
    def one(detuning, scale):
        drift = problem.drift + jnp.einsum("q,qij->ij", detuning, problem.number_operators)
        return evaluate(samples * scale, problem._replace(drift=drift), qubits=qubits,
                        is_gate=is_gate, virtual_z=virtual_z, method=method, drive=drive)

    members = jax.vmap(one)(problem.detunings, problem.scales)
    return Evaluation(nominal=jax.tree_util.tree_map(lambda a: a[0], members), members=members)


def figures_of(u: jax.Array, problem: Problem, *, qubits: int, is_gate: bool,
               virtual_z: bool) -> Figures:
    if is_gate:
        return gate_figures(project(u, problem.computational), problem.target, qubits=qubits,
                            virtual_z=virtual_z)
    return state_figures(u, problem.initial, problem.final, problem.computational, qubits)


def infidelity() -> CostTerm:
    """``1 - F``: the average gate infidelity (it includes leakage), or ``1 - |<f|U|i>|^2``."""
    return CostTerm("infidelity",
                    lambda samples, problem, scores: 1.0 - scores.nominal.fidelity)


def leakage() -> CostTerm:
    """The population leaving the computational subspace, as an extra weighted term."""
    return CostTerm("leakage", lambda samples, problem, scores: scores.nominal.leakage)


def out_of_band(samples: jax.Array, dt: jax.Array, cutoff_hz: float,
                iq_columns: np.ndarray, baseband_columns: np.ndarray,
                *, padding: int = 4) -> jax.Array:
    """Fraction of the pulse energy at |f| > cutoff (FFT of the zero-padded samples).

    I/Q channels are transformed as ``I + iQ`` (so the sidebands are told apart),
    baseband channels as real signals.
    """
    n = samples.shape[0]
    signals = [samples[:, i] + 1j * samples[:, q] for i, q in iq_columns]
    signals += [samples[:, c].astype(jnp.complex128) for c in baseband_columns]
    x = jnp.stack(signals, axis=0)
    spectrum = jnp.abs(jnp.fft.fft(x, n=padding * n, axis=-1)) ** 2
    freqs = np.fft.fftfreq(padding * n)  # cycles per sample; times 1/dt gives Hz
    above = jnp.abs(freqs / dt) > cutoff_hz
    total = jnp.sum(spectrum)
    return jnp.sum(jnp.where(above[None, :], spectrum, 0.0)) / (total + 1e-300)


def bandwidth(cutoff_hz: float, iq_columns: Sequence, baseband_columns: Sequence, *,
              sample_period_s: float | None = None) -> CostTerm:
    """The fraction of the pulse energy above ``cutoff_hz`` (see :func:`out_of_band`).

    ``sample_period_s`` is the AWG's; default ``problem.dt`` (they differ when the
    propagator runs on sub-steps).
    """
    iq, bb = np.asarray(iq_columns, int).reshape(-1, 2), np.asarray(baseband_columns, int)
    if not cutoff_hz > 0:
        raise InputError(f"the bandwidth cutoff must be positive, got {cutoff_hz} Hz")
    return CostTerm("bandwidth", lambda samples, problem, scores: out_of_band(
        samples, problem.dt if sample_period_s is None else sample_period_s, cutoff_hz, iq, bb))


def smoothness(limits_hz: Sequence[float]) -> CostTerm:
    """Mean squared first difference of the samples, in units of each channel's limit."""
    scale = np.asarray(limits_hz, float)
    scale = np.where(scale > 0, scale, 1.0)

    def value(samples, problem, scores):
        steps = jnp.diff(samples / scale, axis=0)
        return jnp.mean(jnp.sum(steps ** 2, axis=-1))
    return CostTerm("smoothness", value)


def amplitude_limit(limits_hz: Sequence[float]) -> CostTerm:
    """Soft penalty: mean of ``max(|u| / limit - 1, 0)^2`` per sample and control column."""
    limits = np.asarray(limits_hz, float)
    if np.any(limits <= 0):
        raise InputError(f"amplitude limits must be positive, got {limits.tolist()}")

    def value(samples, problem, scores):
        return jnp.mean(jax.nn.relu(jnp.abs(samples) / limits - 1.0) ** 2)
    return CostTerm("amplitude", value)


def robustness() -> CostTerm:
    """Mean infidelity over the ensemble members (members 1..m-1 of the problem).

    The members are propagated together with the nominal system
    (:func:`evaluate_members`), so this term adds no propagation of its own.
    """
    def value(samples, problem, scores):
        return 1.0 - jnp.mean(scores.members.fidelity[1:])
    return CostTerm("robustness", value)


TERMS: dict[str, Callable[..., CostTerm]] = {
    "infidelity": infidelity,
    "leakage": leakage,
    "bandwidth": bandwidth,
    "smoothness": smoothness,
    "amplitude": amplitude_limit,
    "robustness": robustness,
}


def make_term(name: str, **options) -> CostTerm:
    """Look up a cost term factory by its recipe name."""
    if name not in TERMS:
        raise InputError(f"unknown cost term {name!r}; known terms: {', '.join(TERMS)}")
    return TERMS[name](**options)


def combine(terms: Sequence[CostTerm]):
    """Sum weighted terms: ``total(samples, problem, scores, weights) -> (total, parts)``.

    ``weights`` is a ``(len(terms),)`` array; ``parts`` maps each name to its unweighted value.

    Raises:
        InputError: two terms share a name.
    """
    names = [t.name for t in terms]
    if len(set(names)) != len(names):
        raise InputError(f"cost term names must be unique, got {names}")

    def total(samples, problem, scores, weights):
        parts = {t.name: t.value(samples, problem, scores) for t in terms}
        return sum(weights[i] * parts[n] for i, n in enumerate(names)), parts
    return total
