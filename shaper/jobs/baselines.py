"""Textbook pulses to compare an optimised one against, calibrated as a lab would.

For a one-qubit rotation on a transmon the report shows what the plain shapes reach at
the same length: the Gaussian of :func:`shaper.signal.pulses.gaussian_shape` with its amplitude
calibrated, and the DRAG pulse (Motzoi, Gambetta, Rebentrost and Wilhelm, Phys. Rev. Lett.
103, 110501 (2009)) with its amplitude, DRAG coefficient and drive detuning calibrated
together (the detuning absorbs the AC Stark shift that first-order DRAG leaves). Each is
a few hundred evaluations of one jitted function, so the comparison stays cheap; systems
of more than :data:`MAX_LEVELS` levels are skipped.
"""

from __future__ import annotations

import jax
import jax.numpy as jnp
import numpy as np
import scipy.optimize

from shaper.costs import evaluate
from shaper.signal.pulses import Layout, gaussian_shape, rotation_area

MAX_LEVELS = 12
MAX_EVALUATIONS = 300


def textbook_pulses(recipe, layout: Layout, qubits: int) -> dict:
    """Calibrated Gaussian and DRAG pulses for a one-qubit rotation recipe.

    Returns an empty dict when the recipe is not a one-qubit rotation on a transmon, and
    ``{"skipped": reason}`` for systems too large to be worth the time.

    Each entry: infidelity, leakage, the calibrated ``amplitude_scale`` (of the pulse with
    the rotation's area), ``drag_coefficient`` (multiple of the first-order correction
    ``Q = -dI/dt / (2 pi alpha)``), ``detuning_hz`` (the drive moved to ``f_d + detuning``,
    i.e. the samples turned by ``exp(-2 pi i detuning t)``), ``peak_rabi_hz`` and whether
    it stays within the recipe's limit.
    """
    label = recipe.target.label.upper()
    if qubits != 1 or label not in ("X", "Y", "X/2", "Y/2") or not recipe.target.is_gate:
        return {}
    freqs = recipe.system.transition_frequencies
    if not freqs or len(recipe.system.channels) != 1:
        return {}
    if recipe.system.dimension > MAX_LEVELS:
        return {"skipped": f"more than {MAX_LEVELS} levels: not worth the time"}
    from shaper.costs.problem import chain_problem
    from shaper.signal.chain import for_recipe

    chain = for_recipe(recipe)  # played as the optimised pulse is: IF, line
    problem = chain_problem(recipe, chain)
    channel = recipe.system.channels[0]
    tf = freqs[channel.name]
    alpha = tf["f12_hz"] - tf["f01_hz"]
    n, dt = recipe.samples, recipe.dt
    envelope = layout.envelope[:n]
    main = rotation_area(label) * gaussian_shape(n, dt) * envelope
    quad = -np.gradient(main, dt) / (2 * np.pi * alpha) if alpha else np.zeros(n)
    t = (np.arange(n) + 0.5) * dt
    i_col, q_col = channel.columns
    turn = 1j if label.startswith("Y") else 1.0

    def samples(theta, xp=jnp):  # NumPy for the files and the report: no JAX op outside jit
        scale, beta, detuning_mhz = theta[0], theta[1], theta[2]
        z = scale * (main + 1j * beta * quad) * turn * xp.exp(-2j * np.pi * detuning_mhz
                                                              * 1e6 * t)
        columns = [xp.zeros(n)] * layout.controls
        columns[i_col], columns[q_col] = xp.real(z), xp.imag(z)
        return xp.stack(columns, axis=1)

    @jax.jit
    def figures(theta):
        f = evaluate(samples(theta), problem, qubits=1, is_gate=True,
                     virtual_z=recipe.virtual_z, drive=None if chain.identity else chain)
        return f.fidelity, f.leakage

    def loss(theta):
        return 1.0 - float(figures(np.asarray(theta, float))[0])

    limit = recipe.limits_hz[channel.name]
    gauss = scipy.optimize.minimize_scalar(lambda s: loss([s, 0.0, 0.0]), bounds=(0.5, 1.5),
                                           method="bounded",
                                           options={"xatol": 1e-6, "maxiter": 100})
    drag = scipy.optimize.minimize(loss, [gauss.x, 1.0 if alpha else 0.0, 0.0],
                                   method="Nelder-Mead",
                                   options={"maxfev": MAX_EVALUATIONS, "xatol": 1e-7,
                                            "fatol": 1e-14})
    out = {}
    for kind, theta in (("gaussian", [gauss.x, 0.0, 0.0]), ("drag", list(drag.x))):
        fid, leak = figures(np.asarray(theta, float))
        played = samples(np.asarray(theta, float), np)
        peak = float(np.max(np.hypot(played[:, i_col], played[:, q_col])))
        out[kind] = {"infidelity": float(1 - fid), "leakage": float(leak),
                     "amplitude_scale": float(theta[0]), "drag_coefficient": float(theta[1]),
                     "detuning_hz": float(theta[2]) * 1e6, "peak_rabi_hz": peak,
                     "within_limit": bool(peak <= limit)}
    return out

