"""How a played file fares off its nominal system: every ensemble member's figures, and the
infidelity against a detuning offset and an amplitude scale with its first-order slopes.

Each is one jitted program (one batched eigendecomposition, DEVELOPERS.md: never op by op)
per set of static flags and chain, kept for the process and keyed by an exact digest of
what it closes over, so a second file of the same layout traces nothing.
:class:`shaper.jobs.playback.Playback` asks here (``members``, ``sensitivity``).
"""

from __future__ import annotations

import hashlib
import pickle

import numpy as np

from shaper.costs.problem import qubit_count, waveform_problem
from shaper.physics._jax import device
from shaper.recipe import Recipe


def _problem_and_flags(recipe: Recipe, chain, samples: np.ndarray) -> tuple:
    """The file's problem on the chain's own grid and the flags of its evaluation."""
    problem = waveform_problem(recipe, chain.played_samples(samples.shape[0]),
                               steps=chain.steps, dt=chain.period_s)
    flags = dict(qubits=qubit_count(recipe), is_gate=recipe.target.is_gate,
                 virtual_z=recipe.virtual_z, drive=None if chain.identity else chain)
    return problem, flags


def member_figures(recipe: Recipe, chain, samples: np.ndarray) -> tuple[list, list]:
    """Infidelity and leakage of every ensemble member of ``recipe`` (rotating frame, its
    levels) for the file's ``samples`` (Hz) through ``chain``, on the chain's own grid
    (accurate to about 1e-9 with sub-steps)."""
    problem, flags = _problem_and_flags(recipe, chain, samples)
    flags["method"] = recipe.optimizer.propagator
    scores = _members_program(flags)(device(samples, float), problem)
    fid, leak = np.asarray(scores.members.fidelity), np.asarray(scores.members.leakage)
    return (1.0 - fid[1:]).tolist(), leak[1:].tolist()


def sensitivity(recipe: Recipe, chain, samples: np.ndarray, detunings: np.ndarray,
                scales: np.ndarray) -> dict:
    """Infidelity of the file against a detuning offset ``detunings`` (Hz, on every level's
    number operator) and an amplitude scale ``scales``, with the first-order slopes (the
    recipe's model, the chain's grid)."""
    problem, flags = _problem_and_flags(recipe, chain, samples)
    vs_detuning, vs_scale, slopes = _sensitivity_programs(flags)
    x = device(samples, float)
    curve_d = vs_detuning(x, problem, device(detunings, float))
    curve_s = vs_scale(x, problem, device(scales, float))
    slope_d, slope_s = slopes(x, problem)
    return {"detuning_hz": detunings.tolist(),
            "infidelity_vs_detuning": np.asarray(curve_d).tolist(),
            "amplitude_scale": scales.tolist(),
            "infidelity_vs_scale": np.asarray(curve_s).tolist(),
            "d_infidelity_d_detuning_per_mhz": float(slope_d) * 1e6,
            "d_infidelity_d_scale_per_percent": float(slope_s) * 1e-2}


def _members_program(flags: dict):
    """One jitted ensemble evaluation per set of static flags and chain, kept for the
    process (a second file with the same layout is not traced again)."""
    # exact, not repr: NumPy's repr elides long arrays (a measured line response), and two
    # chains that print alike must not share a program that closes over one of them
    key = hashlib.sha256(pickle.dumps(sorted(flags.items(), key=lambda item: item[0]))
                         ).hexdigest()
    if key not in _MEMBERS:
        import jax

        from shaper.costs import evaluate_members
        if len(_MEMBERS) >= 16:
            _MEMBERS.pop(next(iter(_MEMBERS)))
        _MEMBERS[key] = jax.jit(lambda x, p: evaluate_members(x, p, **flags))
    return _MEMBERS[key]


_MEMBERS: dict = {}  # digest of the static flags (and chain) -> compiled program


_SENSITIVITY: dict[str, tuple] = {}


def _sensitivity_programs(flags: dict) -> tuple:
    """The three jitted programs of the sensitivity (one eigendecomposition each,
    DEVELOPERS.md: never op by op), built once per process for these flags (keyed by an
    exact digest of them, as :func:`_members_program`)."""
    key = hashlib.sha256(pickle.dumps(flags)).hexdigest()
    if key not in _SENSITIVITY:
        import jax
        import jax.numpy as jnp

        from shaper.costs import evaluate

        def infidelity(x, problem, delta, scale):
            drift = problem.drift + delta * jnp.sum(problem.number_operators, axis=0)
            return 1.0 - evaluate(x * scale, problem._replace(drift=drift), **flags).fidelity

        _SENSITIVITY[key] = (
            jax.jit(lambda x, p, d: jax.vmap(lambda di: infidelity(x, p, di, 1.0))(d)),
            jax.jit(lambda x, p, s: jax.vmap(lambda si: infidelity(x, p, 0.0, si))(s)),
            jax.jit(lambda x, p: jax.grad(infidelity, argnums=(2, 3))(x, p, 0.0, 1.0)))
    return _SENSITIVITY[key]
