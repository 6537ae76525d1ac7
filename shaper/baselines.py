"""Textbook pulses to compare an optimised one against: Gaussian and DRAG, amplitude tuned.

For a one-qubit rotation target the report shows what the plain shapes reach at the
same length and limits: the Gaussian of :func:`shaper.pulses.gaussian_shape` and its
first-order DRAG version (Motzoi et al., Phys. Rev. Lett. 103, 110501 (2009)), each
with its amplitude scanned for the best fidelity, as a lab would calibrate it.
"""

from __future__ import annotations

import jax
import jax.numpy as jnp
import numpy as np

from shaper.costs import Problem, evaluate
from shaper.pulses import Layout, first_guess, rotation_area

SCALES = np.linspace(0.7, 1.3, 121)


def amplitude_scan(samples: np.ndarray, problem: Problem, scales: np.ndarray, *, qubits: int,
                   is_gate: bool, virtual_z: bool) -> tuple[np.ndarray, np.ndarray]:
    """Fidelity and leakage of ``samples * s`` for every ``s`` in ``scales`` (one vmap)."""
    def one(scale):
        f = evaluate(jnp.asarray(samples) * scale, problem, qubits=qubits, is_gate=is_gate,
                     virtual_z=virtual_z)
        return f.fidelity, f.leakage
    fid, leak = jax.jit(jax.vmap(one))(jnp.asarray(scales))
    return np.asarray(fid), np.asarray(leak)


def textbook_pulses(recipe, layout: Layout, qubits: int) -> dict:
    """Best amplitude-scanned Gaussian and DRAG pulses for a one-qubit rotation recipe.

    Returns an empty dict when the recipe is not a one-qubit rotation on a transmon.
    """
    label = recipe.target.label.upper()
    if qubits != 1 or label not in ("X", "Y", "X/2", "Y/2") or not recipe.target.is_gate:
        return {}
    if not recipe.system.transition_frequencies:
        return {}
    from shaper.objective import make_problem

    problem = make_problem(recipe)  # baseband, on the AWG grid
    out = {}
    limit = max(recipe.limits_hz.values())
    for kind in ("gaussian", "drag"):
        samples = first_guess(kind, recipe.system, layout, recipe.dt,
                              area=rotation_area(label), rng=np.random.default_rng(0),
                              axis="y" if label.startswith("Y") else "x")
        samples = samples * layout.envelope[:, None]
        fid, leak = amplitude_scan(samples, problem, SCALES, qubits=qubits, is_gate=True,
                                   virtual_z=recipe.virtual_z)
        best = int(np.argmax(fid))
        peak = float(np.max(np.hypot(samples[:, 0], samples[:, 1])) * SCALES[best])
        out[kind] = {"infidelity": float(1 - fid[best]), "leakage": float(leak[best]),
                     "amplitude_scale": float(SCALES[best]), "peak_rabi_hz": peak,
                     "within_limit": bool(peak <= limit)}
    return out
