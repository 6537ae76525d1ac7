"""Cost terms: small factories of pure functions, summed with weights by :func:`combine`.

Each factory returns a :class:`CostTerm`, whose ``value(samples, problem, scores)``
is a real scalar (unweighted). :func:`combine` sums ``weight * value`` over terms
and returns the parts beside the total, ready for
``jax.value_and_grad(..., has_aux=True)``. Weights are an array argument, so changing
them does not recompile. :data:`TERMS` drives the objective: a new term is one factory
and one :func:`register` call (built-in: one line in ``TERMS`` and its default weight in
the recipe schema).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from shaper.costs.problem import Evaluation, Problem, has_ensemble
from shaper.errors import InputError
from shaper.physics import _jax  # noqa: F401
from shaper.recipe import Recipe, schema
from shaper.signal.pulses import Layout


class CostTerm(NamedTuple):
    """A named cost: ``value(samples (n, k) Hz, problem, evaluation) -> ()`` real."""

    name: str
    value: Callable[[jax.Array, Problem, Evaluation], jax.Array]


def infidelity() -> CostTerm:
    """``1 - F``: the average gate infidelity (it includes leakage), or ``1 - |<f|U|i>|^2``."""
    return CostTerm("infidelity",
                    lambda samples, problem, scores: 1.0 - scores.nominal.fidelity)


def leakage() -> CostTerm:
    """The population leaving the computational subspace, as an extra weighted term."""
    return CostTerm("leakage", lambda samples, problem, scores: scores.nominal.leakage)


def out_of_band(samples: jax.Array, dt: jax.Array, cutoff_hz,
                iq_columns: np.ndarray, baseband_columns: np.ndarray,
                *, padding: int = 4) -> jax.Array:
    """Fraction of the pulse energy at |f| > cutoff (FFT of the zero-padded samples).

    I/Q channels are transformed as ``I + iQ`` (so the sidebands are told apart),
    baseband channels as real signals. ``cutoff_hz``: one cutoff, or one per signal (the
    I/Q pairs in order, then the baseband columns).
    """
    n = samples.shape[0]
    signals = [samples[:, i] + 1j * samples[:, q] for i, q in iq_columns]
    signals += [samples[:, c].astype(jnp.complex128) for c in baseband_columns]
    x = jnp.stack(signals, axis=0)
    f = jnp.fft.fft(x, n=padding * n, axis=-1)
    spectrum = jnp.real(f) ** 2 + jnp.imag(f) ** 2  # |f|^2 without abs: smooth at 0
    freqs = np.fft.fftfreq(padding * n)  # cycles per sample; times 1/dt gives Hz
    cutoffs = np.broadcast_to(np.asarray(cutoff_hz, float), (len(signals),))
    above = jnp.abs(freqs[None, :] / dt) > cutoffs[:, None]
    total = jnp.sum(spectrum)
    safe = jnp.where(total > 0, total, 1.0)  # double where: value and gradient 0 at no pulse
    return jnp.where(total > 0, jnp.sum(jnp.where(above, spectrum, 0.0)) / safe, 0.0)


def band_limited(recipe: Recipe, layout: Layout) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The driven I/Q pairs and baseband columns with a bandwidth limit, and their cutoffs
    (Hz, pairs first): what :func:`out_of_band` measures for a recipe."""
    limits = recipe.bandwidth_hz or {}
    iq, bb, cutoffs = [], [], []
    driven = set(layout.free_columns.tolist())
    for ch in recipe.system.channels:
        if ch.name in limits and ch.kind == "iq" and ch.columns[0] in driven:
            iq.append(ch.columns)
            cutoffs.append(limits[ch.name])
    for ch in recipe.system.channels:
        if ch.name in limits and ch.kind != "iq" and ch.columns[0] in driven:
            bb.append(ch.columns[0])
            cutoffs.append(limits[ch.name])
    return np.array(iq, int).reshape(-1, 2), np.array(bb, int), np.array(cutoffs, float)


def bandwidth(cutoff_hz, iq_columns: Sequence, baseband_columns: Sequence, *,
              sample_period_s: float | None = None) -> CostTerm:
    """The fraction of the pulse energy above ``cutoff_hz`` (see :func:`out_of_band`).

    ``sample_period_s`` is the AWG's; default ``problem.dt`` (they differ when the
    propagator runs on sub-steps).
    """
    iq, bb = np.asarray(iq_columns, int).reshape(-1, 2), np.asarray(baseband_columns, int)
    if not np.all(np.asarray(cutoff_hz, float) > 0):
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


class Registered(NamedTuple):
    """A cost term as a recipe knows it.

    ``factory`` makes the term from keywords (for code and tests); ``build`` makes it for a
    recipe and its pulse layout; ``enabled`` says whether the recipe turns it on. Its
    weight is ``recipe.weights[name]`` (key ``cost.<name>``, default in
    :data:`shaper.recipe.schema.DEFAULT_WEIGHTS`).
    """

    factory: Callable[..., CostTerm]
    build: Callable[[Recipe, Layout], CostTerm]
    enabled: Callable[[Recipe], bool]


def _cutoffs_first(limited):
    iq, bb, cutoffs = limited
    return cutoffs, iq, bb


def _weighted(name: str) -> Callable[[Recipe], bool]:
    return lambda recipe: recipe.weights[name] > 0


# The registry that drives the objective: a built-in term is its factory above, one line
# here and its default weight in shaper.recipe.schema.DEFAULT_WEIGHTS; a term from outside
# the package is one register() call.
TERMS: dict[str, Registered] = {
    "infidelity": Registered(infidelity, lambda r, layout: infidelity(), lambda r: True),
    "leakage": Registered(leakage, lambda r, layout: leakage(), _weighted("leakage")),
    "bandwidth": Registered(
        bandwidth,
        lambda r, layout: bandwidth(*_cutoffs_first(band_limited(r, layout)),
                                    sample_period_s=r.dt),
        lambda r: bool(r.bandwidth_hz) and r.weights["bandwidth"] > 0),
    "smoothness": Registered(smoothness, lambda r, layout: smoothness(layout.column_limits()),
                             _weighted("smoothness")),
    "amplitude": Registered(amplitude_limit,
                            lambda r, layout: amplitude_limit(layout.column_limits()),
                            _weighted("amplitude")),
    "robustness": Registered(robustness, lambda r, layout: robustness(), has_ensemble),
}


def register(name: str, term: Registered, weight: float) -> None:
    """A new cost term: built for a recipe by ``term.build`` where ``term.enabled`` says
    so, weighed by ``cost.<name>`` (a recipe key from now on, default ``weight``)
    (DEVELOPERS.md, "Where new things go")."""
    TERMS[name] = term
    schema.DEFAULT_WEIGHTS[name] = weight
    schema.KEYS["cost"] = tuple(dict.fromkeys(schema.KEYS["cost"] + (name,)))


def terms_for(recipe: Recipe, layout: Layout) -> list[CostTerm]:
    """The terms the recipe turns on, in registry order."""
    return [entry.build(recipe, layout) for entry in TERMS.values() if entry.enabled(recipe)]


def make_term(name: str, **options) -> CostTerm:
    """Make a registered cost term by its recipe name."""
    if name not in TERMS:
        raise InputError(f"unknown cost term {name!r}; known terms: {', '.join(TERMS)}")
    return TERMS[name].factory(**options)


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
