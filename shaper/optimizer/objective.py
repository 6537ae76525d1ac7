"""From a recipe to one jitted value-and-gradient: the terms and the weights.

The arrays of the problem come from :mod:`shaper.costs.problem`; the terms from the
registry :data:`shaper.costs.terms.TERMS`.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Any

import jax
import numpy as np

from shaper import costs
from shaper.costs.problem import (
    Problem,
    chain_problem,
    open_scalings,
    qubit_count,
    recipe_layout,
)
from shaper.errors import InputError
from shaper.physics._jax import device
from shaper.physics.propagator import slice_unitaries
from shaper.recipe import Recipe, digest
from shaper.signal.chain import cells_of, for_recipe
from shaper.signal.labdrive import CorrectedDrive, LabDrive, smooth_worst
from shaper.signal.pulses import Layout, padded, to_samples


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
    signature: str = ""  # digest of the recipe without its duration: what for_recipe needs
    slices: Any = None  # jitted (params, problem) -> (slices, d, d) nominal slice unitaries
    chain: Any = None  # the signal chain the program closes over (signal.chain.Chain)

    def slice_states(self, params) -> tuple[np.ndarray, np.ndarray]:
        """Per-slice states of the nominal closed system, for methods that update slice by
        slice (GRAPE's gradient, Krotov-type sequential updates) rather than take the
        scalar and its gradient.

        Returns ``(forward, later)``, each ``(slices, d, d)``: ``forward[k] = P_k ... P_0``
        (the propagator after slice k) and ``later[k] = P_{n-1} ... P_{k+1}`` (what the
        slices after k do), so ``later[k] @ forward[k]`` is the whole propagator for
        every k; a backward state is ``later[k]^dag`` applied to the target.
        """
        return tuple(np.asarray(a) for a in _forward_later(
            self.slices(device(params, float), self.problem)))

    def for_recipe(self, recipe: Recipe) -> Objective:
        """This objective (same compiled code) on a recipe that differs only in duration.

        Raises:
            InputError: the recipe differs in more than its duration (another limit, system
                or weight would silently keep the old one), or does not fit the padded size.
        """
        if duration_free_digest(recipe) != self.signature or not shares_chain(
                for_recipe(recipe), self.chain):
            raise InputError(f"recipe {recipe.name!r} differs from this objective's in more "
                             f"than its duration; build an objective for it")
        layout = padded(recipe_layout(recipe), self.layout.samples)
        return dataclasses.replace(self, layout=layout,
                                   problem=chain_problem(recipe, self.chain, layout,
                                                         real=recipe.samples))


def shares_chain(chain, other) -> bool:
    """Whether a recipe of ``chain`` may run on a program compiled for ``other``: the same
    chain but for the pulse's length (no export padding, the same ring-down)."""
    def key(c):
        return tuple(np.asarray(v).tobytes() if isinstance(v, np.ndarray) else v
                     for f, v in vars(c).items() if f != "ring_residual_rad")
    return other is not None and not chain.lead and not chain.tail and key(chain) == key(other)


CORRECTED_PHASES = 16  # carrier phases of the corrected lab frame (each two kicks)


def corrected_phases(recipe: Recipe) -> tuple[float, ...]:
    """The carrier phases the corrected lab frame is judged on: the verdict's fixed phase,
    or :data:`CORRECTED_PHASES` over half a turn (its figures are smooth in the phase)."""
    if recipe.verdict.carrier_phase_deg is not None:
        return recipe.verdict.phases_rad()
    return tuple(np.pi * k / CORRECTED_PHASES for k in range(CORRECTED_PHASES))


def duration_free_digest(recipe: Recipe) -> str:
    """The recipe's digest with ``pulse.duration`` left out."""
    raw = dict(recipe.raw)
    raw["pulse"] = {k: v for k, v in raw.get("pulse", {}).items() if k != "duration"}
    return digest(raw)


_BUILT: dict[tuple, Objective] = {}  # the last few objectives of this process, by digest
KEEP_BUILT = 4


def make_objective(recipe: Recipe, *, pad_to: int | None = None) -> Objective:
    """The objective of a recipe, built once per process: a second run of the same recipe
    (same digest, response files included) reuses its compiled code and traces nothing
    (:func:`build_objective`)."""
    key = (recipe.sha256, pad_to)
    if key not in _BUILT:
        while len(_BUILT) >= KEEP_BUILT:
            _BUILT.pop(next(iter(_BUILT)))
        _BUILT[key] = build_objective(recipe, pad_to=pad_to)
    return _BUILT[key]


def build_objective(recipe: Recipe, *, pad_to: int | None = None) -> Objective:
    """Build the terms the recipe asks for and jit their weighted sum's value and gradient.

    ``pad_to`` (AWG samples): pad the slice count to this shared size with identity slices,
    so that recipes differing only in duration reuse the compiled code
    (:meth:`Objective.for_recipe`). Not with export padding or in the lab frame.
    """
    chain = for_recipe(recipe)  # what reaches the chip, as the propagator sees it
    layout = recipe_layout(recipe)
    mode = recipe.optimizer.lab_frame
    lab = LabDrive.for_chain(chain, recipe.system, recipe.samples) if mode == "exact" else None
    corrected = CorrectedDrive.for_chain(chain, recipe.system, corrected_phases(recipe),
                                         max(recipe.limits_hz.values())) \
        if mode == "corrected" else None
    if pad_to is not None and not chain.lead and not chain.tail and lab is None:
        layout = padded(layout, pad_to)
    qubits = qubit_count(recipe)
    problem = chain_problem(recipe, chain, layout)
    drive = None if chain.identity else chain
    if lab is not None:  # the lab frame's operators on its own slices (signal.labdrive)
        problem = problem._replace(controls=device(lab.terms.operators, complex),
                                   dt=device(lab.dt_s, float),
                                   active=device(np.ones(lab.slices()), float))
        phases = device(np.array(recipe.verdict.phases_rad()), float)
    flags = dict(qubits=qubits, is_gate=recipe.target.is_gate, virtual_z=recipe.virtual_z,
                 method=recipe.optimizer.propagator, drive=drive,
                 open_system=recipe.optimizer.open_system,
                 open_scalings=open_scalings(recipe, layout, chain.dt_s), corrected=corrected)
    w = recipe.weights
    terms = costs.terms_for(recipe, layout)
    names = tuple(t.name for t in terms)
    total = costs.combine(terms)

    traces = []

    def loss(params, problem, weights):
        traces.append(params.shape)  # runs at trace time only
        samples = to_samples(params, layout, problem.envelope)
        if lab is None:
            scores = costs.evaluate_members(samples, problem, **flags)
        else:  # every carrier phase, batched with the members: the worst, smoothly
            per_phase = jax.vmap(lambda phase: costs.evaluate_members(
                samples, problem, **{**flags, "drive": lambda x: lab(x, phase)}))(phases)
            scores = costs.Evaluation(nominal=smooth_worst(per_phase.nominal),
                                      members=jax.vmap(smooth_worst, in_axes=1)(
                                          per_phase.members))
        value, parts = total(samples, problem, scores, weights)
        return value, (parts, scores)

    vg = jax.jit(jax.value_and_grad(loss, has_aux=True))
    weights = np.array([w[n] for n in names], float)
    return Objective(problem=problem, layout=layout, names=names, weights=weights,
                     value_and_grad=vg, loss=loss, qubits=qubits, traces=traces,
                     signature=duration_free_digest(recipe),
                     slices=None if lab is not None or recipe.optimizer.open_system
                     else _slices_program(layout, drive, recipe.optimizer.propagator),
                     chain=chain)


def _slices_program(layout, drive, method: str):
    """The jitted ``(params, problem) -> (n, d, d)`` unitaries of every slice (what a
    sequential-update method needs, :meth:`Objective.slice_states`)."""
    @jax.jit
    def slices(params, problem):
        samples = to_samples(params, layout, problem.envelope)
        slopes = None
        if drive is not None:
            samples, slopes = cells_of(drive, samples)
        dt = (problem.dt * problem.active)[:, None, None]
        return slice_unitaries(problem.drift, problem.controls, samples, dt, method=method,
                               slopes=slopes)
    return slices


@jax.jit
def _forward_later(p):
    eye = jax.numpy.eye(p.shape[-1], dtype=p.dtype)

    def forward(c, u):
        c = u @ c
        return c, c

    def later(c, u):
        return c @ u, c

    return jax.lax.scan(forward, eye, p)[1], jax.lax.scan(later, eye, p, reverse=True)[1]
