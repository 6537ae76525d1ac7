"""From a recipe to one jitted value-and-gradient: the problem arrays, the terms, the weights."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import jax
import jax.numpy as jnp
import numpy as np

from shaper import costs
from shaper.costs import Problem
from shaper.modulation import held_drive, modulate, substeps
from shaper.pulses import Layout, make_layout, to_samples
from shaper.recipe import Recipe


@dataclass(frozen=True)
class Objective:
    """The compiled objective of a recipe.

    ``value_and_grad(params, weights) -> ((total, (parts, figures)), gradient)`` is jitted;
    ``params`` is ``(slices, k)`` float64, ``weights`` ``(len(names),)``.
    """

    problem: Problem
    layout: Layout
    names: tuple[str, ...]
    weights: np.ndarray
    value_and_grad: Any
    loss: Any
    qubits: int


def make_problem(recipe: Recipe) -> Problem:
    s, t = recipe.system, recipe.target
    dc = len(s.computational)
    zeros_vec = np.zeros(dc, complex)
    return Problem(
        drift=jnp.asarray(s.drift), controls=jnp.asarray(s.controls),
        dt=jnp.asarray(recipe.dt), computational=jnp.asarray(s.computational),
        target=jnp.asarray(t.unitary if t.is_gate else np.zeros((dc, dc), complex)),
        initial=jnp.asarray(zeros_vec if t.is_gate else t.initial),
        final=jnp.asarray(zeros_vec if t.is_gate else t.final),
        number_operators=jnp.asarray(s.number_operators),
        detunings=jnp.asarray(recipe.ensemble_detunings_hz, dtype=jnp.float64),
        scales=jnp.asarray(recipe.ensemble_scales, dtype=jnp.float64))


def qubit_count(recipe: Recipe) -> int:
    return max(1, int(round(np.log2(len(recipe.system.computational)))))


def make_objective(recipe: Recipe) -> Objective:
    """Build the terms the recipe asks for and jit their weighted sum's value and gradient."""
    layout = make_layout(recipe.system, recipe.limits_hz, recipe.samples, hold=recipe.hold,
                         zero_ends=recipe.zero_ends, ramp_samples=recipe.ramp_samples)
    qubits = qubit_count(recipe)
    problem = make_problem(recipe)
    drive = None
    if recipe.export.if_frequency_hz:
        # optimise what the instrument plays: held IF-modulated samples, on sub-steps
        f_if, side, dt = recipe.export.if_frequency_hz, recipe.export.sideband, recipe.dt
        steps = substeps(f_if, dt)
        pairs = layout.iq_columns

        def drive(samples):
            return held_drive(modulate(samples, pairs, f_if, dt, side), pairs, f_if, dt, side,
                              steps=steps)
        problem = problem._replace(dt=jnp.asarray(dt / steps))
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
    ensemble = len(recipe.ensemble_scales) > 1 or np.any(recipe.ensemble_detunings_hz != 0) \
        or np.any(recipe.ensemble_scales != 1)
    if ensemble and w["robustness"] > 0:
        terms.append(costs.robustness(**flags))
    names = tuple(t.name for t in terms)
    total = costs.combine(terms)

    def loss(params, problem, weights):
        samples = to_samples(params, layout)
        figures = costs.evaluate(samples, problem, **flags)
        value, parts = total(samples, problem, figures, weights)
        return value, (parts, figures)

    vg = jax.jit(jax.value_and_grad(loss, has_aux=True))
    weights = np.array([w[n] for n in names], float)
    return Objective(problem=problem, layout=layout, names=names, weights=weights,
                     value_and_grad=vg, loss=loss, qubits=qubits)
