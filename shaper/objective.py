"""From a recipe to one jitted value-and-gradient: the problem arrays, the terms, the weights."""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Any

import jax
import jax.numpy as jnp
import numpy as np

from shaper import costs
from shaper.costs import Problem
from shaper.modulation import held_drive, modulate, substeps
from shaper.pulses import Layout, make_layout, padded, to_samples
from shaper.recipe import Recipe


@dataclass(frozen=True)
class Objective:
    """The compiled objective of a recipe.

    ``value_and_grad(params, problem, weights) -> ((total, (parts, scores)), gradient)`` is
    jitted; ``params`` is ``(slices, k)`` float64, ``weights`` ``(len(names),)``, ``scores``
    a :class:`~shaper.costs.Evaluation` (nominal figures and every ensemble member's).
    """

    problem: Problem
    layout: Layout
    names: tuple[str, ...]
    weights: np.ndarray
    value_and_grad: Any
    loss: Any
    qubits: int
    traces: list  # one entry per trace of the loss: how often it was (re)compiled

    def for_recipe(self, recipe: Recipe) -> Objective:
        """This objective (same compiled code) on a recipe that differs only in duration.

        The recipe's samples must fit this objective's padded size.
        """
        layout = padded(recipe_layout(recipe), self.layout.samples)
        return dataclasses.replace(self, layout=layout,
                                   problem=make_problem(recipe, layout, real=recipe.samples))


def recipe_layout(recipe: Recipe) -> Layout:
    return make_layout(recipe.system, recipe.limits_hz, recipe.samples, hold=recipe.hold,
                       zero_ends=recipe.zero_ends, ramp_samples=recipe.ramp_samples)


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
    zeros_vec = np.zeros(dc, complex)
    return Problem(
        drift=jnp.asarray(s.drift), controls=jnp.asarray(s.controls),
        dt=jnp.asarray(recipe.dt), computational=jnp.asarray(s.computational),
        target=jnp.asarray(t.unitary if t.is_gate else np.zeros((dc, dc), complex)),
        initial=jnp.asarray(zeros_vec if t.is_gate else t.initial),
        final=jnp.asarray(zeros_vec if t.is_gate else t.final),
        number_operators=jnp.asarray(s.number_operators),
        detunings=jnp.asarray(np.concatenate([np.zeros((1, subsystems)), ensemble_detunings]),
                              dtype=jnp.float64),
        scales=jnp.asarray(np.concatenate([[1.0], ensemble_scales]), dtype=jnp.float64),
        envelope=jnp.asarray(layout.envelope), active=jnp.asarray(active))


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
    return problem._replace(dt=jnp.asarray(period / steps),
                            envelope=jnp.ones(samples), active=jnp.ones(samples * steps))


def has_ensemble(recipe: Recipe) -> bool:
    """True when the recipe asks for robustness over detunings or amplitude scales."""
    return (len(recipe.ensemble_scales) > 1 or bool(np.any(recipe.ensemble_detunings_hz != 0))
            or bool(np.any(recipe.ensemble_scales != 1))) and recipe.weights["robustness"] > 0


def qubit_count(recipe: Recipe) -> int:
    return max(1, int(round(np.log2(len(recipe.system.computational)))))


def make_objective(recipe: Recipe, *, pad_to: int | None = None) -> Objective:
    """Build the terms the recipe asks for and jit their weighted sum's value and gradient.

    ``pad_to`` (AWG samples): pad the slice count to this shared size with identity slices,
    so that recipes differing only in duration reuse the compiled code
    (:meth:`Objective.for_recipe`). Not with an IF export.
    """
    layout = recipe_layout(recipe)
    if pad_to is not None and not recipe.export.if_frequency_hz:
        layout = padded(layout, pad_to)
    qubits = qubit_count(recipe)
    problem = make_problem(recipe, layout, real=recipe.samples)
    drive = None
    if recipe.export.if_frequency_hz:
        # optimise what the instrument plays: held IF-modulated samples, on sub-steps
        f_if, side, dt = recipe.export.if_frequency_hz, recipe.export.sideband, recipe.dt
        steps = substeps(f_if, dt)
        pairs = layout.iq_columns

        def drive(samples):
            return held_drive(modulate(samples, pairs, f_if, dt, side), pairs, f_if, dt, side,
                              steps=steps)
        problem = make_problem(recipe, layout, steps=steps)._replace(dt=jnp.asarray(dt / steps))
    flags = dict(qubits=qubits, is_gate=recipe.target.is_gate, virtual_z=recipe.virtual_z,
                 method=recipe.optimizer.propagator, drive=drive)
    w = recipe.weights
    terms = [costs.infidelity()]
    if w["leakage"] > 0:
        terms.append(costs.leakage())
    if recipe.bandwidth_hz and w["bandwidth"] > 0:
        terms.append(costs.bandwidth(recipe.bandwidth_hz, layout.iq_columns,
                                     layout.baseband_columns, sample_period_s=recipe.dt))
    if w["smoothness"] > 0:
        terms.append(costs.smoothness(layout.column_limits()))
    if w["amplitude"] > 0:
        terms.append(costs.amplitude_limit(layout.column_limits()))
    if has_ensemble(recipe):
        terms.append(costs.robustness())
    names = tuple(t.name for t in terms)
    total = costs.combine(terms)

    traces = []

    def loss(params, problem, weights):
        traces.append(params.shape)  # runs at trace time only
        samples = to_samples(params, layout, problem.envelope)
        scores = costs.evaluate_members(samples, problem, **flags)
        value, parts = total(samples, problem, scores, weights)
        return value, (parts, scores)

    vg = jax.jit(jax.value_and_grad(loss, has_aux=True))
    weights = np.array([w[n] for n in names], float)
    return Objective(problem=problem, layout=layout, names=names, weights=weights,
                     value_and_grad=vg, loss=loss, qubits=qubits, traces=traces)
