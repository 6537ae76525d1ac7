"""The problem as it crosses ``jit``: the system, target and ensemble arrays of a recipe,
and the figures of every member from one batched propagation.

:class:`Problem` is built once per recipe (:func:`make_problem`); the cost terms
(:mod:`shaper.costs.terms`) read the :class:`Evaluation` that :func:`evaluate_members`
returns. A problem that could not fit in this machine's memory is refused here, before
anything is allocated.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from shaper.physics._jax import device
from shaper.physics.figures import Figures, gate_figures, project, state_figures
from shaper.physics.lindblad import dissipator
from shaper.physics.propagator import ordered_product, slice_unitaries
from shaper.recipe import Recipe
from shaper.signal.chain import cells_of
from shaper.signal.pulses import Layout, make_layout


class Problem(NamedTuple):
    """The arrays of one optimisation problem, as they cross ``jit``.

    Shapes: d levels, k controls, d_c computational states, q qubits, e ensemble members.
    """

    drift: jax.Array            # (d, d) complex128, Hz
    controls: jax.Array         # (k, d, d) complex128, dimensionless
    dt: jax.Array               # () or (slices,) float64: seconds per propagator slice
    computational: jax.Array    # (d_c,) int, indices of computational states
    target: jax.Array           # (d_c, d_c) complex128 target gate (zeros for a transfer)
    initial: jax.Array          # (d_c,) complex128 initial state of a transfer (else zeros)
    final: jax.Array            # (d_c,) complex128 final state of a transfer (else zeros)
    number_operators: jax.Array  # (q, d, d) complex128, level number per subsystem
    detunings: jax.Array        # (u, q) float64, Hz: detuning offset per qubit of each
    #                             distinct member system
    scales: jax.Array           # (u,) float64: amplitude scale factor of each distinct one
    member_rows: jax.Array      # (m,) int: member m is distinct system member_rows[m].
    #                             Member 0 is the nominal system (0 Hz, 1.0), members 1..m-1
    #                             the robustness ensemble, if the recipe has one; an ensemble
    #                             point equal to another (often the nominal one) is
    #                             propagated once
    envelope: jax.Array         # (n,) float64 in [0, 1]: fixed factor per AWG sample
    active: jax.Array           # (slices,) float64, 1 or 0: slices that take their dt
    #                             (0: padding to a shared size, an identity slice)
    noise: jax.Array = None     # (d^2, d^2) complex128, 1/s: the Lindblad dissipator of the
    #                             system's collapse operators, with optimizer.open_system
    #                             ((1, 1) zeros otherwise: a closed system)


class Evaluation(NamedTuple):
    """The figures of every member of a problem, from one batched propagation."""

    nominal: Figures  # member 0: the system as the recipe gives it
    members: Figures  # every member, each field with a leading (m,) axis (row 0 = nominal)


def evaluate(samples: jax.Array, problem: Problem, *, qubits: int, is_gate: bool,
             virtual_z: bool, method: str = "eigh", drive: Callable | None = None,
             open_system: bool = False, open_scalings: int | None = None,
             corrected=None) -> Figures:
    """Fidelity and leakage of the samples on the problem's system (nominal parameters).

    ``drive``, if given, maps the AWG's samples to what the propagator sees on the grid of
    ``problem.dt`` (for IF exports: the held modulated samples on sub-steps).
    ``open_system``: the figures of the channel under ``problem.noise`` (the Lindblad
    propagation of :mod:`shaper.physics.lindblad`) instead of the unitary's;
    ``open_scalings`` (static) covers every slice (:func:`open_scalings`).
    ``corrected``: a :class:`~shaper.signal.labdrive.CorrectedDrive`, the lab frame to
    second order, judged by a smooth maximum over its carrier phases.
    """
    slopes = None
    if drive is not None:
        samples, slopes = cells_of(drive, samples)
    if open_system:
        from shaper.physics.lindblad import open_figures
        return open_figures(problem.drift, problem.controls, samples,
                            problem.dt * problem.active, problem.noise, problem.computational,
                            problem.target, qubits=qubits, virtual_z=virtual_z,
                            scalings=open_scalings, slopes=slopes)
    dt = (problem.dt * problem.active)[:, None, None]
    if corrected is not None:
        from shaper.physics.figures import (
            apply_frame,
            average_gate_fidelity,
            best_frame_angles,
            leakage,
        )
        from shaper.signal.labdrive import smooth_worst
        u = ordered_product(slice_unitaries(problem.drift, problem.controls, samples, dt,
                                            method=method, extra=corrected.extra(samples),
                                            slopes=slopes))
        # the frame angles found once without the kicks (which move them by about the
        # kick's size), then refined per phase from there in a few sweeps
        base = figures_of(u, problem, qubits=qubits, is_gate=is_gate, virtual_z=virtual_z)
        phases = corrected.kicked(u, samples, jnp.sum(problem.dt * problem.active))
        if not is_gate:
            return smooth_worst(jax.vmap(lambda v: figures_of(
                v, problem, qubits=qubits, is_gate=False, virtual_z=False))(phases))

        def one(v):
            p = project(v, problem.computational)
            before, after = base.frame_before, base.frame_after
            if virtual_z:  # each phase's own optimum, from the kick-free one: exact
                before, after = best_frame_angles(p, problem.target, qubits, sweeps=3,
                                                  start=(before, after))  # gradient
            framed = apply_frame(p, before, after, qubits)
            return base._replace(fidelity=average_gate_fidelity(framed, problem.target),
                                 leakage=leakage(p), frame_before=before, frame_after=after)
        return smooth_worst(jax.vmap(one)(phases))
    u = ordered_product(slice_unitaries(problem.drift, problem.controls, samples, dt,
                                        method=method, slopes=slopes))
    return figures_of(u, problem, qubits=qubits, is_gate=is_gate, virtual_z=virtual_z)


def evaluate_members(samples: jax.Array, problem: Problem, *, qubits: int, is_gate: bool,
                     virtual_z: bool, method: str = "eigh",
                     drive: Callable | None = None, open_system: bool = False,
                     open_scalings: int | None = None, corrected=None) -> Evaluation:
    """Figures of the nominal system and of every ensemble member, in ONE batched propagation.

    Member m sees ``drift + sum_q detunings[r, q] n_q`` and the samples times ``scales[r]``,
    ``r = member_rows[m]``; each distinct member system is propagated once (an ensemble
    grid that holds the nominal point costs one propagation less). Batching all members
    with ``jax.vmap`` is not only cheaper than separate calls: it keeps every compiled
    objective to a single batched eigendecomposition, which is what
    avoids the LAPACK thread-pool deadlock described in DEVELOPERS.md ("One
    eigendecomposition per program").
    """
    def one(detuning, scale):
        drift = problem.drift + jnp.einsum("q,qij->ij", detuning, problem.number_operators)
        return evaluate(samples * scale, problem._replace(drift=drift), qubits=qubits,
                        is_gate=is_gate, virtual_z=virtual_z, method=method, drive=drive,
                        open_system=open_system, open_scalings=open_scalings,
                        corrected=corrected)

    distinct = jax.vmap(one)(problem.detunings, problem.scales)
    return Evaluation(nominal=jax.tree_util.tree_map(lambda a: a[0], distinct),
                      members=jax.tree_util.tree_map(lambda a: a[problem.member_rows], distinct))


def figures_of(u: jax.Array, problem: Problem, *, qubits: int, is_gate: bool,
               virtual_z: bool) -> Figures:
    if is_gate:
        return gate_figures(project(u, problem.computational), problem.target, qubits=qubits,
                            virtual_z=virtual_z)
    return state_figures(u, problem.initial, problem.final, problem.computational, qubits)


def recipe_layout(recipe: Recipe) -> Layout:
    return make_layout(recipe.system, recipe.limits_hz, recipe.samples, hold=recipe.hold,
                       zero_ends=recipe.zero_ends, ramp_samples=recipe.ramp_samples,
                       ranges_hz=recipe.flux_ranges_hz)


def make_problem(recipe: Recipe, layout: Layout | None = None, *, real: int | None = None,
                 steps: int = 1) -> Problem:
    """The recipe's arrays; with a padded ``layout``, slices past ``real`` samples are identities.

    ``steps`` > 1: the propagator runs on that many sub-steps per sample (IF exports).
    """
    layout = layout or recipe_layout(recipe)
    real = layout.samples if real is None else real
    active = np.repeat((np.arange(layout.samples) < real).astype(float), steps)
    s, t = recipe.system, recipe.target
    dc = len(s.computational)
    subsystems = len(s.number_operators)
    if has_ensemble(recipe):  # member 0 is the nominal system, the ensemble follows
        ensemble_detunings = np.asarray(recipe.ensemble_detunings_hz, float).reshape(-1, subsystems)
        ensemble_scales = np.asarray(recipe.ensemble_scales, float)
    else:
        ensemble_detunings, ensemble_scales = np.zeros((0, subsystems)), np.zeros(0)
    detunings = np.concatenate([np.zeros((1, subsystems)), ensemble_detunings])
    scales = np.concatenate([[1.0], ensemble_scales])
    # distinct (detunings, scale) rows in order of first appearance, so row 0 stays nominal
    _, first, rows = np.unique(np.column_stack([detunings, scales]), axis=0,
                               return_index=True, return_inverse=True)
    order = np.argsort(first)  # the distinct rows by first appearance
    rank = np.argsort(order)  # where each of np.unique's sorted rows went in that order
    zeros_vec = np.zeros(dc, complex)
    c, f = np.complex128, np.float64
    return Problem(
        drift=device(s.drift, c), controls=device(s.controls, c),
        dt=device(recipe.dt, f), computational=device(s.computational),
        target=device(t.unitary if t.is_gate else np.zeros((dc, dc)), c),
        initial=device(zeros_vec if t.is_gate else t.initial, c),
        final=device(zeros_vec if t.is_gate else t.final, c),
        number_operators=device(s.number_operators, c),
        detunings=device(detunings[first[order]], f), scales=device(scales[first[order]], f),
        member_rows=device(rank[rows.reshape(-1)]),
        envelope=device(layout.envelope, f), active=device(active, f),
        noise=device(dissipator(s.collapse, s.dimension) if recipe.optimizer.open_system
                     else np.zeros((1, 1)), c))


def chain_problem(recipe: Recipe, chain, layout: Layout | None = None, *,
                  real: int | None = None) -> Problem:
    """The recipe's problem on the grid of its signal chain (:mod:`shaper.signal.chain`):
    ``chain.steps`` propagator slices of ``chain.dt_s`` per AWG sample, the padding and
    the ring-down included. With a padded ``layout``, the slices after ``real`` samples
    and their ring-down are identities (a shorter duration on a shared program)."""
    real = recipe.samples if real is None else real
    if chain.identity:
        return make_problem(recipe, layout, real=real)
    problem = make_problem(recipe, layout, steps=chain.steps)
    active = np.zeros(chain.played_samples(problem.envelope.shape[0]) * chain.steps)
    active[:chain.played_samples(real) * chain.steps] = 1.0
    return problem._replace(dt=device(chain.dt_s, np.float64),
                            active=device(active, np.float64))


def open_scalings(recipe: Recipe, layout: Layout, dt: float) -> int | None:
    """The Taylor squarings the open-system objective needs for any samples within the
    recipe's limits and ensemble (None: a closed system)."""
    if not recipe.optimizer.open_system:
        return None
    from shaper.physics.lindblad import dissipator, norm_bound, squarings

    s = recipe.system
    bound = norm_bound(s.drift, s.controls, layout.column_limits(),
                       dissipator(s.collapse, s.dimension), dt,
                       detuning_hz=float(np.max(np.abs(recipe.ensemble_detunings_hz), initial=0)),
                       scale=float(np.max(recipe.ensemble_scales, initial=1.0)))
    return squarings(bound)


def waveform_problem(recipe: Recipe, samples: int, *, steps: int = 1,
                     dt: float | None = None) -> Problem:
    """The recipe's system, target and ensemble for a waveform of ``samples`` samples.

    A waveform file may be longer or shorter than the recipe's pulse (granularity
    padding, a hold, another recipe's file): the recipe supplies the physics, the file
    the samples. Every slice is active; ``dt`` (default the recipe's) is the sample
    period, divided into ``steps`` propagator slices.
    """
    problem = make_problem(recipe)
    period = recipe.dt if dt is None else dt
    return problem._replace(dt=device(period / steps, np.float64),
                            envelope=device(np.ones(samples)),
                            active=device(np.ones(samples * steps)))


def has_ensemble(recipe: Recipe) -> bool:
    """True when the recipe asks for robustness over detunings or amplitude scales."""
    return (len(recipe.ensemble_scales) > 1 or bool(np.any(recipe.ensemble_detunings_hz != 0))
            or bool(np.any(recipe.ensemble_scales != 1))) and recipe.weights["robustness"] > 0


def qubit_count(recipe: Recipe) -> int:
    return max(1, int(round(np.log2(len(recipe.system.computational)))))


